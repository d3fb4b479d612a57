//! Helpers of the scheme tests: a test's schemas and scratch directory, runs
//! on either store, reading results back, the generated and real layers, and
//! the outside references (numpy, scipy) through `schemes_reference.py`.

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::process::Output;

use crate::common::{
    code, db_uri, json, psql, psql_script, python_script, run, unique_name, Workdir,
};

/// Units of the generated lattice.
pub const UNITS: usize = 300;

/// Where a run reads and writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Store {
    Postgis,
    Gpkg,
}

pub const STORES: [Store; 2] = [Store::Postgis, Store::Gpkg];

/// A test's source schema `{s}`, results schema `{r}` and scratch directory
/// (GeoPackage copies, results file); the schemas are dropped when the test passes.
pub struct Case {
    pub s: String,
    pub r: String,
    pub workdir: Workdir,
}

impl Case {
    pub fn new(label: &str) -> Case {
        let s = unique_name(label);
        psql(&format!("CREATE SCHEMA {s}"));
        Case {
            r: format!("{s}_r"),
            s,
            workdir: Workdir::new(),
        }
    }

    /// `text` with `{s}` and `{r}` filled in.
    pub fn sql(&self, text: &str) -> String {
        text.replace("{s}", &self.s).replace("{r}", &self.r)
    }

    pub fn query(&self, text: &str) -> String {
        psql(&self.sql(text))
    }

    pub fn script(&self, text: &str) {
        psql_script(&self.sql(text))
    }

    pub fn gpkg(&self) -> PathBuf {
        self.workdir.path("units.gpkg")
    }

    pub fn results_gpkg(&self) -> PathBuf {
        self.workdir.path("results.gpkg")
    }

    /// Copies `{s}.<table>` into `units.gpkg` as layer `<table>` with GDAL's ogr2ogr.
    pub fn copy_to_gpkg(&self, table: &str) {
        let file = self.gpkg();
        let mut args = vec![
            "-f".to_string(),
            "GPKG".to_string(),
            file.display().to_string(),
            format!("PG:{}", db_uri()),
            format!("{}.{table}", self.s),
            "-nln".to_string(),
            table.to_string(),
        ];
        if file.exists() {
            args.insert(0, "-update".into());
        }
        let output = std::process::Command::new("ogr2ogr")
            .args(&args)
            .output()
            .expect("ogr2ogr (GDAL) is installed");
        assert!(
            output.status.success(),
            "ogr2ogr {args:?}: {}",
            String::from_utf8_lossy(&output.stderr)
        );
    }

    /// `geofold run --json` on `table` of `store`, with `options` (split at
    /// spaces; `{s}` filled in; `--prediction-table X` kept for PostGIS and
    /// `--prediction-layer Y` for a GeoPackage, the other dropped).
    pub fn run(
        &self,
        store: Store,
        table: &str,
        target: &str,
        features: &str,
        options: &str,
    ) -> Output {
        let mut command = self.workdir.geofold();
        command.arg("run");
        match store {
            Store::Postgis => {
                command.args(["--db", &db_uri(), "--table", &format!("{}.{table}", self.s)]);
                command.args(["--results-schema", &self.r]);
            }
            Store::Gpkg => {
                command.args([
                    "--gpkg",
                    &self.gpkg().display().to_string(),
                    "--layer",
                    table,
                    "--id",
                    "id",
                ]);
                command.args(["--results-gpkg", &self.results_gpkg().display().to_string()]);
            }
        }
        command.args(["--target", target, "--features", features, "--json"]);
        command.args(for_store(store, &self.sql(options)));
        run(command)
    }

    /// A run on the lattice (`units`, target `y`, features `a,b`) that must succeed.
    pub fn ok(&self, store: Store, options: &str) -> serde_json::Value {
        let output = self.run(store, "units", "y", "a,b", options);
        assert_eq!(code(&output), 0, "{store:?} {options}");
        json(&output)
    }

    /// Rows of a query on the results of `store`, fields joined by `|`
    /// (`{r}.` prefixes table names; GeoPackage tables have none).
    pub fn results(&self, store: Store, text: &str) -> Vec<String> {
        match store {
            Store::Postgis => psql(&self.sql(text))
                .lines()
                .filter(|l| !l.is_empty())
                .map(str::to_string)
                .collect(),
            Store::Gpkg => sqlite(&self.results_gpkg(), &text.replace("{r}.", "")),
        }
    }

