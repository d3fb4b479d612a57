//! The rows a finished run writes, table by table, as values in the order of
//! each table's columns. Both stores write these rows through their own
//! encoders, so what a run stores is decided here once.

use geo_types::MultiPolygon;
use serde::Serialize;
use uuid::Uuid;

use super::{
    TableDef, COEFFICIENTS, DIAGNOSTICS, FOLDS, FOLD_DISTANCES, FOLD_EXCLUSIONS, FOLD_REGIONS,
    FOLD_SCORE_VALUES, HELD_OUT, NEAREST_DISTANCES, RUN_SCORE_VALUES, UNIT_SUMMARIES,
};
use crate::core::diagnostics::fold_distances::DistanceSummary;
use std::sync::OnceLock;

use crate::core::diagnostics::held_out::HeldOutMoran;
use crate::core::diagnostics::moran::{Inference, Moran};
use crate::core::units::{Dataset, UnitId};
use crate::core::validate::{unit_summary, RunOutcome};

mod sources;
pub use sources::MATCH_SCORE;
use sources::*;

/// The record of one run, as stored in `runs` (with the source's columns,
/// which the store takes from the source).
#[derive(Debug, Clone, Serialize)]
pub struct RunRecord {
    /// The run's id.
    pub run_id: Uuid,
    /// The job label.
    pub job: String,
    /// For a comparison run (random folds beside a spatial scheme), the primary run.
    pub primary_run_id: Option<Uuid>,
    /// Start, Unix microseconds.
    pub started_at_micros: i64,
    /// Scheme name.
    pub scheme: String,
    /// Model family name.
    pub model: String,
    /// `regression`, …
    pub family: &'static str,
    /// Scheme and model options and the run's gates: `{"scheme": {…}, "model": {…}, "exclusion-radius": …,
    /// "settings-hash": …, "gates": ["rmse<=1.25"], "baseline-runs": 5}`.
    pub parameters: serde_json::Value,
    /// Seed.
    pub seed: u64,
    /// Repetitions.
    pub repeats: u32,
    /// Folds (for leave-one-out schemes, the number of units).
    pub folds: u32,
    /// geofold version.
    pub tool_version: String,
    /// The process running it (`host:pid`), for finding runs whose process is gone.
    pub session: String,
    /// SHA-256 of the units used (see `Dataset::fingerprint`), computed once per run.
    pub input_fingerprint: String,
}

/// A value of a results row.
#[derive(Debug, Clone, PartialEq)]
pub enum Value<'a> {
    /// SQL NULL.
    Null,
    /// A run id.
    Uuid(Uuid),
    /// A borrowed text.
    Str(&'a str),
    /// A unit id, written as text.
    Id(&'a UnitId),
    /// An integer (the column decides 32 or 64 bits).
    Int(i64),
    /// A double.
    Float(f64),
    /// A multipolygon (its SRID is in the row's `srid` column).
    Geometry(&'a MultiPolygon<f64>),
    /// A timestamp, Unix microseconds.
    Timestamp(i64),
}

impl Value<'_> {
    /// A double or NULL.
    pub fn float(value: Option<f64>) -> Value<'static> {
        match value {
            Some(v) if v.is_finite() => Value::Float(v),
            _ => Value::Null,
        }
    }
}

/// A value read back from a store (for copying runs between stores).
#[derive(Debug, Clone, PartialEq)]
pub enum Owned {
    /// SQL NULL.
    Null,
    /// Text (run ids, timestamps, JSON and lists travel as text).
    Text(String),
    /// An integer (booleans as 0/1).
    Int(i64),
    /// A double.
    Float(f64),
    /// A multipolygon.
    Geometry(MultiPolygon<f64>),
}

impl Owned {
    /// The value to write.
    pub fn value(&self) -> Value<'_> {
        match self {
            Owned::Null => Value::Null,
            Owned::Text(text) => Value::Str(text),
            Owned::Int(number) => Value::Int(*number),
            Owned::Float(number) => Value::Float(*number),
            Owned::Geometry(shape) => Value::Geometry(shape),
        }
    }
}

/// Rows of one table; their values borrow from what lives for `'a`.
pub trait RowSource<'a> {
    /// The table.
    fn table(&self) -> &'static TableDef;
    /// How many rows.
    fn len(&self) -> usize;
    /// True when there are none.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Row `row`'s values, in column order, into `out` (cleared first).
    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>);
    /// True when the rows are still being computed while earlier tables are
    /// written: `len` and `fill` wait for them ([`LateFigures`]).
    fn is_late(&self) -> bool {
        false
    }
}

