//! Helpers shared by `tests/nightly.rs` and `tests/faults.rs`: a test's own
//! source and results schemas with an invented lattice of units, job files,
//! and reading the results tables back with psql.
#![allow(dead_code)]

pub mod proxy;

use std::path::PathBuf;
use std::process::{Command, Output};

use crate::common::{db_uri, psql, psql_script, unique_name, Workdir};

/// A test's source schema `s` (with the lattice table `s.plots`) and results
/// schema `r`, dropped when the test passes (kept for a look when it fails).
pub struct Case {
    pub source: String,
    pub results: String,
    pub workdir: Workdir,
}

impl Case {
    /// Makes the schemas and a `side × side` lattice of 1 km squares in
    /// EPSG:32631 with invented columns `wetness`, `slope` and `yield`.
    pub fn new(label: &str, side: u32) -> Case {
        let source = unique_name(label);
        let results = format!("{source}_r");
        psql_script(&lattice_sql(&source, side));
        Case {
            source,
            results,
            workdir: Workdir::new(),
        }
    }

    /// `s.plots`.
    pub fn table(&self) -> String {
        format!("{}.plots", self.source)
    }

    /// Writes a job file into the work directory.
    pub fn job_file(&self, name: &str, text: &str) -> PathBuf {
        let path = self.workdir.path(name);
        std::fs::write(&path, text).expect("write the job file");
        path
    }

    /// A job table for the lattice with these extra lines.
    pub fn job(&self, name: &str, db: &str, extra: &str) -> String {
        format!(
            "[job.{name}]\ndb = \"{db}\"\ntable = \"{}\"\ntarget = \"yield\"\nfeatures = [\"wetness\", \"slope\"]\n\
             results-schema = \"{}\"\n{extra}\n",
            self.table(),
            self.results
        )
    }

    /// geofold in the work directory, connection retry off unless set.
    pub fn geofold(&self, args: &[&str]) -> Command {
        let mut command = self.workdir.geofold();
        command.env("GEOFOLD_CONNECT_RETRY", "0");
        command.args(args);
        command
    }

    /// `geofold run` of the lattice (target yield, features wetness and slope)
    /// through `db` into the case's results schema as job `job`, with `extra`.
    pub fn run_command(&self, db: &str, job: &str, extra: &[&str]) -> Command {
        let table = self.table();
        let mut args = vec![
            "run",
            "--db",
            db,
            "--table",
            &table,
            "--target",
            "yield",
            "--features",
            "wetness,slope",
            "--results-schema",
            &self.results,
            "--job",
            job,
        ];
        args.extend_from_slice(extra);
        self.geofold(&args)
    }

    /// Runs geofold and returns its output (stderr printed for a failing test).
    pub fn run(&self, args: &[&str]) -> Output {
        crate::common::run(self.geofold(args))
    }

    /// `SELECT` on the results schema (`{r}` stands for it, `{s}` for the source).
    pub fn query(&self, sql: &str) -> String {
        psql(
            &sql.replace("{r}", &self.results)
                .replace("{s}", &self.source),
        )
    }

    /// Rows of run `run_id` in every table that holds rows of runs (0 when
    /// the results tables do not exist yet).
    pub fn rows_of_run(&self, run_id: &str) -> u64 {
        if self.query("SELECT to_regclass('{r}.runs') IS NULL") == "t" {
            return 0;
        }
        crate::common::RUN_TABLES
            .iter()
            .map(|(table, owner)| {
                self.query(&format!(
                    "SELECT count(*) FROM {{r}}.{table} WHERE {owner} = '{run_id}'"
                ))
                .parse::<u64>()
                .expect("a count")
            })
            .sum()
    }

    /// Rows in every table that holds rows of runs.
    pub fn all_result_rows(&self) -> u64 {
        if self.query("SELECT to_regclass('{r}.runs') IS NULL") == "t" {
            return 0;
        }
        crate::common::RUN_TABLES
            .iter()
            .map(|(table, _)| {
                self.query(&format!("SELECT count(*) FROM {{r}}.{table}"))
                    .parse::<u64>()
                    .expect("a count")
            })
            .sum()
    }