    /// `repetition|fold|unit_id` rows of a run's fold membership, sorted.
    pub fn members(&self, store: Store, run: &str) -> Vec<String> {
        self.sorted(
            store,
            &format!(
                "SELECT repetition, fold, unit_id FROM {{r}}.fold_members WHERE run_id = '{run}'"
            ),
        )
    }

    /// `repetition|fold|unit_id` rows of a run's exclusions, sorted.
    pub fn exclusions(&self, store: Store, run: &str) -> Vec<String> {
        self.sorted(store, &format!("SELECT repetition, fold, unit_id FROM {{r}}.fold_exclusions WHERE run_id = '{run}'"))
    }

    fn sorted(&self, store: Store, text: &str) -> Vec<String> {
        let mut rows = self.results(store, text);
        rows.sort();
        rows
    }
}

impl Drop for Case {
    fn drop(&mut self) {
        if !std::thread::panicking() {
            psql(&format!(
                "DROP SCHEMA IF EXISTS {} CASCADE; DROP SCHEMA IF EXISTS {} CASCADE",
                self.s, self.r
            ));
        }
    }
}

/// The options for one store (see [`Case::run`]).
fn for_store(store: Store, options: &str) -> Vec<String> {
    let other = match store {
        Store::Postgis => "--prediction-layer",
        Store::Gpkg => "--prediction-table",
    };
    let words: Vec<&str> = options.split_whitespace().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < words.len() {
        if words[i] == other {
            i += 2;
            continue;
        }
        out.push(words[i].to_string());
        i += 1;
    }
    out
}

/// Rows of a query on a GeoPackage (rusqlite), fields joined by `|`.
pub fn sqlite(path: &PathBuf, sql: &str) -> Vec<String> {
    use rusqlite::types::ValueRef;
    let conn = rusqlite::Connection::open(path).expect("results GeoPackage opens");
    let mut statement = conn.prepare(sql).unwrap_or_else(|e| panic!("{sql}: {e}"));
    let width = statement.column_count();
    let mut rows = statement.query([]).unwrap();
    let mut out = Vec::new();
    while let Some(row) = rows.next().unwrap() {
        let fields: Vec<String> = (0..width)
            .map(|i| match row.get_ref(i).unwrap() {
                ValueRef::Null => String::new(),
                ValueRef::Integer(v) => v.to_string(),
                ValueRef::Real(v) => v.to_string(),
                ValueRef::Text(t) => String::from_utf8_lossy(t).into_owned(),
                ValueRef::Blob(b) => format!("<{} bytes>", b.len()),
            })
            .collect();
        out.push(fields.join("|"));
    }
    out
}

/// The generated lattice as `{s}.units` (module doc of `main.rs`), and
/// `{s}.targets`: a 12 × 12 grid of prediction locations reaching 500 m
/// beyond the lattice on every side (the model is to be used partly outside
/// the data). Values rounded to 6 decimals so GDAL's copy keeps them exactly.
pub fn create_units(case: &Case) {
    case.script(
        "CREATE TABLE {s}.units (id integer PRIMARY KEY, district text, zone integer, a float8, b float8,
             y float8, geom geometry(Point, 32631));
         INSERT INTO {s}.units
         SELECT n, chr(65 + i / 3), j / 5, a, b,
                round((10 + 0.8 * a - 0.5 * b + ((n * 53) % 13) / 8.0 + sin(i / 3.0))::numeric, 6)::float8,
                ST_SetSRID(ST_MakePoint(500000 + 100 * i, 5000000 + 100 * j), 32631)
         FROM (SELECT i, j, n, round((i + 0.5 * j + ((n * 37) % 11) / 10.0)::numeric, 6)::float8 AS a,
                      round((((i * j) % 7) + 0.1 * i)::numeric, 6)::float8 AS b
               FROM (SELECT i, j, 1 + i + 20 * j AS n FROM generate_series(0, 19) i, generate_series(0, 14) j) l) g;
         CREATE TABLE {s}.targets (id integer PRIMARY KEY, geom geometry(Point, 32631));
         INSERT INTO {s}.targets
         SELECT 1 + g, ST_SetSRID(ST_MakePoint(499500 + (g % 12) * 264.0, 4999500 + (g / 12) * 218.0), 32631)
         FROM generate_series(0, 143) g;",
    );
}

