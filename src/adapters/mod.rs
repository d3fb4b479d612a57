//! Adapters: where units come from and where results go.
//!
//! A [`Source`] feeds rows into the core's [`UnitCollector`]; a [`ResultStore`]
//! records runs, writes a finished run's rows (defined once in
//! [`crate::results`]) and reads runs back. PostGIS and GeoPackage each
//! implement both, so the pipeline is written once and knows no store.
//!
//! - [`postgis`]: tokio-postgres, binary COPY both ways, one transaction per write.
//! - [`gpkg`]: rusqlite with bundled SQLite, GeoPackageBinary geometries.
//! - [`sql`]: SQL identifiers and literals, shared by both.
//! - [`wkb`]: WKB for the region polygons geofold makes.
//! - [`history`]: reading a job's history back and removing old runs.
//! - [`readback`]: reading a stored run back for `report` and `map`.

pub mod gpkg;
pub mod history;
pub mod postgis;
pub mod readback;
pub mod sql;
pub mod wkb;

use std::path::PathBuf;
use std::time::Duration;

use serde::Serialize;
use uuid::Uuid;

use crate::core::diagnostics::contiguity::Contiguity;
use crate::core::units::{Dataset, IdKind, UnitCollector, UnitId};
use crate::error::{Error, Location};
use crate::results::rows::{FinishedRun, RowSource, RunRecord};

/// The columns the user asked for.
#[derive(Debug, Clone, PartialEq, Serialize, serde::Deserialize)]
pub struct ColumnSpec {
    /// Id column; None lets the adapter pick (the primary key).
    pub id: Option<String>,
    /// Geometry column; None lets the adapter pick (the only geometry column).
    pub geom: Option<String>,
    /// Target column.
    pub target: String,
    /// Feature columns, in order.
    pub features: Vec<String>,
    /// A group column (integer or text), for schemes that keep groups together.
    #[serde(default)]
    pub group: Option<String>,
    /// An exposure column (e.g. a population), for count models.
    #[serde(default)]
    pub exposure: Option<String>,
}

/// What kind of coordinate reference system a layer has.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum CrsKind {
    /// Projected (planar) coordinates in a length unit.
    Projected,
    /// Longitude/latitude in degrees.
    Geographic,
    /// No CRS is defined (SRID 0 in PostGIS; SRS id 0 or -1 in a GeoPackage).
    Undefined,
}

/// What an adapter found out about the source before reading it.
#[derive(Debug, Clone, Serialize)]
pub struct SourceInfo {
    /// `postgis` or `gpkg`.
    pub store: &'static str,
    /// The table as shown to users: `schema.table`, or `file.gpkg:layer`.
    pub table: String,
    /// PostGIS: the quoted `"schema"."table"`; GeoPackage: the layer name.
    pub qualified_table: String,
    /// The GeoPackage file of a GeoPackage source.
    pub file: Option<PathBuf>,
    /// Id column actually used.
    pub id_column: String,
    /// Geometry column actually used.
    pub geom_column: String,
    /// Target column actually used.
    pub target_column: String,
    /// Feature columns actually used.
    pub feature_columns: Vec<String>,
    /// Per feature column, whether it is text (a categorical feature,
    /// one-hot encoded by the collector).
    pub text_features: Vec<bool>,
    /// Group column actually used, if any.
    pub group_column: Option<String>,
    /// Exposure column actually used, if any.
    pub exposure_column: Option<String>,
    /// Kind of the id column.
    pub id_kind: IdKind,
    /// The id column's own SQL type (`integer`, `bigint`, `text`, …), so job
    /// layers join without casting the source side.
    pub id_type: String,
    /// SRID of the geometry column in the source.
    pub source_srid: i32,
    /// SRID of the coordinates the core sees (the distance CRS).
    pub srid: i32,
    /// Kind of the distance CRS.
    pub crs: CrsKind,
    /// Singular name of the distance CRS's length unit (`metre`, `foot`…) when known.
    pub length_unit: Option<String>,
    /// The geometry column's declared type (`MULTIPOLYGON`, `POINT`, `GEOMETRY`…), upper case.
    pub declared_geometry_type: String,
    /// WKT of the distance CRS when known (GeoPackage SRS rows need it).
    pub srs_wkt: Option<String>,
    /// Name of the distance CRS when known.
    pub srs_name: Option<String>,
}

