//! A stored run read back, and turned into what the renderer draws.
//!
//! - [`load`]: reads one run (and what belongs to it: its folds, scores,
//!   per-unit errors, exclusions, regions, comparison run, the job's history
//!   and latest inspection, the unit geometries and the CRS) through
//!   [`ReadBack`](crate::adapters::readback::ReadBack), the same way from
//!   either store, into a [`StoredRun`].
//! - [`map`]: [`StoredRun`] → [`MapInput`](crate::render::MapInput) (pure).
//! - [`report`]: [`StoredRun`] → [`ReportInput`](crate::render::report::input::ReportInput) (pure).
//!
//! Nothing derived is read: the residual and the absolute error of a unit are
//! computed here from `held_out` (one repetition) or `unit_summaries`
//! (several), exactly as the views `predictions` and `unit_errors` of
//! [`crate::results::views`] define them.

pub mod load;
pub mod map;
pub mod report;

use std::collections::BTreeMap;

use geo_types::{Geometry, MultiPolygon};
use serde::Serialize;

use crate::adapters::readback::{CrsFacts, GeometryOrigin};
use crate::results::rows::Owned;
use crate::results::TableDef;

/// A row of a results table with its definition, read by column name.
pub struct Row<'a> {
    table: &'a TableDef,
    values: &'a [Owned],
}

impl<'a> Row<'a> {
    /// A row of `table` (values in its column order).
    pub fn new(table: &'a TableDef, values: &'a [Owned]) -> Row<'a> {
        Row { table, values }
    }

    fn get(&self, name: &str) -> &'a Owned {
        self.table
            .columns
            .iter()
            .position(|c| c.name == name)
            .and_then(|i| self.values.get(i))
            .unwrap_or(&Owned::Null)
    }

    /// A text column (numbers as their text); None for NULL.
    pub fn text(&self, name: &str) -> Option<String> {
        match self.get(name) {
            Owned::Text(text) => Some(text.clone()),
            Owned::Int(number) => Some(number.to_string()),
            Owned::Float(number) => Some(number.to_string()),
            _ => None,
        }
    }

    /// A text column, empty for NULL.
    pub fn text_or_empty(&self, name: &str) -> String {
        self.text(name).unwrap_or_default()
    }

    /// An integer column.
    pub fn int(&self, name: &str) -> Option<i64> {
        match self.get(name) {
            Owned::Int(number) => Some(*number),
            Owned::Float(number) if number.fract() == 0.0 => Some(*number as i64),
            Owned::Text(text) => text.parse().ok(),
            _ => None,
        }
    }

    /// A double column (non-finite values as None).
    pub fn float(&self, name: &str) -> Option<f64> {
        match self.get(name) {
            Owned::Float(number) => Some(*number),
            Owned::Int(number) => Some(*number as f64),
            _ => None,
        }
        .filter(|v| v.is_finite())
    }

    /// A JSON column, parsed (`Null` when NULL or not JSON).
    pub fn json(&self, name: &str) -> serde_json::Value {
        self.text(name)
            .and_then(|text| serde_json::from_str(&text).ok())
            .unwrap_or(serde_json::Value::Null)
    }

    /// A geometry column.
    pub fn geometry(&self, name: &str) -> Option<&'a MultiPolygon<f64>> {
        match self.get(name) {
            Owned::Geometry(shape) => Some(shape),
            _ => None,
        }
    }
}

/// A run's `runs` row.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunRecord {
    /// Run id.
    pub run_id: String,
    /// Job.
    pub job: String,
    /// The primary run of a comparison run.
    pub primary_run_id: Option<String>,
    /// running, succeeded or failed.
    pub status: String,
    /// Start, ISO 8601 UTC as stored.
    pub started_at: String,
    /// End, when finished.
    pub finished_at: Option<String>,
    /// `postgis` or `gpkg`.
    pub source_store: String,
    /// Source table or layer as recorded.
    pub source_table: String,
    /// Id column.
    pub id_column: String,
    /// Geometry column.
    pub geometry_column: String,
    /// Target column.
    pub target_column: String,
    /// Feature columns.
    pub feature_columns: Vec<String>,
    /// Scheme name.
    pub scheme: String,
    /// Model name.
    pub model: String,
    /// Model family.
    pub family: String,
    /// Scheme and model options, gates.
    pub parameters: serde_json::Value,
    /// Seed.
    pub seed: i64,
    /// Repetitions.
    pub repeats: i64,
    /// Folds.
    pub folds: i64,
    /// Source SRID.
    pub source_srid: i32,
    /// Distance SRID.
    pub distance_srid: i32,
    /// geofold version.
    pub tool_version: String,
    /// Input fingerprint.
    pub input_fingerprint: Option<String>,
    /// Rows read.
    pub units_read: Option<i64>,
    /// Units used.
    pub units_used: Option<i64>,
    /// Rows skipped by reason.
    pub units_skipped: serde_json::Value,
    /// The job's pinned baseline.
    pub pinned: bool,
}

