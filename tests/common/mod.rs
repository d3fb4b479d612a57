//! Shared helpers for the integration tests: the throwaway PostGIS that
//! `scripts/test.sh` starts, the geofold binary, scratch directories.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};

/// The test database URI. Integration tests need the PostGIS that
/// `bash scripts/test.sh` starts; without it they fail rather than pass unseen.
pub fn db_uri() -> String {
    std::env::var("GEOFOLD_TEST_DB")
        .expect("GEOFOLD_TEST_DB is not set: run the suite with `bash scripts/test.sh`, which starts PostGIS")
}

static COUNTER: AtomicUsize = AtomicUsize::new(0);

/// A schema name unique to this test process and call, e.g. `t_1234_7_bad_ids`.
pub fn unique_name(label: &str) -> String {
    format!(
        "t_{}_{}_{label}",
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::SeqCst)
    )
}

/// Runs SQL through psql (ON_ERROR_STOP) and returns stdout (unaligned, tuples only,
/// fields separated by `|`). Panics with psql's stderr on failure.
pub fn psql(sql: &str) -> String {
    let output = Command::new("psql")
        .arg(db_uri())
        .args(["-X", "-q", "-A", "-t", "-v", "ON_ERROR_STOP=1", "-c", sql])
        .output()
        .expect("psql runs");
    assert!(
        output.status.success(),
        "psql failed on {sql}:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8_lossy(&output.stdout)
        .trim_end()
        .to_string()
}

/// Runs a SQL script (several statements) through psql.
pub fn psql_script(sql: &str) {
    let output = Command::new("psql")
        .arg(db_uri())
        .args(["-X", "-q", "-v", "ON_ERROR_STOP=1"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .and_then(|mut child| {
            use std::io::Write;
            child
                .stdin
                .take()
                .expect("stdin")
                .write_all(sql.as_bytes())?;
            child.wait_with_output()
        })
        .expect("psql runs");
    assert!(
        output.status.success(),
        "psql script failed:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
}

/// A scratch directory removed at drop.
pub struct Workdir {
    pub dir: tempfile::TempDir,
}

impl Workdir {
    pub fn new() -> Workdir {
        Workdir {
            dir: tempfile::tempdir().expect("scratch dir"),
        }
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    pub fn root(&self) -> &Path {
        self.dir.path()
    }

    /// The geofold binary, run in this directory.
    pub fn geofold(&self) -> Command {
        let mut command = Command::new(env!("CARGO_BIN_EXE_geofold"));
        command.current_dir(self.dir.path());
        command.env("NO_COLOR", "1");
        command
    }
}

/// Runs and returns the output; prints stderr when the test fails later.
pub fn run(mut command: Command) -> Output {
    let output = command.output().expect("geofold runs");
    eprintln!("stderr: {}", String::from_utf8_lossy(&output.stderr));
    output
}

/// The exit code (panics on a signal).
pub fn code(output: &Output) -> i32 {
    output.status.code().expect("exited normally")
}

/// Parses stdout as JSON.
pub fn json(output: &Output) -> serde_json::Value {
    serde_json::from_slice(&output.stdout).unwrap_or_else(|e| {
        panic!(
            "stdout is not JSON ({e}):\n{}",
            String::from_utf8_lossy(&output.stdout)
        )
    })
}

/// Checks that `schema.layer` is a layer QGIS lists with no hand work: registered in
/// geometry_columns with `geometry_type` and `srid` (so its geometry column has a
/// type modifier), and its first column `key` an integer unique over its `rows` rows.
pub fn check_qgis_layer(
    schema: &str,
    layer: &str,
    key: &str,
    geometry_type: &str,
    srid: i32,
    rows: usize,
) {
    assert_eq!(
        psql(&format!(
            "SELECT type, srid FROM geometry_columns WHERE f_table_schema = '{schema}' AND f_table_name = '{layer}'"
        )),
        format!("{geometry_type}|{srid}"),
        "{schema}.{layer} in geometry_columns"
    );
    assert_eq!(
        psql(&format!(
            "SELECT attname, atttypid::regtype FROM pg_attribute WHERE attrelid = '{schema}.{layer}'::regclass AND attnum = 1"
        )),
        format!("{key}|integer"),
        "first column of {schema}.{layer}"
    );
    assert_eq!(
        psql(&format!(
            "SELECT count(*), count(DISTINCT {key}) FROM {schema}.{layer}"
        )),
        format!("{rows}|{rows}"),
        "{key} is unique in {schema}.{layer}"
    );
}

/// The Python of the project's own virtual environment, holding the test-time
/// reference libraries (numpy, scipy, statsmodels, scikit-learn, libpysal,
/// esda; `tests/python/requirements.txt`). `bash scripts/test.sh` creates it
/// (`scripts/python-env.sh`) and exports its path as `GEOFOLD_PYTHON`.
pub fn python() -> Command {
    let path = std::env::var("GEOFOLD_PYTHON").expect(
        "GEOFOLD_PYTHON is not set: run the suite with `bash scripts/test.sh`, \
         or set it to the python printed by `bash scripts/python-env.sh`",
    );
    Command::new(path)
}

/// Runs a reference script from `tests/python/` (or `tests/fixtures/`) with
/// the reference Python, feeding `input` on stdin; returns stdout. Panics
/// with the script's stderr when it fails.
pub fn python_script(script: &str, args: &[&str], input: &str) -> String {
    use std::io::Write;
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join(script);
    let mut child = python()
        .arg(&path)
        .args(args)
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("the reference python runs");
    child
        .stdin
        .take()
        .expect("stdin")
        .write_all(input.as_bytes())
        .expect("write to the reference script");
    let output = child.wait_with_output().expect("reference script finishes");
    assert!(
        output.status.success(),
        "{script} failed:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8(output.stdout).expect("UTF-8 from the reference script")
}

/// Runs SQL through psql against another server than the suite's (ON_ERROR_STOP)
/// and returns stdout as [`psql`] does.
pub fn psql_at(uri: &str, sql: &str) -> String {
    let output = Command::new("psql")
        .arg(uri)
        .args(["-X", "-q", "-A", "-t", "-v", "ON_ERROR_STOP=1", "-c", sql])
        .env_remove("PGSERVICE")
        .env_remove("PGSSLMODE")
        .env_remove("PGOPTIONS")
        .output()
        .expect("psql runs");
    assert!(
        output.status.success(),
        "psql failed on {sql}:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8_lossy(&output.stdout)
        .trim_end()
        .to_string()
}

/// A throwaway cluster of its own, started by `scripts/pg-throwaway.sh` with
/// the given knobs (`PG_THROWAWAY_TLS`, `PG_THROWAWAY_SERVER_CERT`, …) and
/// stopped and removed when dropped, also when the test fails.
pub struct Cluster {
    /// The cluster's directory under /tmp.
    pub dir: PathBuf,
    /// `postgresql://postgres@127.0.0.1:PORT/geofold_test`.
    pub uri: String,
    /// Its TCP port on 127.0.0.1.
    pub port: u16,
}

impl Cluster {
    pub fn start(knobs: &[(&str, &str)]) -> Cluster {
        let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/pg-throwaway.sh");
        // /tmp, not TMPDIR: the postgres OS user must reach it and the socket path must stay short.
        let dir = tempfile::Builder::new()
            .prefix("geofold-pg.")
            .tempdir_in("/tmp")
            .expect("cluster dir")
            .keep();
        let output = Command::new("bash")
            .arg(&script)
            .arg("start")
            .arg(&dir)
            .envs(knobs.iter().copied())
            .output()
            .expect("pg-throwaway.sh runs");
        let uri = String::from_utf8_lossy(&output.stdout).trim().to_string();
        let port = uri
            .rsplit_once(':')
            .and_then(|(_, rest)| rest.split('/').next())
            .and_then(|p| p.parse().ok())
            .unwrap_or(0);
        // Made before the checks, so a failed start is still cleaned up.
        let cluster = Cluster { dir, uri, port };
        assert!(
            output.status.success() && cluster.port != 0,
            "starting a cluster failed:\n{}",
            String::from_utf8_lossy(&output.stderr)
        );
        cluster
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/pg-throwaway.sh");
        let _ = Command::new("bash")
            .arg(script)
            .arg("stop")
            .arg(&self.dir)
            .output();
    }
}