impl SourceInfo {
    /// A length in the distance CRS, in words: `4 km`, `800 m`, `2.5 CRS units`.
    pub fn length(&self, value: f64) -> String {
        describe_length(value, self.length_unit.as_deref())
    }
}

/// A length in a CRS unit, in words (metres become m or km).
pub fn describe_length(value: f64, unit: Option<&str>) -> String {
    // Four significant digits (at most three decimals), trailing zeros dropped.
    let plain = |v: f64| {
        let magnitude = if v == 0.0 {
            0
        } else {
            v.abs().log10().floor() as i32
        };
        let decimals = (3 - magnitude).clamp(0, 3) as usize;
        let text = format!("{v:.decimals$}");
        if text.contains('.') {
            text.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            text
        }
    };
    let metres =
        unit.is_some_and(|u| ["metre", "meter", "m"].contains(&u.to_ascii_lowercase().as_str()));
    match unit {
        Some(_) if metres && value.abs() >= 1000.0 => format!("{} km", plain(value / 1000.0)),
        Some(_) if metres => format!("{} m", plain(value)),
        Some(other) => format!("{} × {other}", plain(value)),
        None => format!("{} CRS units", plain(value)),
    }
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
    /// The queen or rook contiguity of the units of `data` (which came from
    /// this source), as pairs of indices into `data`, each pair once with the
    /// lower index first. PostGIS computes it in the database; a GeoPackage in
    /// geofold; both follow the DE-9IM rules of
    /// [`contiguity`](crate::core::diagnostics::contiguity).
    ///
    /// # Errors
    /// Geometries that are not polygons; database or file errors.
    fn contiguity(&mut self, data: &Dataset, rule: Contiguity) -> Result<Vec<(u32, u32)>, Error>;
    /// Reads the prediction locations `table` (a PostGIS table in the
    /// source's database, or a layer of the source GeoPackage) with its
    /// geometry column `geom` (None: its only one), as representative points
    /// in the distance CRS. Their SRID must be the source's, unless
    /// `distance_srid` transforms both.
    ///
    /// # Errors
    /// [`Error::NotFound`] (or a missing-file error) for a missing table,
    /// layer or column (exit 66); [`Error::Input`] for another SRID, a
    /// geometry that cannot be decoded, or no usable location (exit 65).
    fn read_locations(
        &mut self,
        table: &str,
        geom: Option<&str>,
        distance_srid: Option<i32>,
    ) -> Result<Locations, Error>;
}

/// Turns pairs of source ids into sorted, unique pairs of dataset indices,
/// leaving out ids the dataset does not hold (skipped rows).
pub fn index_pairs(
    data: &Dataset,
    pairs: impl IntoIterator<Item = (UnitId, UnitId)>,
) -> Vec<(u32, u32)> {
    let index = |id: &UnitId| data.ids.binary_search(id).ok().map(|i| i as u32);
    let mut found: Vec<(u32, u32)> = pairs
        .into_iter()
        .filter_map(|(a, b)| {
            let (i, j) = (index(&a)?, index(&b)?);
            (i != j).then(|| (i.min(j), i.max(j)))
        })
        .collect();
    found.sort_unstable();
    found.dedup();
    found
}

/// Prediction locations as read.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Locations {
    /// Where they came from: `schema.table.geom` or `file.gpkg:layer`.
    pub table: String,
    /// Each usable row's representative point, in the distance CRS, in the
    /// order the rows came (nothing depends on that order).
    #[serde(skip)]
    pub points: Vec<[f64; 2]>,
    /// How many were read (the number of points).
    pub count: usize,
    /// Rows with a NULL or empty geometry, skipped.
    pub skipped: u64,
}

/// A map layer a store made for a job.
#[derive(Debug, Clone, Serialize)]
pub struct Layer {
    /// How to find it: `schema.view` or `file.gpkg:layer`.
    pub name: String,
    /// Its key column.
    pub key: String,
    /// What it shows.
    pub shows: String,
}

/// Where a store put things, for the summary.
#[derive(Debug, Clone, Serialize)]
pub struct StoreReport {
    /// `postgis` or `gpkg`.
    pub store: &'static str,
    /// The schema (PostGIS) or file (GeoPackage).
    pub location: String,
    /// The job's map layers, now showing this run.
    pub layers: Vec<Layer>,
    /// Rows written per table.
    pub rows_written: Vec<(String, u64)>,
}