impl RunRecord {
    /// The record in a `runs` row.
    pub fn from_row(row: &Row<'_>) -> RunRecord {
        let srid = |name: &str| {
            row.int(name)
                .and_then(|v| i32::try_from(v).ok())
                .unwrap_or(0)
        };
        let features = match row.json("feature_columns") {
            serde_json::Value::Array(items) => items
                .iter()
                .filter_map(|v| v.as_str().map(str::to_string))
                .collect(),
            _ => Vec::new(),
        };
        RunRecord {
            run_id: row.text_or_empty("run_id"),
            job: row.text_or_empty("job"),
            primary_run_id: row.text("primary_run_id"),
            status: row.text_or_empty("status"),
            started_at: row.text_or_empty("started_at"),
            finished_at: row.text("finished_at"),
            source_store: row.text_or_empty("source_store"),
            source_table: row.text_or_empty("source_table"),
            id_column: row.text_or_empty("id_column"),
            geometry_column: row.text_or_empty("geometry_column"),
            target_column: row.text_or_empty("target_column"),
            feature_columns: features,
            scheme: row.text_or_empty("scheme"),
            model: row.text_or_empty("model"),
            family: row.text_or_empty("family"),
            parameters: row.json("parameters"),
            seed: row.int("seed").unwrap_or(0),
            repeats: row.int("repeats").unwrap_or(1),
            folds: row.int("folds").unwrap_or(0),
            source_srid: srid("source_srid"),
            distance_srid: srid("distance_srid"),
            tool_version: row.text_or_empty("tool_version"),
            input_fingerprint: row.text("input_fingerprint"),
            units_read: row.int("units_read"),
            units_used: row.int("units_used"),
            units_skipped: row.json("units_skipped"),
            pinned: row.int("pinned").unwrap_or(0) != 0,
        }
    }

    /// True for a successful run that is not a comparison run.
    pub fn is_primary_success(&self) -> bool {
        self.status == "succeeded" && self.primary_run_id.is_none()
    }
}

/// One unit of the run, with what its maps show.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitRecord {
    /// Its id, as text.
    pub unit_id: String,
    /// Its test fold in repetition 1.
    pub fold: Option<u32>,
    /// Folds of repetition 1 whose training set left it out.
    pub excluded_from: Vec<u32>,
    /// Observed target.
    pub observed: Option<f64>,
    /// Held-out prediction (mean over repetitions).
    pub predicted: Option<f64>,
    /// observed − predicted (the view `unit_errors`' residual).
    pub residual: Option<f64>,
    /// Absolute error (mean over repetitions: the view `unit_errors`' abs_error).
    pub abs_error: Option<f64>,
    /// Its geometry, when the store had one.
    pub geometry: Option<Geometry<f64>>,
}

/// A fold of one repetition with its sizes and scores.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldRecord {
    /// Repetition, from 1.
    pub repetition: u32,
    /// Fold, from 1.
    pub fold: u32,
    /// Training units.
    pub n_train: u64,
    /// Test units.
    pub n_test: u64,
    /// Scores by name, in stored order.
    pub scores: Vec<(String, Option<f64>)>,
}

/// A `diagnostics` row: Moran's I of something.
#[derive(Debug, Clone, PartialEq)]
pub struct MoranRecord {
    /// `target`, `residuals` or `held_out_residuals`.
    pub subject: String,
    /// The weights rule.
    pub weights: String,
    /// Units used.
    pub n: i64,
    /// Units a sample was drawn from.
    pub sampled_from: Option<i64>,
    /// I.
    pub value: f64,
    /// E\[I\] under randomisation.
    pub expected: Option<f64>,
    /// z under randomisation.
    pub z: Option<f64>,
    /// Two-sided p under randomisation.
    pub p: Option<f64>,
}

