//! The both-store harness: one case, run on PostGIS and on GeoPackage.
//!
//! A case describes its source table once, either as SQL that builds it in
//! its own PostGIS schema (`Stores::from_postgis`) or as a GeoJSON file
//! (`Stores::from_geojson`). GDAL writes the other copy: `ogr2ogr` from the
//! PostGIS table into a GeoPackage, or from the GeoJSON into both stores. The
//! case then runs `geofold run` with the same arguments on each store
//! (`Stores::run`), and [`Stores::assert_same`] compares what the two stores
//! hold, reading PostGIS with psql and the GeoPackage with GDAL: the same
//! units, folds (`fold_members`), predictions (to 1e-12), scores, regions,
//! exclusions and job layers, and the same `--json` summaries.
//!
//! ```text
//! let stores = Stores::from_postgis("grid", "units", |s| create_units(s, "units", IdType::Integer));
//! let both = stores.run_ok(&["--id", "id", "--target", "target", "--features", "a,b",
//!                            "--block-size", "200", "--folds", "3", "--also-random"]);
//! stores.assert_same(&both);
//! let rows = stores.rows(Store::Gpkg, &both, 0, "SELECT count(*) FROM fold_members WHERE run_id = '{run}'");
//! ```

use std::path::{Path, PathBuf};
use std::process::Output;

use super::gdal::{gdal_rows, geometry_last, numbers_in, ogr2ogr};
use super::pg::{db_uri, Scratch};
use super::{assert_close, assert_rows_match, code, stderr, Workdir};

/// Which store.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Store {
    Postgis,
    Gpkg,
}

pub const BOTH: [Store; 2] = [Store::Postgis, Store::Gpkg];

/// One store's run: its output and, when stdout is JSON, the document.
pub struct Outcome {
    pub store: Store,
    pub output: Output,
    pub doc: serde_json::Value,
}

impl Outcome {
    pub fn code(&self) -> i32 {
        code(&self.output)
    }

    pub fn stderr(&self) -> String {
        stderr(&self.output)
    }

    /// `runs[index].run_id`.
    pub fn run_id(&self, index: usize) -> String {
        super::run_id(&self.doc, index)
    }
}

/// The two runs of one case.
pub struct Both {
    pub pg: Outcome,
    pub gpkg: Outcome,
}

impl Both {
    pub fn get(&self, store: Store) -> &Outcome {
        match store {
            Store::Postgis => &self.pg,
            Store::Gpkg => &self.gpkg,
        }
    }
}

/// A case's source in both stores and where each store's results go.
pub struct Stores {
    /// Source schema `{s}` (the table) and results schema `{r}`.
    pub pg: Scratch,
    /// The scratch directory holding the GeoPackages.
    pub workdir: Workdir,
    /// The table (PostGIS) and layer (GeoPackage) name.
    pub table: String,
    /// The source GeoPackage GDAL wrote.
    pub source_gpkg: PathBuf,
    /// The results GeoPackage.
    pub results_gpkg: PathBuf,
    /// The job both runs use.
    pub job: String,
}

impl Stores {
    /// `make` builds `{s}.<table>` in PostGIS; GDAL copies it into a GeoPackage.
    pub fn from_postgis(label: &str, table: &str, make: impl FnOnce(&Scratch)) -> Stores {
        let pg = Scratch::new(label);
        make(&pg);
        let stores = Stores::empty(pg, table);
        ogr2ogr(
            stores.workdir.root(),
            &[
                "-f",
                "GPKG",
                "source.gpkg",
                &format!("PG:{}", db_uri()),
                &format!("{}.{table}", stores.pg.source),
                "-nln",
                table,
            ],
        );
        stores
    }

    /// `write` writes a GeoJSON file (coordinates in `srs`, e.g. `EPSG:32631`);
    /// GDAL loads it into PostGIS (`{s}.<table>`, geometry column `geom`) and
    /// into a GeoPackage.
    pub fn from_geojson(label: &str, table: &str, srs: &str, write: impl FnOnce(&Path)) -> Stores {
        let pg = Scratch::new(label);
        let stores = Stores::empty(pg, table);
        let geojson = stores.workdir.path("source.geojson");
        write(&geojson);
        let geojson = geojson.to_str().unwrap();
        ogr2ogr(
            stores.workdir.root(),
            &[
                "-f",
                "PostgreSQL",
                &format!("PG:{}", db_uri()),
                geojson,
                "-nln",
                &format!("{}.{table}", stores.pg.source),
                "-a_srs",
                srs,
                "-lco",
                "GEOMETRY_NAME=geom",
            ],
        );
        ogr2ogr(
            stores.workdir.root(),
            &[
                "-f",
                "GPKG",
                "source.gpkg",
                geojson,
                "-nln",
                table,
                "-a_srs",
                srs,
            ],
        );
        std::fs::remove_file(stores.workdir.path("source.geojson")).unwrap();
        stores
    }

