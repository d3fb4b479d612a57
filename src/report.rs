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

    fn assigned_text(&self, out: &mut String, run: &RunSummary) {
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{} run {} ({}): folds assigned for a model fitted outside geofold, seed {}, {} repetition(s)",
            run.scheme, run.run_id, run.role, run.seed, run.repeats
        );
        let _ = writeln!(out, "  {}", run.scheme_described);
        for warning in &run.warnings {
            let _ = writeln!(out, "  warning: {warning}");
        }
        let _ = writeln!(
            out,
            "  {:>10} {:>5} {:>9} {:>8} {:>9}",
            "repetition", "fold", "n_train", "n_test", "excluded"
        );
        for fold in run.folds.iter().take(30) {
            let _ = writeln!(
                out,
                "  {:>10} {:>5} {:>9} {:>8} {:>9}",
                fold.repetition, fold.fold, fold.n_train, fold.n_test, fold.n_excluded
            );
        }
        let _ = writeln!(
            out,
            "  next: read each unit's fold from fold_members (run_id {}; units excluded from a fold's training \
             set are in fold_exclusions), fit each fold on the units outside it, load the held-out predictions \
             (unit_id, repetition, fold, predicted) into a table or layer, then run geofold score --run {} \
             --predictions TABLE",
            run.run_id, run.run_id
        );
    }

    fn run_text(&self, out: &mut String, run: &RunSummary) {
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{} run {} ({}), seed {}, {} repetition(s)",
            run.scheme, run.run_id, run.role, run.seed, run.repeats
        );
        let _ = writeln!(out, "  {}", run.scheme_described);
        if let (Some(blocks), Some(per)) = (
            run.split.get("occupied_blocks"),
            run.split.get("units_per_block"),
        ) {
            let _ = writeln!(
                out,
                "  {blocks} occupied blocks; units per block: median {}, range {}–{}",
                per["median"], per["min"], per["max"]
            );
        }
        split_text(out, &run.split);
        if let Some(matching) = &run.matching {
            let _ = writeln!(
                out,
                "  distance matching: W = {} (Wasserstein-1 distance between the test-to-training distances during \
                 cross-validation, median {}, and the distances from the prediction locations to the data, median \
                 {}; 0 is a perfect match, in CRS units)",
                number(matching.w),
                self.source.length(matching.cv_median),
                self.source.length(matching.prediction_median)
            );
            if matching.w_per_repetition.len() > 1 {
                let n = matching.w_per_repetition.len() as f64;
                let mean = matching.w_per_repetition.iter().sum::<f64>() / n;
                let sd = (matching
                    .w_per_repetition
                    .iter()
                    .map(|w| (w - mean).powi(2))
                    .sum::<f64>()
                    / (n - 1.0))
                    .sqrt();
                let _ = writeln!(
                    out,
                    "  W over the {} repetitions (mean ± SD): {} ± {}",
                    matching.w_per_repetition.len(),
                    number(mean),
                    number(sd)
                );
            }
        }
        for warning in &run.warnings {
            let _ = writeln!(out, "  warning: {warning}");
        }
        let names: Vec<&'static str> = run.pooled.values.iter().map(|(name, _)| *name).collect();
        // Folds of one unit each (leave-one-out): per-fold scores are single
        // errors, so the table and the per-fold spread are left out.
        let single_units = run.folds.iter().all(|f| f.n_test == 1);
        let shown: Vec<&FoldSummary> = run
            .folds
            .iter()
            .filter(|f| f.repetition == 1 && !single_units)
            .take(30)
            .collect();
        if single_units {
            let _ = writeln!(
                out,
                "  {} folds of one unit each: per-fold scores are single errors (table fold_scores); read the pooled scores",
                run.folds.iter().filter(|f| f.repetition == 1).count()
            );
        } else if run.repeats > 1 || run.folds.len() > shown.len() {
            let _ = writeln!(
                out,
                "  folds of repetition 1{}:",
                if shown.len() < run.folds.iter().filter(|f| f.repetition == 1).count() {
                    " (first 30)"
                } else {
                    ""
                }
            );
        }
        let mut header = format!(
            "  {:>5} {:>9} {:>8} {:>9}",
            "fold", "n_train", "n_test", "excluded"
        );
        for name in &names {
            let _ = write!(header, " {:>10}", label(name));
        }
        if !single_units {
            let _ = writeln!(out, "{header}");
        }
        for fold in shown {
            let mut line = format!(
                "  {:>5} {:>9} {:>8} {:>9}",
                fold.fold, fold.n_train, fold.n_test, fold.n_excluded
            );
            for name in &names {
                let _ = write!(
                    line,
                    " {:>10}",
                    fold.scores
                        .get(name)
                        .map(number)
                        .unwrap_or_else(|| "-".into())
                );
            }
            let _ = writeln!(out, "{line}");
        }
        let pooled: Vec<String> = names
            .iter()
            .map(|name| {
                format!(
                    "{} {}",
                    label(name),
                    run.pooled
                        .get(name)
                        .map(number)
                        .unwrap_or_else(|| "-".into())
                )
            })
            .collect();
        let _ = writeln!(
            out,
            "  pooled over {} held-out predictions: {}",
            run.pooled.n,
            pooled.join("  ")
        );
        let baseline: Vec<String> = names
            .iter()
            .filter(|name| score_def(name).is_some_and(|d| d.better != Better::Zero))
            .map(|name| {
                format!(
                    "{} {}",
                    label(name),
                    run.baseline
                        .get(name)
                        .map(number)
                        .unwrap_or_else(|| "-".into())
                )
            })
            .collect();
        let _ = writeln!(
            out,
            "  training-mean baseline on the same folds: {}",
            baseline.join("  ")
        );
        if names.contains(&"accuracy") {
            let _ = writeln!(
                out,
                "  (binary: predictions are probabilities of 1; accuracy counts p >= {THRESHOLD} as 1)"
            );
        }
        let spread: Vec<String> = run
            .fold_spread
            .iter()
            .filter(|(name, _)| *name != "bias")
            .map(|(name, s)| format!("{} {} ± {}", label(name), number(s.mean), number(s.sd)))
            .collect();
        if !single_units {
            let _ = writeln!(out, "  per-fold mean ± SD: {}", spread.join("  "));
        }
        if let Some(repeats) = &run.repeat_spread {
            let spread: Vec<String> = repeats
                .iter()
                .filter(|(name, _)| *name != "bias")
                .map(|(name, s)| format!("{} {} ± {}", label(name), number(s.mean), number(s.sd)))
                .collect();
            let _ = writeln!(
                out,
                "  over the {} repetitions (mean ± SD): {}",
                run.repeats,
                spread.join("  ")
            );
        }
        self.distances_text(out, run);
        if let Some(held) = &run.held_out_moran {
            let m = &held.moran;
            let _ = writeln!(
                out,
                "  Moran's I of the held-out residuals ({}{}): {:.4} (E[I] {:.4}), z {:.2} under randomisation, p {}{}",
                held.weights,
                held.sampled_from
                    .map(|total| format!(", a seeded sample of {} of {total} units", m.n))
                    .unwrap_or_default(),
                m.statistic,
                m.randomisation.expected,
                m.randomisation.z,
                p_value(m.randomisation.p_two_sided),
                if m.randomisation.p_two_sided < 0.05 && m.statistic > m.randomisation.expected {
                    "; the errors are still spatially clustered"
                } else {
                    ""
                }
            );
        }
        for (note, units) in &run.notes {
            let _ = writeln!(out, "  {units} held-out predictions: {note}");
        }
        terms::write_terms(out, &run.coefficients);
        if let Some(r2) = run.pooled.get("r2") {
            if r2 < 0.0 {
                let _ = writeln!(
                    out,
                    "  note: R² is negative: the held-out predictions are worse than predicting the mean of the held-out values"
                );
            }
        }
    }
}

