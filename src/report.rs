//! What a run tells a person (text) and a program (`--json`).
//!
//! Both come from one [`Summary`], built from the core's outcomes and the
//! store's report, so the text and the JSON never disagree. Folds and
//! repetitions are numbered from 1, as in the tables.
//!
//! Every run shows its scores beside the training-mean (intercept-only)
//! baseline on the same folds, each fitted term's spread across folds (how
//! stable the fitted relationship is across space), and the counts of
//! predictions made by a fallback rule. A run made with `--assign-only`
//! shows its folds and the next step instead of scores.

use std::fmt::Write as _;

use serde::Serialize;

use crate::adapters::{Locations, SourceInfo, StoreReport};
use crate::core::diagnostics::fold_distances::DistanceSummary;
use crate::core::diagnostics::held_out::HeldOutMoran;
use crate::core::matching::Matching;
use crate::core::metrics::{score_def, Better, Scores, Spread, THRESHOLD};
use crate::core::units::{Dataset, Skipped};
use crate::core::validate::RunOutcome;
use crate::results::rows::RunRecord;

mod terms;
mod text;
use text::*;

use terms::term_spreads;
pub use terms::TermSpread;

/// Version of the `--json` document layout.
pub const JSON_SCHEMA_VERSION: u32 = 2;

/// How many skipped ids per reason the text summary lists (`--json` lists all).
const SKIPPED_IDS_SHOWN: usize = 5;

/// One fold as reported.
#[derive(Debug, Clone, Serialize)]
pub struct FoldSummary {
    /// Repetition, from 1.
    pub repetition: u32,
    /// Fold, from 1.
    pub fold: u32,
    /// Training units.
    pub n_train: usize,
    /// Held-out units.
    pub n_test: usize,
    /// Units excluded from training.
    pub n_excluded: usize,
    /// Scores of the fold's held-out predictions.
    pub scores: Scores,
}