    /// `status|count` of the runs table, e.g. `failed|1`, one per line.
    pub fn statuses(&self) -> String {
        if self.query("SELECT to_regclass('{r}.runs') IS NULL") == "t" {
            return String::new();
        }
        self.query("SELECT status, count(*) FROM {r}.runs GROUP BY status ORDER BY status")
    }
}

impl Drop for Case {
    fn drop(&mut self) {
        if !std::thread::panicking() {
            psql(&format!(
                "DROP SCHEMA IF EXISTS {} CASCADE; DROP SCHEMA IF EXISTS {} CASCADE",
                self.source, self.results
            ));
        }
    }
}

/// The lattice: unit n at column n % side, row n / side; wetness, slope and
/// yield = 2·wetness − slope + noise are smooth functions of n (invented).
pub fn lattice_sql(schema: &str, side: u32) -> String {
    format!(
        "CREATE SCHEMA {schema};
         CREATE TABLE {schema}.plots (
            id integer PRIMARY KEY,
            geom geometry(MultiPolygon, 32631) NOT NULL,
            wetness double precision, slope double precision, yield double precision);
         INSERT INTO {schema}.plots
         SELECT n,
                ST_Multi(ST_MakeEnvelope(500000 + (n % {side}) * 1000, 5600000 + (n / {side}) * 1000,
                                         501000 + (n % {side}) * 1000, 5601000 + (n / {side}) * 1000, 32631)),
                cos(n * 0.37), sin(n * 1.3) + (n % {side}) / 10.0, 0
         FROM generate_series(0, {side} * {side} - 1) AS n;
         UPDATE {schema}.plots SET yield = 2 * wetness - slope + 0.3 * sin(id * 7.1);"
    )
}

/// A libpq URI for the test server as another role (trust authentication on
/// 127.0.0.1, as scripts/pg-throwaway.sh sets it up).
pub fn uri_as(role: &str) -> String {
    db_uri().replacen("postgres@", &format!("{role}@"), 1)
}

/// The test server's URI through another port on 127.0.0.1, without TLS.
pub fn uri_via(port: u16) -> String {
    let uri = db_uri();
    let (head, rest) = uri.rsplit_once(':').expect("a port in GEOFOLD_TEST_DB");
    let path = rest.split_once('/').map_or("", |(_, p)| p);
    format!("{head}:{port}/{path}?sslmode=disable")
}

/// FNV-1a, 64 bits: offset basis 14695981039346656037, prime 1099511628211
/// (the FNV reference, IETF draft-eastlake-fnv).
pub fn fnv1a64(text: &str) -> u64 {
    let mut hash: u64 = 0xcbf2_9ce4_8422_2325;
    for byte in text.as_bytes() {
        hash ^= u64::from(*byte);
        hash = hash.wrapping_mul(0x0000_0100_0000_01b3);
    }
    hash
}

/// The job report of `name` in a `run --config --json` document.
pub fn job_report<'a>(document: &'a serde_json::Value, name: &str) -> &'a serde_json::Value {
    document["jobs"]
        .as_array()
        .and_then(|jobs| jobs.iter().find(|j| j["job"] == name))
        .unwrap_or_else(|| panic!("no job {name} in {document}"))
}

/// `geofold run --json` of the lattice as job `plots`, straight to the test
/// server, with extra options.
pub fn run_plots(case: &Case, extra: &[&str]) -> Output {
    crate::common::run(case.run_command(&db_uri(), "plots", &[&["--json"], extra].concat()))
}

/// stdout as text.
pub fn stdout(output: &Output) -> String {
    String::from_utf8_lossy(&output.stdout).into_owned()
}

/// stderr as text.
pub fn stderr(output: &Output) -> String {
    String::from_utf8_lossy(&output.stderr).into_owned()
}

#[test]
fn fnv1a64_matches_the_reference_test_vectors() {
    // FNV reference test vectors (draft-eastlake-fnv, appendix / isthe.com fnv test suite).
    assert_eq!(fnv1a64(""), 0xcbf2_9ce4_8422_2325);
    assert_eq!(fnv1a64("a"), 0xaf63_dc4c_8601_ec8c);
    assert_eq!(fnv1a64("foobar"), 0x8594_4171_f739_67e8);
}