/// A finished run and its outcome.
pub struct FinishedRun<'a> {
    /// Its record.
    pub record: &'a RunRecord,
    /// Its outcome.
    pub outcome: &'a RunOutcome,
    /// What this write records.
    pub stage: Stage,
    /// Figures computed while the run's other rows are written; None when
    /// they are in the outcome already.
    pub late: Option<&'a LateFigures>,
}

/// The per-run diagnostics (Moran's I of the held-out residuals, the
/// nearest-distance summaries), computed on another thread while the
/// per-unit rows are written, and written last in the same transaction.
/// Whoever computes them must set both cells, also on failure (empty), or
/// the write waits for ever.
#[derive(Debug, Default)]
pub struct LateFigures {
    /// Moran's I of the held-out residuals (none, or one).
    pub held_out_moran: OnceLock<Vec<HeldOutMoran>>,
    /// The nearest-distance summaries.
    pub fold_distances: OnceLock<Vec<DistanceSummary>>,
}

/// Rows of [`LateFigures`]: `len` and `fill` wait until the items are set.
struct Late<'a, T, F> {
    table: &'static TableDef,
    items: &'a OnceLock<Vec<T>>,
    fill: F,
}

impl<'a, T, F> RowSource<'a> for Late<'a, T, F>
where
    F: Fn(&'a T, &mut Vec<Value<'a>>),
{
    fn table(&self) -> &'static TableDef {
        self.table
    }

    fn len(&self) -> usize {
        self.items.wait().len()
    }

    fn fill(&self, row: usize, out: &mut Vec<Value<'a>>) {
        out.clear();
        let items: &'a Vec<T> = self.items.wait();
        (self.fill)(&items[row], out);
    }

    fn is_late(&self) -> bool {
        true
    }
}

/// What a write of a run records.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stage {
    /// Everything of a run fitted by geofold: status `succeeded`.
    Complete,
    /// The folds of a run whose model is fitted elsewhere (`--assign-only`):
    /// `held_out` rows without predictions, folds, regions and exclusions;
    /// status `assigned`.
    Assigned,
    /// The scores of an assigned run (`geofold score`): its `held_out` rows
    /// replaced by scored ones, summaries and scores; status `succeeded`.
    Scored,
}

impl Stage {
    /// The run's status after the write.
    pub fn status(self) -> &'static str {
        match self {
            Stage::Assigned => "assigned",
            Stage::Complete | Stage::Scored => "succeeded",
        }
    }

    /// Whether the write replaces the run's `held_out` rows.
    pub fn replaces_held_out(self) -> bool {
        self == Stage::Scored
    }

    /// Whether the job's map layers show the run after the write.
    pub fn shows_on_maps(self) -> bool {
        self != Stage::Assigned
    }

    /// Whether the write has `table`'s rows.
    fn writes(self, table: &TableDef) -> bool {
        let folds = [
            FOLDS.name,
            FOLD_REGIONS.name,
            FOLD_EXCLUSIONS.name,
            NEAREST_DISTANCES.name,
            FOLD_DISTANCES.name,
        ];
        let scores = [
            UNIT_SUMMARIES.name,
            FOLD_SCORE_VALUES.name,
            RUN_SCORE_VALUES.name,
            COEFFICIENTS.name,
            DIAGNOSTICS.name,
        ];
        match self {
            Stage::Complete => true,
            Stage::Assigned => table.name == HELD_OUT.name || folds.contains(&table.name),
            Stage::Scored => table.name == HELD_OUT.name || scores.contains(&table.name),
        }
    }
}