/// One run as reported.
#[derive(Debug, Clone, Serialize)]
pub struct RunSummary {
    /// The run's id.
    pub run_id: String,
    /// `primary` or `comparison`.
    pub role: &'static str,
    /// For a comparison run, the primary run's id.
    pub primary_run_id: Option<String>,
    /// Scheme name.
    pub scheme: String,
    /// The scheme in plain words, with lengths in the CRS's unit.
    pub scheme_described: String,
    /// Scheme and model options.
    pub parameters: serde_json::Value,
    /// Seed.
    pub seed: u64,
    /// Repetitions.
    pub repeats: u32,
    /// Facts about the split (e.g. occupied blocks and units per block).
    pub split: serde_json::Map<String, serde_json::Value>,
    /// Warnings about the split.
    pub warnings: Vec<String>,
    /// Pooled over all held-out predictions.
    pub pooled: Scores,
    /// Mean and sample SD of per-fold scores.
    #[serde(serialize_with = "spread_map")]
    pub fold_spread: Vec<(&'static str, Spread)>,
    /// Mean and sample SD over repetitions of each repetition's pooled scores.
    #[serde(serialize_with = "optional_spread_map")]
    pub repeat_spread: Option<Vec<(&'static str, Spread)>>,
    /// The training-mean baseline on the same folds.
    pub baseline: Scores,
    /// Moran's I of the held-out residuals, when it could be computed.
    pub held_out_moran: Option<HeldOutMoran>,
    /// Test-to-training nearest distances (repetition 1), pooled then per
    /// fold, and the prediction distances when the run has locations.
    pub fold_distances: Vec<DistanceSummary>,
    /// Per fold and repetition.
    pub folds: Vec<FoldSummary>,
    /// Each fitted term's spread over all folds of all repetitions.
    pub coefficients: Vec<TermSpread>,
    /// Held-out predictions made by a fallback rule or with all-zero
    /// indicators: `(what, units)`.
    pub notes: Vec<(String, usize)>,
    /// Distance matching against the prediction locations: W (the
    /// Wasserstein-1 distance between the test-to-training distances during
    /// cross-validation and the prediction-location-to-data distances), per
    /// repetition and over all, with both medians. None without prediction
    /// locations.
    pub matching: Option<Matching>,
}

/// How much more optimistic the random folds were than the spatial ones.
#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    /// The score compared (the family's headline score).
    pub score: &'static str,
    /// Its pooled value in the spatial (primary) run.
    pub spatial: f64,
    /// Its pooled value in the random run.
    pub random: f64,
    /// (spatial − random) / spatial: the share by which random folds understate the error.
    pub understated_by: f64,
}

/// Everything a run reports.
#[derive(Debug, Clone, Serialize)]
pub struct Summary {
    /// Layout version of this document.
    pub schema_version: u32,
    /// `succeeded`.
    pub status: &'static str,
    /// The process exit code.
    pub exit_code: i32,
    /// The job label.
    pub job: String,
    /// The source.
    pub source: SourceInfo,
    /// The model in plain words.
    pub model: String,
    /// Exclusion buffer radius, when one was used.
    pub exclusion_radius: Option<f64>,
    /// Rows read.
    pub units_read: u64,
    /// Units used.
    pub units_used: usize,
    /// Rows skipped, total.
    pub units_skipped: u64,
    /// Rows skipped by reason, with every id.
    pub skipped: Skipped,
    /// Fingerprint of the used rows.
    pub input_fingerprint: String,
    /// The runs, primary first.
    pub runs: Vec<RunSummary>,
    /// Spatial versus random, when both ran.
    pub comparison: Option<Comparison>,
    /// True for a run made with `--assign-only`: folds recorded, no fit.
    pub assign_only: bool,
    /// False for a model that uses location only (the features were read
    /// so that it validates the same units).
    pub features_used: bool,
    /// Where the results went.
    pub results: StoreReport,
    /// The drift gates, judged on the stored scores (empty without gates).
    pub gates: Vec<crate::gates::GateResult>,
    /// The prediction locations read, when the run named them.
    pub prediction_locations: Option<Locations>,
}

impl Summary {
    /// Builds the summary of finished runs (`records[i]` goes with
    /// `outcomes[i]` and `described[i]`).
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        source: &SourceInfo,
        data: &Dataset,
        records: &[RunRecord],
        outcomes: &[RunOutcome],
        described: &[String],
        model: &str,
        exclusion_radius: Option<f64>,
        results: StoreReport,
    ) -> Summary {
        let runs: Vec<RunSummary> = records
            .iter()
            .zip(outcomes)
            .zip(described)
            .map(|((record, outcome), described)| {
                let first = outcome.repetitions.first();
                RunSummary {
                    run_id: record.run_id.to_string(),
                    role: if record.primary_run_id.is_some() {
                        "comparison"
                    } else {
                        "primary"
                    },
                    primary_run_id: record.primary_run_id.map(|id| id.to_string()),
                    scheme: record.scheme.clone(),
                    scheme_described: described.clone(),
                    parameters: record.parameters.clone(),
                    seed: record.seed,
                    repeats: record.repeats,
                    split: first.map(|r| r.folds.facts.clone()).unwrap_or_default(),
                    warnings: first.map(|r| r.folds.warnings.clone()).unwrap_or_default(),
                    pooled: outcome.pooled.clone(),
                    fold_spread: outcome.fold_spread.clone(),
                    repeat_spread: outcome.repeat_spread.clone(),
                    baseline: outcome.baseline.clone(),
                    held_out_moran: outcome.held_out_moran.clone(),
                    fold_distances: outcome.fold_distances.clone(),
                    folds: outcome
                        .repetitions
                        .iter()
                        .enumerate()
                        .flat_map(|(repetition, rep)| {
                            rep.fold_results
                                .iter()
                                .enumerate()
                                .map(move |(fold, f)| FoldSummary {
                                    repetition: repetition as u32 + 1,
                                    fold: fold as u32 + 1,
                                    n_train: f.n_train,
                                    n_test: f.n_test,
                                    n_excluded: f.n_excluded,
                                    scores: f.scores.clone(),
                                })
                        })
                        .collect(),
                    coefficients: term_spreads(outcome),
                    notes: outcome.notes.clone(),
                    matching: outcome.matching.clone(),
                }
            })
            .collect();
        let comparison = match (runs.as_slice(), outcomes.first()) {
            ([primary, random], Some(outcome))
                if random.scheme == "random" && primary.scheme != "random" =>
            {
                let score = outcome.family.headline();
                match (primary.pooled.get(score), random.pooled.get(score)) {
                    (Some(spatial), Some(random)) => Some(Comparison {
                        score,
                        spatial,
                        random,
                        understated_by: (spatial - random) / spatial,
                    }),
                    _ => None,
                }
            }
            _ => None,
        };
        Summary {
            schema_version: JSON_SCHEMA_VERSION,
            status: "succeeded",
            exit_code: 0,
            job: records.first().map(|r| r.job.clone()).unwrap_or_default(),
            source: source.clone(),
            model: model.to_string(),
            exclusion_radius,
            units_read: data.rows_read,
            units_used: data.len(),
            units_skipped: data.skipped.total(),
            skipped: data.skipped.clone(),
            input_fingerprint: records
                .first()
                .map(|r| r.input_fingerprint.clone())
                .unwrap_or_default(),
            runs,
            comparison,
            assign_only: false,
            features_used: true,
            results,
            gates: Vec::new(),
            prediction_locations: None,
        }
    }