/// A run as read back from a store.
#[derive(Debug, Clone, Serialize)]
pub struct StoredRun {
    /// Its id.
    pub run_id: Uuid,
    /// Its job.
    pub job: String,
    /// The primary run of a comparison run.
    pub primary_run_id: Option<Uuid>,
    /// running, succeeded or failed.
    pub status: String,
    /// ISO 8601 UTC.
    pub started_at: String,
    /// ISO 8601 UTC, when finished.
    pub finished_at: Option<String>,
    /// Scheme.
    pub scheme: String,
    /// Model.
    pub model: String,
    /// Units used.
    pub units_used: Option<i64>,
    /// Input fingerprint.
    pub input_fingerprint: Option<String>,
    /// Scheme and model options.
    pub parameters: serde_json::Value,
    /// Why it failed.
    pub error_message: Option<String>,
    /// Whether it is the job's pinned baseline.
    pub pinned: bool,
    /// `(score, statistic, value)` of its run scores.
    pub scores: Vec<(String, String, Option<f64>)>,
}

/// One row of a table of held-out predictions loaded for `geofold score`;
/// every value as found (None for NULL).
#[derive(Debug, Clone, PartialEq)]
pub struct PredictionRow {
    /// The unit id, as text.
    pub unit_id: Option<String>,
    /// Repetition, from 1 (None also when the table has no such column).
    pub repetition: Option<i64>,
    /// Fold, from 1.
    pub fold: Option<i64>,
    /// The prediction.
    pub predicted: Option<f64>,
}

/// The columns a predictions table must have (`repetition` may be left
/// out when the run has one repetition).
pub const PREDICTION_COLUMNS: [&str; 4] = ["unit_id", "repetition", "fold", "predicted"];

/// A place where runs are recorded.
pub trait ResultStore {
    /// Where it is, for messages: `schema geofold in user@host/db`, or a path.
    fn location(&self) -> String;
    /// Enters the job's exclusive section: one run of a job at a time. Held
    /// until the store is dropped. Waits up to `wait` for another run of the
    /// job to finish.
    ///
    /// # Errors
    /// [`Error::Busy`] naming who holds the job.
    fn lock_job(&mut self, job: &str, wait: Duration) -> Result<(), Error>;
    /// Creates or upgrades the results tables, and marks failed every run
    /// left `running` by a process that is gone.
    ///
    /// # Errors
    /// No permission (the grant named); a store made by a newer geofold.
    fn prepare(&mut self, source: &SourceInfo) -> Result<(), Error>;
    /// Records the runs as `running`, visible at once.
    ///
    /// # Errors
    /// Database or file errors.
    fn begin(&mut self, source: &SourceInfo, records: &[RunRecord]) -> Result<(), Error>;
    /// Writes all result rows of the runs, marks them succeeded and points the
    /// job's map layers at the primary run, atomically: on error nothing of
    /// these runs' results remains.
    ///
    /// # Errors
    /// Database or file errors.
    fn commit(
        &mut self,
        source: &SourceInfo,
        data: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error>;
    /// Marks the runs failed with the message (best effort: logs its own failure).
    fn fail(&mut self, records: &[RunRecord], message: &str);
    /// Writes rows of results tables that belong to no run being written
    /// (an inspection), in one transaction; returns the rows per table.
    ///
    /// # Errors
    /// Database or file errors; nothing is written then.
    fn write_rows(
        &mut self,
        rows: &[Box<dyn RowSource<'_> + '_>],
    ) -> Result<Vec<(String, u64)>, Error>;
    /// The runs of a job (or of every job), newest first, at most `limit`.
    ///
    /// # Errors
    /// Database or file errors.
    fn runs(&mut self, job: Option<&str>, limit: usize) -> Result<Vec<StoredRun>, Error>;
    /// With `pinned`, pins run `run_id` as its job's baseline (unpinning the
    /// job's others) if it is a successful primary run; without, unpins it.
    /// Whether any row changed: false for a run that cannot be pinned, or
    /// that was not pinned.
    ///
    /// # Errors
    /// Database or file errors.
    fn set_pinned(&mut self, run_id: Uuid, pinned: bool) -> Result<bool, Error>;
    /// Every row of a table of held-out predictions in the store's database
    /// or file (`schema.table`, or a GeoPackage table or layer).
    ///
    /// # Errors
    /// [`Error::NotFound`] for a missing table or column; [`Error::Input`] for
    /// columns of the wrong type.
    fn read_predictions(&mut self, table: &str) -> Result<Vec<PredictionRow>, Error>;
    /// The job's latest inspection that found a residual autocorrelation
    /// range (call after [`ResultStore::prepare`]).
    ///
    /// # Errors
    /// Database or file errors.
    fn last_inspection(&mut self, job: &str) -> Result<Option<StoredInspection>, Error>;
}

/// The figures of a stored inspection that later runs are checked against.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StoredInspection {
    /// Its id.
    pub inspection_id: Uuid,
    /// When it ran (ISO 8601, UTC).
    pub started_at: String,
    /// The effective range of the chosen semivariogram model (CRS units).
    pub fitted_range: f64,
}