/// The rows of every results table for one finished run, in table order.
pub fn run_rows<'a>(
    data: &'a Dataset,
    run: &FinishedRun<'a>,
    distance_srid: i32,
) -> Vec<Box<dyn RowSource<'a> + 'a>> {
    let run_id = run.record.run_id;
    let outcome = run.outcome;
    let mut folds = Vec::new();
    let mut scores = Vec::new();
    let mut terms = Vec::new();
    let mut regions = Vec::new();
    let mut exclusions = Vec::new();
    let mut offset = 0usize;
    for (repetition, rep) in outcome.repetitions.iter().enumerate() {
        for (fold, result) in rep.fold_results.iter().enumerate() {
            folds.push((repetition, fold));
            for (name, value) in &result.scores.values {
                scores.push((repetition, fold, *name, *value));
            }
            for term in 0..result.coefficients.len() {
                terms.push((repetition, fold, term));
            }
            exclusions.push((offset, repetition, fold));
            offset += rep.folds.excluded_from(fold as u32).len();
        }
        for region in 0..rep.folds.regions.len() {
            regions.push((repetition, region));
        }
    }
    let mut run_scores: Vec<(&'static str, &'static str, Option<f64>)> =
        vec![("n", "pooled", Some(outcome.pooled.n as f64))];
    for (name, value) in &outcome.pooled.values {
        run_scores.push((name, "pooled", *value));
    }
    for (name, spread) in &outcome.fold_spread {
        run_scores.push((name, "fold_mean", Some(spread.mean)));
        run_scores.push((name, "fold_sd", Some(spread.sd)));
    }
    for (name, spread) in outcome.repeat_spread.iter().flatten() {
        run_scores.push((name, "repeat_mean", Some(spread.mean)));
        run_scores.push((name, "repeat_sd", Some(spread.sd)));
    }
    for (name, value) in &outcome.baseline.values {
        run_scores.push((name, "baseline", *value));
    }
    if let Some(matching) = &outcome.matching {
        run_scores.push((MATCH_SCORE, "pooled", Some(matching.w)));
        if matching.w_per_repetition.len() > 1 {
            let spread = crate::core::metrics::spread(matching.w_per_repetition.iter().copied());
            run_scores.push((MATCH_SCORE, "repeat_mean", Some(spread.mean)));
            run_scores.push((MATCH_SCORE, "repeat_sd", Some(spread.sd)));
        }
    }
    let all: Vec<Box<dyn RowSource<'a> + 'a>> = vec![
        Box::new(HeldOut {
            run_id,
            data,
            outcome,
        }),
        Box::new(Summaries {
            run_id,
            data,
            outcome,
        }),
        Box::new(Listed {
            table: &FOLDS,
            items: folds,
            fill: move |&(repetition, fold): &(usize, usize), out: &mut Vec<Value<'a>>| {
                let result = &outcome.repetitions[repetition].fold_results[fold];
                out.extend([
                    Value::Uuid(run_id),
                    Value::Int(repetition as i64 + 1),
                    Value::Int(fold as i64 + 1),
                    Value::Int(result.n_train as i64),
                    Value::Int(result.n_test as i64),
                    Value::Int(result.n_excluded as i64),
                ]);
            },
        }),
        Box::new(Listed {
            table: &FOLD_SCORE_VALUES,
            items: scores,
            fill: move |&(repetition, fold, name, value): &(
                usize,
                usize,
                &'static str,
                Option<f64>,
            ),
                        out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(run_id),
                    Value::Int(repetition as i64 + 1),
                    Value::Int(fold as i64 + 1),
                    Value::Str(name),
                    Value::float(value),
                ]);
            },
        }),
        Box::new(Listed {
            table: &RUN_SCORE_VALUES,
            items: run_scores,
            fill: move |&(name, statistic, value): &(&'static str, &'static str, Option<f64>),
                        out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(run_id),
                    Value::Str(name),
                    Value::Str(statistic),
                    Value::float(value),
                ]);
            },
        }),
        Box::new(Listed {
            table: &FOLD_REGIONS,
            items: regions,
            fill: move |&(repetition, index): &(usize, usize), out: &mut Vec<Value<'a>>| {
                let region = &outcome.repetitions[repetition].folds.regions[index];
                out.extend([
                    Value::Uuid(run_id),
                    Value::Int(repetition as i64 + 1),
                    Value::Int(i64::from(region.fold) + 1),
                    Value::Str(region.kind),
                    Value::Str(&region.label),
                    Value::Int(i64::from(region.units)),
                    Value::Int(i64::from(distance_srid)),
                    Value::Geometry(&region.geometry),
                ]);
            },
        }),
        Box::new(Listed {
            table: &COEFFICIENTS,
            items: terms,
            fill: move |&(repetition, fold, term): &(usize, usize, usize),
                        out: &mut Vec<Value<'a>>| {
                let (name, estimate) =
                    &outcome.repetitions[repetition].fold_results[fold].coefficients[term];
                out.extend([
                    Value::Uuid(run_id),
                    Value::Int(repetition as i64 + 1),
                    Value::Int(fold as i64 + 1),
                    Value::Str(name),
                    Value::float(Some(*estimate)),
                ]);
            },
        }),
        Box::new(Exclusions {
            run_id,
            data,
            outcome,
            starts: exclusions,
            total: offset,
        }),
        Box::new(Nearest {
            run_id,
            data,
            outcome,
            repetitions: if outcome.matching.is_some() {
                outcome
                    .repetitions
                    .iter()
                    .enumerate()
                    .filter(|(_, r)| r.folds.cv_distances.is_some())
                    .map(|(i, _)| i)
                    .collect()
            } else {
                Vec::new()
            },
        }),
    ];
    let distance_values = move |d: &DistanceSummary, out: &mut Vec<Value<'a>>| {
        out.extend([
            Value::Uuid(run_id),
            Value::Str(d.kind),
            d.fold.map_or(Value::Null, |f| Value::Int(i64::from(f) + 1)),
            Value::Int(d.n as i64),
            d.sampled_from.map_or(Value::Null, |n| Value::Int(n as i64)),
        ]);
        out.extend(d.quantiles.iter().map(|&q| Value::Float(q)));
        out.push(Value::Float(d.mean));
    };
    let moran_values = move |h: &'a HeldOutMoran, out: &mut Vec<Value<'a>>| {
        moran_row_values(run_id, &held_out_row(h), out);
    };
    let mut all = all;
    match run.late {
        Some(late) => {
            all.push(Box::new(Late {
                table: &FOLD_DISTANCES,
                items: &late.fold_distances,
                fill: distance_values,
            }));
            all.push(Box::new(Late {
                table: &DIAGNOSTICS,
                items: &late.held_out_moran,
                fill: moran_values,
            }));
        }
        None => {
            all.push(listed(
                &FOLD_DISTANCES,
                outcome.fold_distances.iter().collect(),
                move |d: &&DistanceSummary, out: &mut Vec<Value<'a>>| distance_values(d, out),
            ));
            all.push(diagnostics_rows(
                run_id,
                outcome.held_out_moran.iter().map(held_out_row).collect(),
            ));
        }
    }
    all.into_iter()
        .filter(|rows| run.stage.writes(rows.table()))
        .collect()
}