/// The source rows of the lattice as the refit script reads them: `id|y|a|b`.
pub fn lattice_rows(case: &Case) -> Vec<String> {
    case.query("SELECT id, y, a, b FROM {s}.units ORDER BY id")
        .lines()
        .map(str::to_string)
        .collect()
}

pub fn run_id(summary: &serde_json::Value) -> String {
    summary["runs"][0]["run_id"].as_str().unwrap().to_string()
}

pub fn float(text: &str) -> f64 {
    text.parse()
        .unwrap_or_else(|_| panic!("not a number: {text:?}"))
}

/// Asserts that every unit is held out exactly once per repetition.
pub fn each_unit_once(case: &Case, store: Store, run: &str, units: usize, repeats: usize) {
    let rows = case.results(
        store,
        &format!(
            "SELECT repetition, count(*), count(DISTINCT unit_id) FROM {{r}}.held_out WHERE run_id = '{run}' \
             GROUP BY repetition ORDER BY repetition"
        ),
    );
    let expected: Vec<String> = (1..=repeats)
        .map(|r| format!("{r}|{units}|{units}"))
        .collect();
    assert_eq!(rows, expected, "{store:?} run {run}");
}

/// Compares a run's held-out predictions with numpy refits on the training
/// sets it recorded (fold membership minus `fold_exclusions`), to 1e-9
/// relative (numpy's SVD least squares and geofold's QR agree to ~1e-12 here;
/// common practice, no source); returns how many were compared.
pub fn matches_numpy_refit(case: &Case, store: Store, run: &str, source: &[String]) -> usize {
    let input = format!(
        "units\n{}\nfolds\n{}\nexcluded\n{}\n",
        source.join("\n"),
        case.members(store, run).join("\n"),
        case.exclusions(store, run).join("\n")
    );
    let reference: BTreeMap<(String, String), f64> =
        python_script("python/schemes_reference.py", &["refit"], &input)
            .lines()
            .map(|line| {
                let f: Vec<&str> = line.split('|').collect();
                ((f[0].to_string(), f[1].to_string()), float(f[2]))
            })
            .collect();
    let ours = case.results(
        store,
        &format!(
            "SELECT repetition, unit_id, predicted FROM {{r}}.held_out WHERE run_id = '{run}'"
        ),
    );
    assert_eq!(ours.len(), reference.len());
    for line in &ours {
        let f: Vec<&str> = line.split('|').collect();
        let (predicted, expected) = (
            float(f[2]),
            reference[&(f[0].to_string(), f[1].to_string())],
        );
        assert!(
            (predicted - expected).abs() <= 1e-9 * expected.abs().max(1.0),
            "{store:?} run {run} unit {}: {predicted} vs numpy {expected}",
            f[1]
        );
    }
    ours.len()
}

/// `scipy.stats.wasserstein_distance(a, b)` at test time.
pub fn scipy_w(a: &[String], b: &[String]) -> f64 {
    let input = format!("a\n{}\nb\n{}\n", a.join("\n"), b.join("\n"));
    float(python_script("python/schemes_reference.py", &["wasserstein"], &input).trim())
}

/// A run's stored match statistic by statistic (`pooled`, `repeat_mean`, `repeat_sd`).
pub fn w_nnd(case: &Case, store: Store, run: &str, statistic: &str) -> f64 {
    let rows = case.results(
        store,
        &format!(
            "SELECT value FROM {{r}}.run_score_values WHERE run_id = '{run}' AND score = 'w_nnd' \
             AND statistic = '{statistic}'"
        ),
    );
    float(&rows[0])
}

/// A run's distances of one kind (`cv` or `prediction`), optionally of one repetition.
pub fn distances(
    case: &Case,
    store: Store,
    run: &str,
    kind: &str,
    repetition: Option<u32>,
) -> Vec<String> {
    let repetition = repetition.map_or(String::new(), |r| format!(" AND repetition = {r}"));
    case.results(
        store,
        &format!("SELECT distance FROM {{r}}.nearest_distances WHERE run_id = '{run}' AND kind = '{kind}'{repetition}"),
    )
}
