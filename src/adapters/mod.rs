//! Adapters: where units come from and where results go.
//!
//! A [`Source`] feeds rows into the core's [`UnitCollector`]; a [`ResultStore`]
//! writes a finished run. PostGIS and GeoPackage each implement both, so the
//! pipeline in `cli::run` is written once.
//!
//! - [`postgis`]: tokio-postgres, binary COPY both ways, one transaction per write.
//! - [`gpkg`]: rusqlite with bundled SQLite, GeoPackageBinary geometries.

pub mod gpkg;
pub mod postgis;
pub mod wkb;

use serde::Serialize;
use uuid::Uuid;

use crate::core::units::{Dataset, IdKind, UnitCollector};
use crate::core::validate::{Plan, RunOutcome};
use crate::error::Error;

/// The columns the user asked for.
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnSpec {
    /// Id column; None lets the adapter pick (the GeoPackage primary key).
    pub id: Option<String>,
    /// Geometry column; None lets the adapter pick (the only geometry column).
    pub geom: Option<String>,
    /// Target column.
    pub target: String,
    /// Feature columns, in order.
    pub features: Vec<String>,
}

/// What an adapter found out about the source before reading it.
#[derive(Debug, Clone, Serialize)]
pub struct SourceInfo {
    /// `postgis` or `gpkg`.
    pub store: &'static str,
    /// The table as shown to users: `schema.table`, or `file.gpkg:layer`.
    pub table: String,
    /// For PostGIS, the quoted `"schema"."table"`, used to build the job's view.
    pub qualified_table: String,
    /// Id column actually used.
    pub id_column: String,
    /// Geometry column actually used.
    pub geom_column: String,
    /// Target column.
    pub target_column: String,
    /// Feature columns.
    pub feature_columns: Vec<String>,
    /// Kind of the id column.
    pub id_kind: IdKind,
    /// SRID of the geometry column in the source.
    pub source_srid: i32,
    /// SRID of the coordinates the core sees (the distance CRS).
    pub srid: i32,
    /// True when `source_srid` is a longitude/latitude CRS (units are degrees).
    pub geographic: bool,
    /// The geometry column's declared type (`MULTIPOLYGON`, `POINT`, `GEOMETRY`…), upper case.
    pub declared_geometry_type: String,
    /// WKT of the distance CRS when known (GeoPackage SRS rows need it).
    pub srs_wkt: Option<String>,
    /// Name of the distance CRS when known.
    pub srs_name: Option<String>,
}

/// A source of units.
pub trait Source {
    /// What was found when the source was opened.
    fn info(&self) -> &SourceInfo;
    /// Streams every row into the collector.
    ///
    /// # Errors
    /// A row that cannot be decoded (its id named), or an I/O failure.
    fn read(&mut self, collector: &mut UnitCollector) -> Result<(), Error>;
}

/// The record of one run, as stored in `runs`.
#[derive(Debug, Clone, Serialize)]
pub struct RunRecord {
    /// The run's id.
    pub run_id: Uuid,
    /// The job label.
    pub job: String,
    /// For a comparison run (`--also-random`), the primary run it belongs to.
    pub primary_run_id: Option<Uuid>,
    /// Start, Unix microseconds.
    pub started_at_micros: i64,
    /// Scheme name.
    pub scheme: String,
    /// Scheme and model parameters.
    pub parameters: serde_json::Value,
    /// Seed.
    pub seed: u64,
    /// Repetitions.
    pub repeats: u32,
    /// Folds.
    pub folds: u32,
    /// geofold version.
    pub tool_version: String,
}

/// A run ready to be written.
pub struct FinishedRun<'a> {
    /// Its record.
    pub record: &'a RunRecord,
    /// Its plan.
    pub plan: &'a Plan,
    /// Its outcome.
    pub outcome: &'a RunOutcome,
}

/// Where a store put things, for the summary.
#[derive(Debug, Clone, Serialize)]
pub struct StoreReport {
    /// `postgis` or `gpkg`.
    pub store: &'static str,
    /// The schema (PostGIS) or file (GeoPackage).
    pub location: String,
    /// The per-unit layer to open in a GIS (view or feature table), with its key column.
    pub layer: String,
    /// The block layer.
    pub blocks_layer: String,
    /// Rows written per table.
    pub rows_written: Vec<(String, u64)>,
}

/// A place where runs are recorded.
pub trait ResultStore {
    /// Creates or upgrades the results tables and checks they can hold this source's results.
    ///
    /// # Errors
    /// A results store made for another id type or CRS; no permission.
    fn prepare(&mut self, info: &SourceInfo) -> Result<(), Error>;
    /// Records the runs as `running`, visible at once.
    ///
    /// # Errors
    /// Database or file errors.
    fn begin(&mut self, info: &SourceInfo, records: &[RunRecord]) -> Result<(), Error>;
    /// Writes all result rows of the runs and marks them succeeded, atomically:
    /// on error nothing of these runs' results remains.
    ///
    /// # Errors
    /// Database or file errors.
    fn commit(
        &mut self,
        info: &SourceInfo,
        dataset: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error>;
    /// Marks the runs failed with the message (best effort: logs its own failure).
    fn fail(&mut self, records: &[RunRecord], message: &str);
}

/// The default job label for a source table: its table name, lowercased, with
/// every character outside `[a-z0-9_]` replaced by `_`, prefixed with `job_`
/// when it does not start with a letter.
pub fn default_job(table: &str) -> String {
    let name = table.rsplit(['.', ':', '/']).next().unwrap_or(table);
    sanitize_job(name)
}

/// Makes a label usable as a table or view name (see [`default_job`]).
pub fn sanitize_job(label: &str) -> String {
    let mut name: String = label
        .trim_matches('"')
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '_'
            }
        })
        .collect();
    if !name.starts_with(|c: char| c.is_ascii_lowercase()) {
        name = format!("job_{name}");
    }
    name.truncate(60);
    name
}