impl dyn ResultStore + '_ {
    /// The job's latest successful primary run.
    ///
    /// # Errors
    /// As [`ResultStore::runs`].
    pub fn last_successful(&mut self, job: &str) -> Result<Option<StoredRun>, Error> {
        Ok(self
            .runs(Some(job), usize::MAX)?
            .into_iter()
            .find(|run| run.status == "succeeded" && run.primary_run_id.is_none()))
    }

    /// The job's pinned baseline run.
    ///
    /// # Errors
    /// As [`ResultStore::runs`].
    pub fn pinned(&mut self, job: &str) -> Result<Option<StoredRun>, Error> {
        Ok(self
            .runs(Some(job), usize::MAX)?
            .into_iter()
            .find(|run| run.pinned))
    }
}

/// Longest job label: a job's layers add `_regions`, and PostgreSQL cuts
/// names at 63 bytes.
pub const MAX_JOB_LEN: usize = 63 - crate::results::REGIONS_SUFFIX.len();

/// The default job label for a source table: its schema and table name (so
/// `a.units` and `b.units` differ), or a GeoPackage layer's name, lowercased,
/// with every character outside `[a-z0-9_]` replaced by `_`, prefixed with
/// `job_` when it does not start with a letter, cut to [`MAX_JOB_LEN`].
pub fn default_job(table: &str) -> String {
    let name = match table.rsplit_once(':') {
        Some((_, layer)) => layer.to_string(),
        None => table.replace('.', "_"),
    };
    sanitize_job(&name)
}

/// Makes a label usable as a table or view name (see [`default_job`]).
pub fn sanitize_job(label: &str) -> String {
    let mut name: String = label
        .chars()
        .filter(|&c| c != '"')
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
    name.truncate(MAX_JOB_LEN);
    name
}

/// Checks a job label.
///
/// # Errors
/// [`Error::Usage`] for a label that is not `[a-z][a-z0-9_]*` of at most
/// [`MAX_JOB_LEN`] bytes, is a results table's name, or is a GeoPackage or
/// SQLite system name.
pub fn check_job(job: &str) -> Result<(), Error> {
    let valid = job.starts_with(|c: char| c.is_ascii_lowercase())
        && job
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_');
    if !valid || job.len() > MAX_JOB_LEN {
        return Err(Error::Usage(format!(
            "--job {job:?}: a job label is lower-case letters, digits and _, starting with a letter, \
             at most {MAX_JOB_LEN} characters (its layers add _regions, and PostgreSQL names end at 63)"
        )));
    }
    if crate::results::reserved_names().contains(&job) {
        return Err(Error::Usage(format!(
            "--job {job:?} is reserved: the results use that name"
        )));
    }
    for prefix in ["gpkg_", "rtree_", "sqlite_", "pg_"] {
        if job.starts_with(prefix) {
            return Err(Error::Usage(format!(
                "--job {job:?}: names starting with {prefix} belong to the GeoPackage, SQLite or PostgreSQL system tables"
            )));
        }
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

/// How a store compares column names.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NameMatch {
    /// As PostgreSQL does for a quoted name, falling back to the lower-case
    /// form an unquoted name folds to.
    Postgres,
    /// As SQLite does: ignoring ASCII case.
    Sqlite,
}

/// Finds the columns the user named among `existing`, as the store matches
/// names. Returns the actual names, in the order asked; every missing column
/// is listed at once with the closest existing names.
///
/// # Errors
/// [`Error::NotFound`] naming each missing column, `where_` (e.g. `table x.y`)
/// and suggestions.
pub fn resolve_columns(
    wanted: &[&str],
    existing: &[String],
    rule: NameMatch,
    where_: &str,
) -> Result<Vec<String>, Error> {
    let mut found = Vec::with_capacity(wanted.len());
    let mut missing = Vec::new();
    for name in wanted {
        let exact = existing.iter().find(|c| c.as_str() == *name);
        let loose = match rule {
            NameMatch::Postgres => existing.iter().find(|c| **c == name.to_lowercase()),
            NameMatch::Sqlite => existing.iter().find(|c| c.eq_ignore_ascii_case(name)),
        };
        match exact.or(loose) {
            Some(column) => found.push(column.clone()),
            None => missing.push(format!("column {name}{}", suggest(name, existing))),
        }
    }
    if missing.is_empty() {
        Ok(found)
    } else {
        Err(Error::NotFound {
            what: format!("{} in {where_}", missing.join(", ")),
        })
    }
}

/// The source columns a run names, each as the table spells it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NamedColumns {
    /// The id column.
    pub id: String,
    /// The geometry column.
    pub geom: String,
    /// The target column.
    pub target: String,
    /// The feature columns, in the order given.
    pub features: Vec<String>,
    /// The group column, if one was named.
    pub group: Option<String>,
    /// The exposure column, if one was named.
    pub exposure: Option<String>,
}