/// One Moran's I of `diagnostics`.
pub struct MoranRow<'a> {
    /// `target`, `residuals` or `held_out_residuals`.
    pub subject: &'static str,
    /// The weights rule (`queen`, `knn:8`, …).
    pub weights: &'a str,
    /// Units a sample was drawn from, when one was.
    pub sampled_from: Option<usize>,
    /// I with the moments under normality and randomisation.
    pub moran: &'a Moran,
    /// The regression-residual moments, for full-data least-squares residuals.
    pub regression: Option<Inference>,
    /// The permutation test: permutations and p.
    pub permutation: Option<(usize, f64)>,
}

/// The `diagnostics` row of a run's held-out residual Moran's I.
fn held_out_row(h: &HeldOutMoran) -> MoranRow<'_> {
    MoranRow {
        subject: "held_out_residuals",
        weights: &h.weights,
        sampled_from: h.sampled_from,
        moran: &h.moran,
        regression: None,
        permutation: None,
    }
}

/// `diagnostics` rows of a run or an inspection (`analysis_id`).
pub fn diagnostics_rows<'a>(
    analysis_id: Uuid,
    rows: Vec<MoranRow<'a>>,
) -> Box<dyn RowSource<'a> + 'a> {
    listed(
        &DIAGNOSTICS,
        rows,
        move |r: &MoranRow<'a>, out: &mut Vec<Value<'a>>| moran_row_values(analysis_id, r, out),
    )
}

/// The values of one `diagnostics` row.
fn moran_row_values<'a>(analysis_id: Uuid, r: &MoranRow<'a>, out: &mut Vec<Value<'a>>) {
    let m = r.moran;
    out.extend([
        Value::Uuid(analysis_id),
        Value::Str(r.subject),
        Value::Str("morans_i"),
        Value::Str(r.weights),
        Value::Int(m.n as i64),
        r.sampled_from.map_or(Value::Null, |n| Value::Int(n as i64)),
        Value::Int(m.islands as i64),
        Value::Float(m.statistic),
        Value::Float(m.normality.expected),
        Value::Float(m.normality.variance),
        Value::Float(m.normality.z),
        Value::Float(m.normality.p_two_sided),
        Value::Float(m.randomisation.expected),
        Value::Float(m.randomisation.variance),
        Value::Float(m.randomisation.z),
        Value::Float(m.randomisation.p_two_sided),
        Value::float(r.regression.map(|g| g.expected)),
        Value::float(r.regression.map(|g| g.variance)),
        Value::float(r.regression.map(|g| g.z)),
        Value::float(r.regression.map(|g| g.p_two_sided)),
        Value::Int(r.permutation.map_or(0, |p| p.0 as i64)),
        Value::float(r.permutation.map(|p| p.1)),
    ]);
}

/// Rows of `table` given by a list of items and a function filling a row from one.
pub fn listed<'a, T: 'a, F>(
    table: &'static TableDef,
    items: Vec<T>,
    fill: F,
) -> Box<dyn RowSource<'a> + 'a>
where
    F: Fn(&T, &mut Vec<Value<'a>>) + 'a,
{
    Box::new(Listed { table, items, fill })
}