/// Table names the results store uses itself; a job cannot be named like them.
pub const RESERVED_NAMES: &[&str] = &[
    "runs",
    "fold_members",
    "predictions",
    "unit_errors",
    "fold_scores",
    "run_scores",
    "blocks",
    "schema_version",
    "store_settings",
];

/// Checks a job label.
///
/// # Errors
/// [`Error::Usage`] for a label that is not `[a-z][a-z0-9_]*` or is reserved.
pub fn check_job(job: &str) -> Result<(), Error> {
    let valid = job.len() <= 60
        && job.starts_with(|c: char| c.is_ascii_lowercase())
        && job
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_');
    if !valid {
        return Err(Error::Usage(format!(
            "--job {job:?}: a job label is lower-case letters, digits and _, starting with a letter (at most 60)"
        )));
    }
    if RESERVED_NAMES.contains(&job) || job.ends_with("_blocks") {
        return Err(Error::Usage(format!(
            "--job {job:?} is reserved: results tables use that name (and job views add _blocks)"
        )));
    }
    Ok(())
}

/// Adds `rows` to the count of `table` in a store's report, keeping first-seen order.
pub fn add_count(counts: &mut Vec<(String, u64)>, table: &str, rows: u64) {
    match counts.iter_mut().find(|(name, _)| name == table) {
        Some(entry) => entry.1 += rows,
        None => counts.push((table.to_string(), rows)),
    }
}

/// The columns a run reads, in order: id, geometry, target, features.
pub fn wanted_columns<'a>(id: &'a str, geom: &'a str, columns: &'a ColumnSpec) -> Vec<&'a str> {
    [id, geom, columns.target.as_str()]
        .into_iter()
        .chain(columns.features.iter().map(String::as_str))
        .collect()
}

/// Every wanted column that `exists` does not know, as `column a, column b`;
/// None when all exist.
pub fn missing_columns(wanted: &[&str], exists: impl Fn(&str) -> bool) -> Option<String> {
    let missing: Vec<String> = wanted
        .iter()
        .filter(|name| !exists(name))
        .map(|name| format!("column {name}"))
        .collect();
    (!missing.is_empty()).then(|| missing.join(", "))
}

/// Checks the fixed properties a results store recorded when it was created
/// (`store_settings`: `unit_id_type`, `block_srid`) against what this source
/// needs. `elsewhere` says where to write instead.
///
/// # Errors
/// [`Error::Store`] naming the property that differs.
pub fn check_store_settings(
    store: &str,
    settings: &[(String, String)],
    unit_id_type: &str,
    block_srid: i32,
    elsewhere: &str,
) -> Result<(), Error> {
    for (key, value) in settings {
        let expected = match key.as_str() {
            "unit_id_type" => unit_id_type.to_string(),
            "block_srid" => block_srid.to_string(),
            _ => continue,
        };
        if *value != expected {
            return Err(Error::Store {
                store: store.to_string(),
                problem: format!(
                    "it holds results with {key} {value}, but this source needs {expected}; {elsewhere}"
                ),
            });
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_jobs_are_clean_identifiers() {
        assert_eq!(default_job("public.Sub-Catchments"), "sub_catchments");
        assert_eq!(default_job("basin.gpkg:2024 units"), "job_2024_units");
        assert!(check_job(&default_job("x\"; DROP TABLE y; --")).is_ok());
        assert!(check_job("runs").is_err());
        assert!(check_job("Bad").is_err());
    }

    #[test]
    fn missing_columns_are_all_listed() {
        let present = ["id", "geom", "y"];
        let exists = |name: &str| present.contains(&name);
        assert_eq!(missing_columns(&["id", "geom", "y"], exists), None);
        assert_eq!(
            missing_columns(&["id", "rain", "geom", "soil"], exists).as_deref(),
            Some("column rain, column soil")
        );
    }

    #[test]
    fn a_store_made_for_another_id_kind_or_srid_is_refused() {
        let settings = vec![
            ("unit_id_type".to_string(), "bigint".to_string()),
            ("block_srid".to_string(), "32631".to_string()),
        ];
        assert!(check_store_settings("s", &settings, "bigint", 32631, "elsewhere").is_ok());
        let error = check_store_settings("s", &settings, "text", 32631, "elsewhere").unwrap_err();
        assert!(error.to_string().contains("unit_id_type bigint"), "{error}");
        assert_eq!(error.exit_code(), crate::error::exit::DATA);
        assert!(check_store_settings("s", &settings, "bigint", 3035, "elsewhere").is_err());
    }
}