/// A job's inspection with its figures.
#[derive(Debug, Clone, PartialEq)]
pub struct InspectionRecord {
    /// Its id.
    pub inspection_id: String,
    /// When it ran.
    pub started_at: String,
    /// The model fitted for the residuals.
    pub model: String,
    /// Weights rule.
    pub weights: String,
    /// Units examined.
    pub units: i64,
    /// The advice in words.
    pub advice: String,
    /// Semivariogram lags of the residuals: (mean distance, semivariance, pairs).
    pub semivariogram: Vec<(f64, f64, u64)>,
    /// The chosen model: (name, nugget, partial sill, effective range).
    pub fit: Option<(String, f64, f64, f64)>,
    /// Correlogram classes: (mean distance or upper edge, Moran's I, pairs, z).
    pub correlogram: Vec<(f64, f64, u64, Option<f64>)>,
}

/// One `fold_distances` row: a summary of nearest distances.
#[derive(Debug, Clone, PartialEq)]
pub struct DistanceSummaryRecord {
    /// The run it belongs to.
    pub run_id: String,
    /// `cv` (test unit to nearest training unit) or `prediction`.
    pub kind: String,
    /// The fold; None for all folds together and for prediction rows.
    pub fold: Option<u32>,
    /// Distances summarised.
    pub n: u64,
    /// Units a seeded sample was drawn from, if sampled.
    pub sampled_from: Option<u64>,
    /// Minimum, 10th, 50th and 90th percentile, maximum.
    pub minimum: f64,
    /// 10th percentile.
    pub p10: f64,
    /// Median.
    pub median: f64,
    /// 90th percentile.
    pub p90: f64,
    /// Maximum.
    pub maximum: f64,
}

/// Everything of one run the report and the maps are made from.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredRun {
    /// The run.
    pub run: RunRecord,
    /// Every run of its job, oldest first.
    pub job_runs: Vec<RunRecord>,
    /// `(score, statistic, value)` of every run in `job_runs` that succeeded, by run id.
    pub run_scores: BTreeMap<String, Vec<(String, String, Option<f64>)>>,
    /// Its folds, by repetition and fold.
    pub folds: Vec<FoldRecord>,
    /// Its units, by id (as text).
    pub units: Vec<UnitRecord>,
    /// Units whose geometry the store did not have.
    pub units_without_geometry: u64,
    /// Where the geometries came from (None when not read).
    pub geometry_origin: Option<GeometryOrigin>,
    /// Why no geometry could be read (the source table or layer is gone), if so.
    pub geometry_problem: Option<String>,
    /// Fold regions of repetition 1: (fold, outline), by fold.
    pub regions: Vec<(u32, MultiPolygon<f64>)>,
    /// The CRS of the geometries.
    pub crs: CrsFacts,
    /// Moran's I rows about the run itself (its held-out residuals).
    pub diagnostics: Vec<MoranRecord>,
    /// Each fold's fitted terms: (repetition, fold, term, estimate), by
    /// repetition, fold and term (read for the report).
    pub coefficients: Vec<(u32, u32, String, f64)>,
    /// Nearest distances of a run with prediction locations (read for the
    /// report): test unit to nearest training unit in repetition 1, and
    /// prediction location to nearest unit, each ascending; empty otherwise.
    pub nearest_distances: (Vec<f64>, Vec<f64>),
    /// `fold_distances` rows of the run and of its comparison run (read for
    /// the report), ordered by run (this run first), kind and fold.
    pub fold_distances: Vec<DistanceSummaryRecord>,
    /// The job's latest inspection, if any.
    pub inspection: Option<InspectionRecord>,
}

impl StoredRun {
    /// The comparison run (random folds on the same units) of this run, if one succeeded.
    pub fn comparison(&self) -> Option<&RunRecord> {
        self.job_runs.iter().find(|r| {
            r.primary_run_id.as_deref() == Some(self.run.run_id.as_str()) && r.status == "succeeded"
        })
    }

    /// The fold numbers of repetition 1.
    pub fn fold_numbers(&self) -> Vec<u32> {
        let mut folds: Vec<u32> = self
            .folds
            .iter()
            .filter(|f| f.repetition == 1)
            .map(|f| f.fold)
            .collect();
        folds.sort_unstable();
        folds.dedup();
        folds
    }
}

/// A length in a CRS unit, in words: `4 km`, `800 m`, `2.5 CRS units`.
pub fn length(value: f64, crs: &CrsFacts) -> String {
    crate::adapters::describe_length(value, crs.unit_name.as_deref())
}