    fn empty(pg: Scratch, table: &str) -> Stores {
        let workdir = Workdir::new();
        Stores {
            source_gpkg: workdir.path("source.gpkg"),
            results_gpkg: workdir.path("results.gpkg"),
            job: table.to_string(),
            table: table.to_string(),
            pg,
            workdir,
        }
    }

    /// The full `geofold run` arguments for a store: source, results, job,
    /// `--json`, then `args`.
    pub fn args(&self, store: Store, args: &[&str]) -> Vec<String> {
        self.args_on(store, &self.table, args)
    }

    /// [`Stores::args`] with another table or layer as the source (one that
    /// may not exist). A `--job` or `--results-schema` in `args` replaces the
    /// harness's own.
    pub fn args_on(&self, store: Store, table: &str, args: &[&str]) -> Vec<String> {
        let given = |option: &str| args.contains(&option);
        let mut all: Vec<String> = match store {
            Store::Postgis => vec![
                "run".into(),
                "--db".into(),
                db_uri(),
                "--table".into(),
                format!("{}.{table}", self.pg.source),
            ],
            Store::Gpkg => vec![
                "run".into(),
                "--gpkg".into(),
                "source.gpkg".into(),
                "--layer".into(),
                table.to_string(),
                "--results-gpkg".into(),
                "results.gpkg".into(),
            ],
        };
        if store == Store::Postgis && !given("--results-schema") {
            all.extend(["--results-schema".into(), self.pg.results.clone()]);
        }
        if !given("--job") {
            all.extend(["--job".into(), self.job.clone()]);
        }
        all.push("--json".into());
        all.extend(args.iter().map(|arg| self.pg.fill(arg)));
        all
    }

    /// Runs one store.
    pub fn run_one(&self, store: Store, args: &[&str]) -> Outcome {
        let output = self.workdir.run(&self.args(store, args));
        let doc = serde_json::from_slice(&output.stdout).unwrap_or(serde_json::Value::Null);
        Outcome { store, output, doc }
    }

    /// Runs one store without `--json` and returns the text summary (asserts exit 0).
    pub fn text(&self, store: Store, args: &[&str]) -> String {
        let all: Vec<String> = self
            .args(store, args)
            .into_iter()
            .filter(|arg| arg != "--json")
            .collect();
        let output = self.workdir.run(&all);
        assert_eq!(code(&output), 0, "{store:?}: {}", stderr(&output));
        String::from_utf8_lossy(&output.stdout).into_owned()
    }

    /// Runs both stores with the same arguments.
    pub fn run(&self, args: &[&str]) -> Both {
        Both {
            pg: self.run_one(Store::Postgis, args),
            gpkg: self.run_one(Store::Gpkg, args),
        }
    }

    /// Runs both and asserts both succeeded.
    pub fn run_ok(&self, args: &[&str]) -> Both {
        let both = self.run(args);
        for outcome in [&both.pg, &both.gpkg] {
            assert_eq!(
                outcome.code(),
                0,
                "{:?} run failed: {}",
                outcome.store,
                outcome.stderr()
            );
        }
        both
    }

    /// Rows of a query on one store's results: PostGIS through psql with the
    /// results schema first on the search path, the GeoPackage through GDAL.
    /// `{run}` is run `run`'s id in that store. Rows are sorted (as text).
    pub fn rows(&self, store: Store, both: &Both, run: usize, sql: &str) -> Vec<Vec<String>> {
        let sql = sql.replace("{run}", &both.get(store).run_id(run));
        self.query(store, &sql)
    }

    /// Rows of a query on one store's results, sorted (as text).
    pub fn query(&self, store: Store, sql: &str) -> Vec<Vec<String>> {
        let mut rows = match store {
            Store::Postgis => self.pg.rows(&format!(
                "SET search_path TO {{r}}, public; {}",
                self.pg.fill(sql)
            )),
            Store::Gpkg => gdal_rows(&self.results_gpkg, sql),
        };
        rows.sort();
        rows
    }

    /// Runs recorded in one store's results (0 when the results schema or file
    /// does not exist).
    pub fn runs_recorded(&self, store: Store) -> usize {
        match store {
            Store::Postgis => self.pg.runs_count(),
            Store::Gpkg if !self.results_gpkg.exists() => 0,
            Store::Gpkg => self.query(store, "SELECT count(*) FROM runs")[0][0]
                .parse()
                .unwrap(),
        }
    }

