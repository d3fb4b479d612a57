//! Helpers of `tests/models.rs` and `tests/score.rs`: the throwaway PostGIS
//! (`GEOFOLD_TEST_DB`), the project's reference Python (`GEOFOLD_PYTHON`),
//! the geofold binary run in a scratch directory, an invented table of units
//! in PostGIS and its GeoPackage copy written by GDAL, and reading results
//! back from either store. Both stores are driven through the same [`Store`]
//! so every case runs on both.
#![allow(dead_code)]

use std::path::PathBuf;
use std::process::{Command, Output};

pub use crate::common::pg::{db_uri, psql, unique_name};

/// Runs the reference script `tests/python/<script>` with `args`, feeding
/// `input`; returns stdout (the project's own Python, `GEOFOLD_PYTHON`, which
/// has numpy, scipy, statsmodels and scikit-learn).
pub fn python(script: &str, args: &[&str], input: &str) -> String {
    crate::common::python_script(&format!("python/{script}"), args, input)
}

/// A scratch directory, a source schema in PostGIS and its GeoPackage copy.
pub struct Case {
    pub dir: tempfile::TempDir,
    pub schema: String,
}

impl Case {
    /// A case with its own source schema (dropped when the test passes).
    pub fn new(label: &str) -> Case {
        let schema = unique_name(label);
        psql(&format!("CREATE SCHEMA {schema}"));
        Case {
            dir: tempfile::tempdir().expect("scratch dir"),
            schema,
        }
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Runs the geofold binary in the scratch directory.
    pub fn geofold(&self, args: &[String]) -> Output {
        let output = Command::new(env!("CARGO_BIN_EXE_geofold"))
            .args(args)
            .current_dir(self.dir.path())
            .env("NO_COLOR", "1")
            .output()
            .expect("geofold runs");
        eprintln!(
            "geofold {args:?}\nstderr: {}",
            String::from_utf8_lossy(&output.stderr)
        );
        output
    }

    /// Copies `schema.table` into `<table>.gpkg` with GDAL (the outside writer).
    pub fn gpkg_copy(&self, table: &str) -> PathBuf {
        let file = self.path(&format!("{table}.gpkg"));
        let output = Command::new("ogr2ogr")
            .args(["-f", "GPKG"])
            .arg(&file)
            .arg(format!("PG:{}", db_uri()))
            .arg(format!("{}.{table}", self.schema))
            .args(["-nln", table])
            .output()
            .expect("ogr2ogr runs");
        assert!(
            output.status.success(),
            "ogr2ogr failed: {}",
            String::from_utf8_lossy(&output.stderr)
        );
        file
    }
}

impl Drop for Case {
    fn drop(&mut self) {
        if !std::thread::panicking() {
            psql(&format!(
                "DROP SCHEMA IF EXISTS {s} CASCADE; DROP SCHEMA IF EXISTS {s}_r CASCADE",
                s = self.schema
            ));
        }
    }
}

/// Where a case's source and results are.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum StoreKind {
    Postgis,
    Gpkg,
}

/// One store of a case: how to name the source and where results go.
pub struct Store<'a> {
    pub case: &'a Case,
    pub kind: StoreKind,
    pub table: String,
    pub gpkg: Option<PathBuf>,
}

