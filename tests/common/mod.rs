//! Shared helpers for the integration tests: the geofold binary in a scratch
//! directory, the throwaway PostGIS that `scripts/test.sh` starts, GDAL as
//! the outside reader and writer of GeoPackages, named fixtures, and the
//! harness that runs one case on PostGIS and on GeoPackage.
//!
//! - [`pg`]: psql, scratch schemas, roles, other sessions (readers, watchers).
//! - [`gdal`]: `ogrinfo`, `ogr2ogr`, `validate_gpkg.py`, file hashes and listings.
//! - [`fixtures`]: the invented test tables (lattices, bad rows, GeoJSON).
//! - [`reference`]: stored results checked against SQL, PostGIS and numpy.
//! - [`stores`]: the both-store harness.
//! - [`chromium`]: headless Chromium and PNG decoding for pixel checks.
#![allow(dead_code)]

pub mod chromium;
pub mod fixtures;
pub mod gdal;
pub mod pg;
pub mod reference;
pub mod stores;

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::time::{Duration, Instant};

#[allow(unused_imports)]
pub use pg::{db_uri, psql, psql_at, psql_script, unique_name};

/// A scratch directory removed at drop.
pub struct Workdir {
    pub dir: tempfile::TempDir,
}

impl Default for Workdir {
    fn default() -> Workdir {
        Workdir::new()
    }
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

    /// `geofold ARGS` in this directory, run to the end.
    pub fn run<S: AsRef<std::ffi::OsStr>>(&self, args: &[S]) -> Output {
        let mut command = self.geofold();
        command.args(args);
        run(command)
    }

    /// `geofold ARGS` started in the background, its output piped.
    pub fn spawn<S: AsRef<std::ffi::OsStr>>(&self, args: &[S]) -> Child {
        self.geofold()
            .args(args)
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("geofold starts")
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

/// stdout as text.
pub fn stdout(output: &Output) -> String {
    String::from_utf8_lossy(&output.stdout).into_owned()
}

/// stderr as text.
pub fn stderr(output: &Output) -> String {
    String::from_utf8_lossy(&output.stderr).into_owned()
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

/// Asserts exit 0 and returns the JSON document.
pub fn ok_json(output: &Output) -> serde_json::Value {
    assert_eq!(code(output), 0, "geofold failed: {}", stderr(output));
    json(output)
}

/// Asserts the exit code and returns stderr.
pub fn fails(output: &Output, expected: i32) -> String {
    let message = stderr(output);
    assert_eq!(code(output), expected, "stderr: {message}");
    message
}

/// Asserts that `text` contains every part.
pub fn assert_contains(text: &str, parts: &[&str]) {
    for part in parts {
        assert!(text.contains(part), "expected {part:?} in:\n{text}");
    }
}

/// `runs[index].run_id` of a summary.
pub fn run_id(document: &serde_json::Value, index: usize) -> String {
    document["runs"][index]["run_id"]
        .as_str()
        .unwrap_or_else(|| panic!("no runs[{index}].run_id in {document}"))
        .to_string()
}

/// Polls `condition` every 20 ms until it holds; panics after `limit`
/// naming `what`. Not a timing check: the limit only keeps a broken test
/// from hanging.
pub fn wait_until(what: &str, limit: Duration, mut condition: impl FnMut() -> bool) {
    let started = Instant::now();
    while !condition() {
        assert!(started.elapsed() < limit, "gave up waiting for {what}");
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// Kills a child with SIGKILL (`kill -9`: no cleanup runs) and reaps it.
pub fn kill_9(child: &mut Child) {
    child.kill().expect("SIGKILL the child");
    let status = child.wait().expect("reap the child");
    use std::os::unix::process::ExitStatusExt;
    assert_eq!(
        status.signal(),
        Some(9),
        "the child was killed by SIGKILL, not finished ({status})"
    );
}

/// The results tables that hold a run's rows (src/results/mod.rs) and the
/// column naming the run, for checks that a failed or removed run left none.
pub const RUN_TABLES: &[(&str, &str)] = &[
    ("held_out", "run_id"),
    ("unit_summaries", "run_id"),
    ("folds", "run_id"),
    ("fold_score_values", "run_id"),
    ("run_score_values", "run_id"),
    ("fold_regions", "run_id"),
    ("fold_exclusions", "run_id"),
    ("coefficients", "run_id"),
    ("fold_distances", "run_id"),
    ("nearest_distances", "run_id"),
    // Each run's held-out residual Moran's I.
    ("diagnostics", "analysis_id"),
];

/// Two numbers read through different tools agree to 1e-12 relative (text
/// round trips may differ in the last digits).
pub fn assert_close(a: f64, b: f64, what: &str) {
    assert!(
        (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1.0),
        "{what}: {a} vs {b}"
    );
}

/// Compares two tables of rows (fields as text) field by field: numbers to
/// 1e-12 relative, everything else exactly; `what` names the comparison.
pub fn assert_rows_match(a: &[Vec<String>], b: &[Vec<String>], what: &str) {
    assert_eq!(a.len(), b.len(), "{what}: row counts\n{a:?}\n{b:?}");
    for (row_a, row_b) in a.iter().zip(b) {
        assert_eq!(row_a.len(), row_b.len(), "{what}: {row_a:?} vs {row_b:?}");
        for (x, y) in row_a.iter().zip(row_b) {
            match (x.parse::<f64>(), y.parse::<f64>()) {
                (Ok(x), Ok(y)) => assert_close(x, y, &format!("{what}: {row_a:?} vs {row_b:?}")),
                _ => assert_eq!(x, y, "{what}: {row_a:?} vs {row_b:?}"),
            }
        }
    }
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
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
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