    /// Asserts that both stores hold the same results of the two runs (see the
    /// module doc), and that the two summaries agree.
    pub fn assert_same(&self, both: &Both) {
        let (pg, gpkg) = (&both.pg.doc, &both.gpkg.doc);
        for key in [
            "units_read",
            "units_used",
            "units_skipped",
            "input_fingerprint",
        ] {
            assert_eq!(pg[key], gpkg[key], "summary {key}");
        }
        assert_eq!(skipped(pg), skipped(gpkg), "skipped rows by reason");
        assert_json_close(&pg["comparison"], &gpkg["comparison"], "comparison");
        let runs = pg["runs"].as_array().expect("runs").len();
        assert_eq!(runs, gpkg["runs"].as_array().expect("runs").len(), "runs");
        for index in 0..runs {
            let (a, b) = (&pg["runs"][index], &gpkg["runs"][index]);
            for key in ["scheme", "role", "parameters", "seed", "repeats", "split"] {
                assert_eq!(a[key], b[key], "runs[{index}].{key}");
            }
            for key in [
                "warnings",
                "pooled",
                "fold_spread",
                "repeat_spread",
                "baseline",
                "folds",
            ] {
                assert_json_close(&a[key], &b[key], &format!("runs[{index}].{key}"));
            }
            self.assert_same_tables(both, index);
        }
        self.assert_same_job_layers(both);
        // Every GeoPackage geofold wrote is one GDAL's validator accepts.
        super::gdal::gdal_validates(&self.results_gpkg);
    }

    /// The results tables and views of run `index`, store against store.
    fn assert_same_tables(&self, both: &Both, index: usize) {
        let same = |what: &str, sql: &str| {
            let a = self.rows(Store::Postgis, both, index, sql);
            let b = self.rows(Store::Gpkg, both, index, sql);
            assert_rows_match(&a, &b, &format!("run {index}: {what}"));
            a.len()
        };
        let members = same(
            "fold_members",
            "SELECT repetition, fold, unit_id FROM fold_members WHERE run_id = '{run}'",
        );
        let units = both.pg.doc["units_used"].as_u64().unwrap() as usize;
        let repeats = both.pg.doc["runs"][index]["repeats"].as_u64().unwrap() as usize;
        assert_eq!(
            members,
            units * repeats,
            "run {index}: every unit in every repetition"
        );
        same(
            "predictions",
            "SELECT repetition, unit_id, fold, observed, predicted, residual, abs_error, squared_error
             FROM predictions WHERE run_id = '{run}'",
        );
        same(
            "unit_errors",
            "SELECT unit_id, fold, observed, predicted, residual, abs_error, rmse, repetitions
             FROM unit_errors WHERE run_id = '{run}'",
        );
        same(
            "fold_scores",
            "SELECT repetition, fold, n_train, n_test, n_excluded, rmse, mae, bias, r2
             FROM fold_scores WHERE run_id = '{run}'",
        );
        same(
            "run_scores",
            "SELECT n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean,
                    mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd,
                    rmse_repeat_mean, rmse_repeat_sd, r2_repeat_mean, r2_repeat_sd,
                    baseline_rmse, baseline_mae, baseline_r2
             FROM run_scores WHERE run_id = '{run}'",
        );
        same(
            "fold_exclusions",
            "SELECT repetition, fold, unit_id FROM fold_exclusions WHERE run_id = '{run}'",
        );
        same(
            "runs",
            "SELECT status, scheme, model, family, seed, repeats, folds, source_srid, distance_srid,
                    units_read, units_used, input_fingerprint, target_column, id_column
             FROM runs WHERE run_id = '{run}'",
        );
        // Regions: attributes exactly, outlines by their coordinates (psql's
        // ST_AsText and GDAL's WKT print them differently).
        let columns = "repetition, fold, kind, label, units, srid";
        let run = |store: Store| both.get(store).run_id(index);
        let pg = self.query(
            Store::Postgis,
            &format!(
                "SELECT {columns}, ST_AsText(geom) FROM fold_regions WHERE run_id = '{}'",
                run(Store::Postgis)
            ),
        );
        let gpkg = geometry_last(self.query(
            Store::Gpkg,
            &format!(
                "SELECT geom, {columns} FROM fold_regions WHERE run_id = '{}'",
                run(Store::Gpkg)
            ),
        ));
        assert_same_regions(&pg, &gpkg, &format!("run {index}: fold_regions"));
    }