/// The facts of the split that the text summary names, scheme by scheme
/// (block counts are printed by the caller).
fn split_text(out: &mut String, split: &serde_json::Map<String, serde_json::Value>) {
    for (count, per, what) in [
        (
            "clusters",
            "units_per_cluster",
            "clusters; units per cluster",
        ),
        ("groups", "units_per_group", "groups; units per group"),
    ] {
        if let (Some(count), Some(per)) = (split.get(count), split.get(per)) {
            let _ = writeln!(
                out,
                "  {count} {what}: median {}, range {}–{}",
                per["median"], per["min"], per["max"]
            );
        }
    }
    if let Some(chosen) = split.get("chosen_clusters") {
        let tried = split
            .get("candidates")
            .and_then(|c| c.as_array())
            .map_or(0, Vec::len);
        let chosen = match chosen.as_u64() {
            Some(q) => format!("{q} k-means clusters dealt to the folds"),
            None => "random folds".to_string(),
        };
        let _ = writeln!(
            out,
            "  kNNDM chose {chosen} among {tried} candidates, judged on {} units",
            split.get("evaluation_units").cloned().unwrap_or_default()
        );
    }
    if let (Some(with), Some(total)) = (split.get("units_with_exclusions"), split.get("exclusions"))
    {
        let _ = writeln!(
            out,
            "  NNDM excluded {total} training units in all from the folds of {with} units (matched: {})",
            split.get("matched").cloned().unwrap_or_default()
        );
    }
}

