//! What a run tells a person (text) and a program (`--json`).
//!
//! Both come from one [`Summary`], built from the core's outcomes and the
//! store's report, so the text and the JSON never disagree.

use std::fmt::Write as _;

use serde::Serialize;

use crate::adapters::{RunRecord, SourceInfo, StoreReport};
use crate::core::metrics::Scores;
use crate::core::units::Dataset;
use crate::core::validate::{FoldScore, FoldSpread, RunOutcome};

/// Version of the `--json` document layout.
pub const JSON_SCHEMA_VERSION: u32 = 1;

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
    /// Scheme and model parameters.
    pub parameters: serde_json::Value,
    /// Seed.
    pub seed: u64,
    /// Repetitions.
    pub repeats: u32,
    /// Pooled over all held-out predictions.
    pub pooled: Scores,
    /// Mean and SD of per-fold scores.
    pub fold_spread: FoldSpread,
    /// Per fold and repetition.
    pub folds: Vec<FoldScore>,
}

/// How much more optimistic the random folds were than the spatial ones.
#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    /// Pooled RMSE of the spatial (primary) run.
    pub spatial_rmse: f64,
    /// Pooled RMSE of the random run.
    pub random_rmse: f64,
    /// spatial_rmse - random_rmse.
    pub rmse_gap: f64,
    /// (spatial_rmse - random_rmse) / spatial_rmse: the share by which random CV understated the error.
    pub rmse_understated_by: f64,
    /// Pooled R² of the spatial run.
    pub spatial_r2: Option<f64>,
    /// Pooled R² of the random run.
    pub random_r2: Option<f64>,
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
    /// Rows read.
    pub units_read: u64,
    /// Units used.
    pub units_used: usize,
    /// Rows skipped, total.
    pub units_skipped: u64,
    /// Rows skipped by reason.
    pub skipped: crate::core::units::SkipCounts,
    /// Fingerprint of the used rows.
    pub input_fingerprint: String,
    /// The runs, primary first.
    pub runs: Vec<RunSummary>,
    /// Spatial versus random, when both ran.
    pub comparison: Option<Comparison>,
    /// Where the results went.
    pub results: StoreReport,
}