impl<'a> Store<'a> {
    /// The case's table `table` in PostGIS, or its GeoPackage copy.
    pub fn new(case: &'a Case, kind: StoreKind, table: &str) -> Store<'a> {
        let gpkg = (kind == StoreKind::Gpkg).then(|| case.gpkg_copy(table));
        Store {
            case,
            kind,
            table: table.to_string(),
            gpkg,
        }
    }

    /// The results schema of PostGIS runs.
    pub fn results_schema(&self) -> String {
        format!("{}_r", self.case.schema)
    }

    /// `run` with the source and results options of this store, then `extra`.
    pub fn run_args(&self, extra: &[&str]) -> Vec<String> {
        let mut args: Vec<String> = vec!["run".into()];
        match self.kind {
            StoreKind::Postgis => args.extend([
                "--db".into(),
                db_uri(),
                "--table".into(),
                format!("{}.{}", self.case.schema, self.table),
                "--results-schema".into(),
                self.results_schema(),
            ]),
            StoreKind::Gpkg => args.extend([
                "--gpkg".into(),
                self.gpkg_path(),
                "--layer".into(),
                self.table.clone(),
                "--id".into(),
                "id".into(),
            ]),
        }
        args.extend(extra.iter().map(|a| a.to_string()));
        args
    }

    /// `score` with the results options of this store, then `extra`.
    pub fn score_args(&self, extra: &[&str]) -> Vec<String> {
        let mut args: Vec<String> = vec!["score".into()];
        match self.kind {
            StoreKind::Postgis => args.extend([
                "--db".into(),
                db_uri(),
                "--results-schema".into(),
                self.results_schema(),
            ]),
            StoreKind::Gpkg => args.extend(["--results-gpkg".into(), self.gpkg_path()]),
        }
        args.extend(extra.iter().map(|a| a.to_string()));
        args
    }

    pub fn gpkg_path(&self) -> String {
        self.gpkg
            .as_ref()
            .map(|p| p.display().to_string())
            .unwrap_or_default()
    }

    /// Rows of a query on the results (`{r}` stands for the results schema
    /// in PostGIS and is dropped for the GeoPackage), every value as text
    /// (NULL as empty).
    pub fn query(&self, sql: &str) -> Vec<Vec<String>> {
        match self.kind {
            StoreKind::Postgis => {
                let sql = sql.replace("{r}", &format!("{}.", self.results_schema()));
                let text = psql(&sql);
                text.lines()
                    .filter(|l| !l.is_empty())
                    .map(|l| l.split('|').map(str::to_string).collect())
                    .collect()
            }
            StoreKind::Gpkg => {
                let sql = sql.replace("{r}", "");
                let conn = rusqlite::Connection::open(self.gpkg.as_ref().expect("a file"))
                    .expect("open the GeoPackage");
                let mut statement = conn.prepare(&sql).expect("prepare");
                let width = statement.column_count();
                let rows = statement
                    .query_map([], |row| {
                        (0..width)
                            .map(|i| {
                                Ok(match row.get_ref(i)? {
                                    rusqlite::types::ValueRef::Null => String::new(),
                                    rusqlite::types::ValueRef::Integer(v) => v.to_string(),
                                    rusqlite::types::ValueRef::Real(v) => format!("{v:?}"),
                                    rusqlite::types::ValueRef::Text(t) => {
                                        String::from_utf8_lossy(t).into_owned()
                                    }
                                    rusqlite::types::ValueRef::Blob(_) => "<blob>".into(),
                                })
                            })
                            .collect::<Result<Vec<String>, rusqlite::Error>>()
                    })
                    .expect("query");
                rows.map(|r| r.expect("row")).collect()
            }
        }
    }

    /// The one value of a query.
    pub fn value(&self, sql: &str) -> String {
        let rows = self.query(sql);
        assert_eq!(rows.len(), 1, "{sql}: {rows:?}");
        rows[0][0].clone()
    }

    /// Runs SQL on the source (PostGIS schema `{s}`, or the GeoPackage file).
    pub fn execute_on_source(&self, sql: &str) {
        match self.kind {
            StoreKind::Postgis => {
                psql(&sql.replace("{s}", &format!("{}.", self.case.schema)));
            }
            StoreKind::Gpkg => {
                let conn = rusqlite::Connection::open(self.gpkg.as_ref().expect("a file"))
                    .expect("open the GeoPackage");
                // The R-tree triggers GDAL wrote call ST_IsEmpty and friends.
                geofold::adapters::gpkg::schema::register_functions(&conn)
                    .expect("the GeoPackage SQL functions");
                if let Err(error) = conn.execute_batch(&sql.replace("{s}", "")) {
                    panic!("SQL on the GeoPackage failed: {error}\n{sql}");
                }
            }
        }
    }
}

/// The exit code.
pub fn code(output: &Output) -> i32 {
    output.status.code().expect("exited normally")
}

pub fn stderr(output: &Output) -> String {
    String::from_utf8_lossy(&output.stderr).into_owned()
}

/// Stdout as JSON.
pub fn json(output: &Output) -> serde_json::Value {
    serde_json::from_slice(&output.stdout).unwrap_or_else(|e| {
        panic!(
            "stdout is not JSON ({e}): {}",
            String::from_utf8_lossy(&output.stdout)
        )
    })
}

/// Creates `schema.units`: 400 invented units, 80 m squares on a 20 × 20
/// lattice of 100 m cells in UTM 31N, with features `a`, `b`, a text feature
/// `landuse` (forest, farm, urban), a continuous target `y`, a 0/1 target
/// `flag`, a count `cases` and an exposure `pop`.
pub fn create_units(schema: &str) {
    psql(&format!(
        "CREATE TABLE {schema}.units AS
         SELECT n AS id,
           ST_SetSRID(ST_MakeEnvelope(500000 + (n % 20) * 100, 5000000 + (n / 20) * 100,
                      500080 + (n % 20) * 100, 5000080 + (n / 20) * 100), 32631)::geometry(Polygon, 32631) AS geom,
           sin(n * 0.7) AS a, cos(n * 0.3) + (n % 7) / 7.0 AS b,
           (CASE WHEN sin(n * 0.7) + 0.8 * cos(n * 1.9) > 0.2 THEN 1 ELSE 0 END) AS flag,
           floor(3 + 2 * sin(n * 0.7) + (n % 5))::integer AS cases,
           100 + (n % 13) * 10 AS pop,
           (ARRAY['forest', 'farm', 'urban'])[1 + (n % 3)] AS landuse,
           2 + 1.5 * sin(n * 0.7) - 0.8 * cos(n * 0.3) + 0.3 * sin(n * 1.1) AS y
         FROM generate_series(0, 399) AS n;
         ALTER TABLE {schema}.units ADD PRIMARY KEY (id);"
    ));
}

/// The last run's id (the primary run) from a `--json` summary.
pub fn run_id(output: &Output) -> String {
    json(output)["runs"][0]["run_id"]
        .as_str()
        .expect("a run id")
        .to_string()
}

/// Asserts `a` and `b` agree to `relative` (or `absolute` near zero).
pub fn assert_close(a: f64, b: f64, relative: f64, what: &str) {
    let scale = a.abs().max(b.abs()).max(1e-300);
    assert!(
        (a - b).abs() <= relative * scale || (a - b).abs() <= relative * 1e-6,
        "{what}: {a} vs {b} (relative {:.3e})",
        (a - b).abs() / scale
    );
}

/// Parses a text value as a number.
pub fn number(text: &str) -> f64 {
    text.parse()
        .unwrap_or_else(|_| panic!("not a number: {text:?}"))
}