    /// The summary of a model that uses location only.
    pub fn location_only(mut self) -> Summary {
        self.features_used = false;
        self
    }

    /// The summary of a run made with `--assign-only` (status `assigned`).
    pub fn assigned(mut self) -> Summary {
        self.status = "assigned";
        self.assign_only = true;
        self.comparison = None;
        self
    }

    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let source = &self.source;
        let _ = writeln!(
            out,
            "job {}: {} units used of {} rows read from {} ({})",
            self.job, self.units_used, self.units_read, source.table, source.store
        );
        let features = source.feature_columns.join(", ");
        let _ = match (self.assign_only, self.features_used) {
            (true, _) => writeln!(
                out,
                "folds assigned: {} to be predicted from {features} by {}",
                source.target_column, self.model
            ),
            (false, true) => writeln!(
                out,
                "validated: {} predicted from {features} with {}",
                source.target_column, self.model
            ),
            (false, false) => writeln!(
                out,
                "validated: {} predicted from location with {} ({features} read only so that the same units are \
                 validated as by models that use them)",
                source.target_column, self.model
            ),
        };
        if let Some(radius) = self.exclusion_radius {
            let _ = writeln!(
                out,
                "exclusion buffer: training units within {} of a test unit are left out of that fold's training",
                source.length(radius)
            );
        }
        if let Some(locations) = &self.prediction_locations {
            let _ = writeln!(
                out,
                "prediction locations: {} from {}{}",
                locations.points.len(),
                locations.table,
                if locations.skipped > 0 {
                    format!(" ({} skipped: NULL or empty geometry)", locations.skipped)
                } else {
                    String::new()
                }
            );
        }
        if self.units_skipped > 0 {
            let _ = writeln!(
                out,
                "skipped {} rows: {}",
                self.units_skipped,
                self.skipped.describe()
            );
            for (reason, ids) in self.skipped.ids() {
                let shown: Vec<String> = ids
                    .iter()
                    .take(SKIPPED_IDS_SHOWN)
                    .map(|id| id.to_string())
                    .collect();
                let more = if ids.len() > shown.len() {
                    format!(" and {} more (all in --json)", ids.len() - shown.len())
                } else {
                    String::new()
                };
                let _ = writeln!(out, "  {reason}: ids {}{more}", shown.join(", "));
            }
        }
        for run in &self.runs {
            if self.assign_only {
                self.assigned_text(&mut out, run);
            } else {
                self.run_text(&mut out, run);
            }
        }
        if let Some(c) = &self.comparison {
            let _ = writeln!(out);
            let _ = writeln!(
                out,
                "spatial vs random folds on the same {} units: {} {} vs {}; random folds understate the error for unseen places by {:.1}%",
                self.units_used,
                c.score.to_uppercase(),
                number(c.spatial),
                number(c.random),
                100.0 * c.understated_by,
            );
        }
        let _ = writeln!(out);
        let _ = writeln!(out, "results: {}", self.results.location);
        for layer in &self.results.layers {
            let _ = writeln!(
                out,
                "  layer {} (key {}): {}; it now shows run {}",
                layer.name,
                layer.key,
                layer.shows,
                self.runs.first().map(|r| r.run_id.as_str()).unwrap_or("")
            );
        }
        if !self.gates.is_empty() {
            let _ = writeln!(out);
            for gate in &self.gates {
                let _ = writeln!(out, "{}", gate.describe());
            }
            if crate::gates::any_breached(&self.gates) {
                let _ = writeln!(
                    out,
                    "a drift gate was breached: the results are written; exit code {}",
                    self.exit_code
                );
            }
        }
        let _ = writeln!(
            out,
            "scores describe predictive skill for places like the held-out ones, not causes; they do not replace \
             domain judgment, local rules or licensed practice."
        );
        out
    }
}