impl Summary {
    /// Builds the summary of finished runs (`records[i]` goes with `outcomes[i]`).
    pub fn new(
        source: &SourceInfo,
        dataset: &Dataset,
        records: &[RunRecord],
        outcomes: &[RunOutcome],
        results: StoreReport,
    ) -> Summary {
        let runs: Vec<RunSummary> = records
            .iter()
            .zip(outcomes)
            .map(|(record, outcome)| RunSummary {
                run_id: record.run_id.to_string(),
                role: if record.primary_run_id.is_some() {
                    "comparison"
                } else {
                    "primary"
                },
                primary_run_id: record.primary_run_id.map(|id| id.to_string()),
                scheme: record.scheme.clone(),
                parameters: record.parameters.clone(),
                seed: record.seed,
                repeats: record.repeats,
                pooled: outcome.pooled,
                fold_spread: outcome.fold_spread,
                folds: outcome.fold_scores.clone(),
            })
            .collect();
        let comparison = match runs.as_slice() {
            [primary, random] if primary.scheme != "random" && random.scheme == "random" => {
                Some(Comparison {
                    spatial_rmse: primary.pooled.rmse,
                    random_rmse: random.pooled.rmse,
                    rmse_gap: primary.pooled.rmse - random.pooled.rmse,
                    rmse_understated_by: (primary.pooled.rmse - random.pooled.rmse)
                        / primary.pooled.rmse,
                    spatial_r2: primary.pooled.r2,
                    random_r2: random.pooled.r2,
                })
            }
            _ => None,
        };
        Summary {
            schema_version: JSON_SCHEMA_VERSION,
            status: "succeeded",
            exit_code: 0,
            job: records.first().map(|r| r.job.clone()).unwrap_or_default(),
            source: source.clone(),
            units_read: dataset.rows_read,
            units_used: dataset.len(),
            units_skipped: dataset.skipped.total(),
            skipped: dataset.skipped.clone(),
            input_fingerprint: dataset.fingerprint(),
            runs,
            comparison,
            results,
        }
    }

    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(
            out,
            "job {}: {} units used of {} rows read from {} ({})",
            self.job, self.units_used, self.units_read, self.source.table, self.source.store
        );
        if self.units_skipped > 0 {
            let _ = writeln!(
                out,
                "skipped {} rows: {}",
                self.units_skipped,
                self.skipped.describe()
            );
        }
        for run in &self.runs {
            let _ = writeln!(out);
            let _ = writeln!(
                out,
                "{} run {} ({}), seed {}, {} repetition(s)",
                run.scheme, run.run_id, run.role, run.seed, run.repeats
            );
            let _ = writeln!(out, "  {}", describe_parameters(&run.parameters));
            let shown: Vec<&FoldScore> = run
                .folds
                .iter()
                .filter(|f| run.repeats == 1 || f.repetition == 0)
                .collect();
            if run.repeats > 1 {
                let _ = writeln!(out, "  folds of repetition 1:");
            }
            let _ = writeln!(
                out,
                "  {:>4} {:>9} {:>8} {:>10} {:>10} {:>10} {:>7}",
                "fold", "n_train", "n_test", "RMSE", "MAE", "bias", "R²"
            );
            for fold in shown {
                let _ = writeln!(
                    out,
                    "  {:>4} {:>9} {:>8} {:>10} {:>10} {:>10} {:>7}",
                    fold.fold + 1,
                    fold.n_train,
                    fold.n_test,
                    number(fold.scores.rmse),
                    number(fold.scores.mae),
                    number(fold.scores.bias),
                    fold.scores
                        .r2
                        .map(|r| format!("{r:.3}"))
                        .unwrap_or_else(|| "-".into())
                );
            }
            let p = &run.pooled;
            let _ = writeln!(
                out,
                "  pooled over {} held-out predictions: RMSE {} MAE {} bias {} R² {}",
                p.n,
                number(p.rmse),
                number(p.mae),
                number(p.bias),
                p.r2.map(|r| format!("{r:.3}"))
                    .unwrap_or_else(|| "-".into())
            );
            let s = &run.fold_spread;
            let _ = writeln!(
                out,
                "  per-fold mean ± SD: RMSE {} ± {}  R² {} ± {}",
                number(s.rmse.mean),
                number(s.rmse.sd),
                number(s.r2.mean),
                number(s.r2.sd)
            );
        }
        if let Some(c) = &self.comparison {
            let _ = writeln!(out);
            let _ = writeln!(
                out,
                "spatial vs random folds on the same {} units: RMSE {} vs {}; random folds understate the error for unseen places by {:.1}% (R² {} vs {})",
                self.units_used,
                number(c.spatial_rmse),
                number(c.random_rmse),
                100.0 * c.rmse_understated_by,
                c.spatial_r2.map(|r| format!("{r:.3}")).unwrap_or_else(|| "-".into()),
                c.random_r2.map(|r| format!("{r:.3}")).unwrap_or_else(|| "-".into()),
            );
        }
        let _ = writeln!(out);
        let _ = writeln!(out, "results: {}", self.results.location);
        let _ = writeln!(out, "  per-unit errors layer: {}", self.results.layer);
        let _ = writeln!(out, "  blocks layer: {}", self.results.blocks_layer);
        let _ = writeln!(
            out,
            "scores describe predictive skill for the validated setting, not causes."
        );
        out
    }
}

fn number(value: f64) -> String {
    if !value.is_finite() {
        return "-".into();
    }
    let magnitude = value.abs();
    if magnitude != 0.0 && !(1e-3..1e6).contains(&magnitude) {
        format!("{value:.3e}")
    } else {
        format!("{value:.4}")
    }
}

fn describe_parameters(parameters: &serde_json::Value) -> String {
    let scheme = &parameters["scheme"];
    let model = &parameters["model"];
    let scheme_text = match scheme["scheme"].as_str() {
        Some("grid") => format!(
            "grid blocks of {} CRS units from origin ({}, {}), {} folds",
            scheme["block_size"], scheme["origin"][0], scheme["origin"][1], scheme["folds"]
        ),
        Some(other) => format!("{other} folds: {}", scheme["folds"]),
        None => String::new(),
    };
    format!(
        "{scheme_text}; model {}",
        model["model"].as_str().unwrap_or("?")
    )
}