/// Spreads as one object: `{"rmse": {"mean": …, "sd": …}, …}`.
fn spread_map<S: serde::Serializer>(
    spreads: &[(&'static str, Spread)],
    serializer: S,
) -> Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut map = serializer.serialize_map(Some(spreads.len()))?;
    for (name, spread) in spreads {
        map.serialize_entry(name, spread)?;
    }
    map.end()
}

fn optional_spread_map<S: serde::Serializer>(
    spreads: &Option<Vec<(&'static str, Spread)>>,
    serializer: S,
) -> Result<S::Ok, S::Error> {
    match spreads {
        Some(spreads) => spread_map(spreads, serializer),
        None => serializer.serialize_none(),
    }
}

/// A score's name as printed.
fn label(name: &str) -> String {
    match name {
        "r2" => "R²".into(),
        "bias" => "bias".into(),
        "log_loss" => "log-loss".into(),
        "brier" => "Brier".into(),
        "roc_auc" => "AUC".into(),
        "accuracy" => "accuracy".into(),
        "poisson_deviance" => "deviance".into(),
        other => other.to_uppercase(),
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

/// A p-value for a terminal: four decimals, or "< 0.0001".
fn p_value(p: f64) -> String {
    if p < 1e-4 {
        "< 0.0001".into()
    } else {
        format!("{p:.4}")
    }
}

impl Summary {
    /// The nearest-distance lines of a run: how far test units were from
    /// their training units, and the prediction locations from the data.
    fn distances_text(&self, out: &mut String, run: &RunSummary) {
        let length = |v: f64| self.source.length(v);
        let pooled = run
            .fold_distances
            .iter()
            .find(|d| d.kind == "cv" && d.fold.is_none());
        let Some(pooled) = pooled else {
            return;
        };
        let medians: Vec<f64> = run
            .fold_distances
            .iter()
            .filter(|d| d.kind == "cv" && d.fold.is_some())
            .map(DistanceSummary::median)
            .collect();
        let per_fold = match (
            medians.iter().copied().reduce(f64::min),
            medians.iter().copied().reduce(f64::max),
        ) {
            (Some(low), Some(high)) if medians.len() > 1 => {
                format!("; fold medians {} to {}", length(low), length(high))
            }
            _ => String::new(),
        };
        let _ = writeln!(
            out,
            "  test units to their nearest training unit: median {} (10th–90th percentile {} to {}){per_fold}{}",
            length(pooled.median()),
            length(pooled.quantiles[1]),
            length(pooled.quantiles[5]),
            pooled
                .sampled_from
                .map(|total| format!(", from a seeded sample of {} of {total} units", pooled.n))
                .unwrap_or_default()
        );
        if let Some(prediction) = run.fold_distances.iter().find(|d| d.kind == "prediction") {
            let _ = writeln!(
                out,
                "  prediction locations to the nearest unit: median {} (10th–90th percentile {} to {})",
                length(prediction.median()),
                length(prediction.quantiles[1]),
                length(prediction.quantiles[5]),
            );
        }
    }
}