    /// The job's layers: the PostGIS views `<job>` and `<job>_regions` against
    /// the GeoPackage tables of the same names.
    fn assert_same_job_layers(&self, both: &Both) {
        let job = &self.job;
        let units_sql = format!(
            "SELECT unit_id, fold, observed, predicted, residual, abs_error, rmse, repetitions FROM {job}"
        );
        assert_rows_match(
            &self.query(Store::Postgis, &units_sql),
            &self.query(Store::Gpkg, &units_sql),
            &format!("layer {job}"),
        );
        let primary = |store: Store| both.get(store).run_id(0);
        for store in [Store::Postgis, Store::Gpkg] {
            let shown = self.query(store, &format!("SELECT DISTINCT run_id FROM {job}"));
            assert_eq!(
                shown,
                [[primary(store)]],
                "{store:?}: layer {job} shows the primary run"
            );
        }
        let regions = format!("{job}_regions");
        let has = |store: Store| match store {
            Store::Postgis => self.pg.has_result_relation(&regions),
            Store::Gpkg => {
                let conn = rusqlite::Connection::open(&self.results_gpkg).unwrap();
                conn.query_row(
                    "SELECT count(*) FROM sqlite_master WHERE name = ?1",
                    [&regions],
                    |row| row.get::<_, i64>(0),
                )
                .unwrap()
                    > 0
            }
        };
        assert_eq!(
            has(Store::Postgis),
            has(Store::Gpkg),
            "layer {regions} in both or neither"
        );
        if has(Store::Postgis) {
            let pg = self.query(
                Store::Postgis,
                &format!("SELECT fold, kind, label, units, ST_AsText(geom) FROM {regions}"),
            );
            let gpkg = geometry_last(self.query(
                Store::Gpkg,
                &format!("SELECT geom, fold, kind, label, units FROM {regions}"),
            ));
            assert_same_regions(&pg, &gpkg, &format!("layer {regions}"));
        }
    }
}

/// Region rows (attributes then WKT last) compared: attributes exactly,
/// coordinates to 1e-12 relative.
fn assert_same_regions(a: &[Vec<String>], b: &[Vec<String>], what: &str) {
    assert_eq!(a.len(), b.len(), "{what}: row counts");
    for (x, y) in a.iter().zip(b) {
        let n = x.len() - 1;
        assert_eq!(x[..n], y[..n], "{what}");
        let (p, q) = (numbers_in(&x[n]), numbers_in(&y[n]));
        assert_eq!(p.len(), q.len(), "{what}: {} vs {}", x[n], y[n]);
        for (u, v) in p.iter().zip(&q) {
            assert_close(*u, *v, &format!("{what}: {} vs {}", x[n], y[n]));
        }
    }
}

/// The `skipped` list of a summary with each reason's ids sorted (the order
/// rows are read in may differ between stores).
pub fn skipped(document: &serde_json::Value) -> Vec<(String, u64, Vec<String>)> {
    document["skipped"]
        .as_array()
        .unwrap_or_else(|| panic!("no skipped list in {document}"))
        .iter()
        .map(|entry| {
            let mut ids: Vec<String> = entry["ids"]
                .as_array()
                .unwrap()
                .iter()
                .map(|id| match id {
                    serde_json::Value::String(text) => text.clone(),
                    other => other.to_string(),
                })
                .collect();
            ids.sort();
            (
                entry["reason"].as_str().unwrap().to_string(),
                entry["count"].as_u64().unwrap(),
                ids,
            )
        })
        .collect()
}

/// Two JSON values equal, numbers to 1e-12 relative.
pub fn assert_json_close(a: &serde_json::Value, b: &serde_json::Value, path: &str) {
    use serde_json::Value;
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => {
            assert_close(x.as_f64().unwrap(), y.as_f64().unwrap(), path)
        }
        (Value::Array(x), Value::Array(y)) => {
            assert_eq!(x.len(), y.len(), "{path}: lengths");
            for (i, (u, v)) in x.iter().zip(y).enumerate() {
                assert_json_close(u, v, &format!("{path}[{i}]"));
            }
        }
        (Value::Object(x), Value::Object(y)) => {
            let keys = |m: &serde_json::Map<String, Value>| m.keys().cloned().collect::<Vec<_>>();
            assert_eq!(keys(x), keys(y), "{path}: keys");
            for (key, u) in x {
                assert_json_close(u, &y[key], &format!("{path}.{key}"));
            }
        }
        _ => assert_eq!(a, b, "{path}"),
    }
}