/// [`resolve_columns`] for every column of `columns`, with the id and
/// geometry columns already chosen (`id`, `geom`).
///
/// # Errors
/// As [`resolve_columns`].
pub fn resolve_named_columns(
    id: &str,
    geom: &str,
    columns: &ColumnSpec,
    existing: &[String],
    rule: NameMatch,
    where_: &str,
) -> Result<NamedColumns, Error> {
    let wanted: Vec<&str> = [id, geom, columns.target.as_str()]
        .into_iter()
        .chain(columns.features.iter().map(String::as_str))
        .chain(columns.group.as_deref())
        .chain(columns.exposure.as_deref())
        .collect();
    let mut resolved = resolve_columns(&wanted, existing, rule, where_)?.into_iter();
    let mut next = || resolved.next().unwrap_or_default();
    Ok(NamedColumns {
        id: next(),
        geom: next(),
        target: next(),
        features: columns.features.iter().map(|_| next()).collect(),
        group: columns.group.as_ref().map(|_| next()),
        exposure: columns.exposure.as_ref().map(|_| next()),
    })
}

/// What a column's declared type holds, as a source store sees it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ValueKind {
    /// Numbers.
    Number,
    /// Text.
    Text,
    /// Anything else.
    Other,
}

/// Checks the types of the value columns: the target and the exposure must
/// hold numbers; a feature numbers or text (a categorical feature). `kind`
/// tells a column's kind (None for a column not found); `problem(name,
/// is_feature)` words a column of the wrong kind. Returns, per feature,
/// whether it is text.
pub fn check_value_kinds(
    target: &str,
    features: &[String],
    exposure: Option<&str>,
    kind: impl Fn(&str) -> Option<ValueKind>,
    problem: impl Fn(&str, bool) -> (Location, String),
    problems: &mut Vec<(Location, String)>,
) -> Vec<bool> {
    let text_features = features
        .iter()
        .map(|name| kind(name) == Some(ValueKind::Text))
        .collect();
    for name in std::iter::once(target)
        .chain(features.iter().map(String::as_str))
        .chain(exposure)
    {
        let is_feature = features.iter().any(|f| f == name);
        match kind(name) {
            None | Some(ValueKind::Number) => {}
            Some(ValueKind::Text) if is_feature => {}
            Some(_) => problems.push(problem(name, is_feature)),
        }
    }
    text_features
}

/// ` (did you mean a, b?)` with up to three existing names close to `name`
/// (Jaro–Winkler similarity 0.8 or more, or one of at least 3 letters
/// contained in the other, ignoring case), or nothing.
pub fn suggest(name: &str, existing: &[String]) -> String {
    let lower = name.to_lowercase();
    let mut scored: Vec<(f64, &String)> = existing
        .iter()
        .map(|candidate| {
            let other = candidate.to_lowercase();
            let mut score = strsim::jaro_winkler(&lower, &other);
            let (short, long) = if lower.len() <= other.len() {
                (&lower, &other)
            } else {
                (&other, &lower)
            };
            if short.len() >= 3 && long.contains(short.as_str()) {
                score = score.max(0.9);
            }
            (score, candidate)
        })
        .filter(|(score, _)| *score >= 0.8)
        .collect();
    scored.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(b.1)));
    let names: Vec<&str> = scored.iter().take(3).map(|(_, c)| c.as_str()).collect();
    if names.is_empty() {
        String::new()
    } else {
        format!(" (did you mean {}?)", names.join(", "))
    }
}

#[cfg(test)]
mod tests;
