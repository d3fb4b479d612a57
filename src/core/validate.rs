//! The validation itself: folds, a fit per fold, held-out predictions, scores.
//!
//! Pure: a [`Dataset`], a scheme and a model in, a [`RunOutcome`] out. It runs
//! in two steps so that the pipeline can check the split before it records a
//! run: [`assign_folds`] (every repetition's [`FoldSet`], cheap) and
//! [`fit_and_score`] (the fits, predictions and scores).
//!
//! # Scores
//! - Per fold: the family's scores of the fold's held-out predictions, with
//!   its numbers of training, test and excluded units.
//! - Pooled: the scores of all held-out predictions of all repetitions.
//! - Spread: mean and sample SD of the per-fold scores; with several
//!   repetitions, also of the per-repetition pooled scores, so users see how
//!   much a score depends on the seed.
//! - Baseline: the same folds with the family's intercept-only prediction
//!   (the mean target of each fold's training units; for counts with an
//!   exposure, the training rate `Σy/ΣE` times the unit's exposure), computed
//!   on the side, so every score has a reference.
//!
//! # Fitting
//! A family that shares work across folds ([`Model::fit_folds`]) fits them
//! all at once; otherwise each fold is fitted, its held-out units predicted
//! and the fit dropped, on the machine's cores, so at most one fit per core
//! is alive (what keeps per-fold neighbour indexes of a million units in
//! memory). The held-out predictions of a model fitted elsewhere come in
//! through [`score_predictions`], and a run made with `--assign-only` is
//! [`assigned`]: the same outcome with folds and no predictions.

use serde::Serialize;

use crate::core::diagnostics::fold_distances::DistanceSummary;
use crate::core::diagnostics::held_out::HeldOutMoran;
use crate::core::folds::{exclude_within, FoldRng, FoldScheme, FoldSet, SchemeInput};
use crate::core::matching::{cv_distances, Matching};
use crate::core::metrics::{spreads, Family, Scores, Spread};
use crate::core::models::{FitError, Fitted, Model, TrainingSet};
use crate::core::parallel::parallel_map;
use crate::core::units::Dataset;
use crate::core::units::UnitId;
use crate::error::Error;

/// Largest number of repetitions a run takes.
pub const MAX_REPEATS: u32 = 1000;

/// What to run.
pub struct Plan<'a> {
    /// The fold scheme.
    pub scheme: &'a dyn FoldScheme,
    /// The model family.
    pub model: &'a dyn Model,
    /// Number of repetitions, 1 to [`MAX_REPEATS`].
    pub repeats: u32,
    /// Seed of the repetition streams (see [`FoldRng`]).
    pub seed: u64,
    /// Exclusion buffer radius in CRS units, if any.
    pub exclusion_radius: Option<f64>,
}

/// One fold's result.
#[derive(Debug, Clone, Serialize)]
pub struct FoldResult {
    /// Training units.
    pub n_train: usize,
    /// Held-out units.
    pub n_test: usize,
    /// Units excluded from training (exclusion buffer).
    pub n_excluded: usize,
    /// Scores of the held-out predictions.
    pub scores: Scores,
    /// The fitted terms, intercept first (empty for models without them).
    #[serde(skip)]
    pub coefficients: Vec<(String, f64)>,
}

/// One repetition: its folds and the held-out prediction of every unit.
#[derive(Debug, Clone)]
pub struct Repetition {
    /// The folds.
    pub folds: FoldSet,
    /// Held-out prediction of each unit, in dataset order.
    pub predicted: Vec<f64>,
    /// Per fold, in fold order.
    pub fold_results: Vec<FoldResult>,
}

/// Everything a run produces.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    /// The model's family.
    pub family: Family,
    /// One entry per repetition.
    pub repetitions: Vec<Repetition>,
    /// Pooled over all held-out predictions of all repetitions.
    pub pooled: Scores,
    /// Mean and SD of the per-fold scores over all folds of all repetitions.
    pub fold_spread: Vec<(&'static str, Spread)>,
    /// Mean and SD over repetitions of each repetition's pooled scores (with
    /// more than one repetition).
    pub repeat_spread: Option<Vec<(&'static str, Spread)>>,
    /// Pooled scores of the training-mean baseline on the same folds.
    pub baseline: Scores,
    /// Held-out predictions made by a fallback rule or with all-zero
    /// indicators, counted over all repetitions: `(what, units)`.
    pub notes: Vec<(String, usize)>,
    /// Moran's I of the held-out residuals (set by the pipeline; None when
    /// it could not be computed, with a warning).
    pub held_out_moran: Option<HeldOutMoran>,
    /// Test-to-training nearest distances of repetition 1, pooled then per
    /// fold, and the prediction distances (set by the pipeline).
    pub fold_distances: Vec<DistanceSummary>,
    /// Distance matching against the prediction locations, when the run has
    /// them (set by the caller, who holds the locations).
    pub matching: Option<Matching>,
}

impl RunOutcome {
    /// Each unit's held-out residual, observed minus its held-out prediction
    /// averaged over repetitions, in dataset order (NaN where a prediction is
    /// missing).
    pub fn held_out_residuals(&self, observed: &[f64]) -> Vec<f64> {
        let repetitions = self.repetitions.len().max(1) as f64;
        (0..observed.len())
            .map(|i| {
                let mean =
                    self.repetitions.iter().map(|r| r.predicted[i]).sum::<f64>() / repetitions;
                observed[i] - mean
            })
            .collect()
    }
}

/// Checks a number of repetitions.
///
/// # Errors
/// [`Error::Usage`] outside 1 to [`MAX_REPEATS`].
pub fn check_repeats(repeats: u32) -> Result<(), Error> {
    if !(1..=MAX_REPEATS).contains(&repeats) {
        return Err(Error::Usage(format!(
            "--repeats must be between 1 and {MAX_REPEATS}, got {repeats}"
        )));
    }
    Ok(())
}

/// The folds of every repetition, with the exclusion buffer applied. A
/// scheme that draws nothing at random gives the same folds every time, so it
/// is assigned once and repeated. When the input has prediction locations,
/// each fold set's CV distances ([`FoldSet::cv_distances`]) are filled after
/// the buffer.
///
/// # Errors
/// [`Error::Folds`] (or [`Error::Usage`]) when the scheme cannot split the units.
pub fn assign_folds(input: &SchemeInput<'_>, plan: &Plan<'_>) -> Result<Vec<FoldSet>, Error> {
    check_repeats(plan.repeats)?;
    let mut sets: Vec<FoldSet> = Vec::with_capacity(plan.repeats as usize);
    for repetition in 0..plan.repeats {
        if !plan.scheme.randomised() {
            if let Some(first) = sets.first() {
                sets.push(first.clone());
                continue;
            }
        }
        let mut rng = FoldRng::new(plan.seed, repetition);
        let mut set = plan.scheme.assign(input, &mut rng)?;
        if let Some(radius) = plan.exclusion_radius {
            exclude_within(&mut set, input, radius);
        }
        if input.prediction_points.is_some() {
            let clock = std::time::Instant::now();
            set.cv_distances = Some(cv_distances(&set, input.points, input.index));
            tracing::debug!(
                elapsed_ms = clock.elapsed().as_millis() as u64,
                "test-to-training nearest distances"
            );
        }
        sets.push(set);
    }
    Ok(sets)
}

/// Checks, before anything is recorded, that every fold of every repetition
/// keeps at least `needed` training units (what the model needs with the
/// data's features), so a radius or a matching that leaves too few stops the
/// run with nothing written.
///
/// # Errors
/// [`Error::Folds`] naming the first such fold (lowest repetition, then fold),
/// its numbers and what to change.
pub fn check_training(
    sets: &[FoldSet],
    units: usize,
    needed: usize,
    model: &str,
    exclusion_radius: Option<f64>,
) -> Result<(), Error> {
    for (repetition, set) in sets.iter().enumerate() {
        let sizes = set.fold_sizes();
        for (fold, &test) in sizes.iter().enumerate() {
            let excluded = set.excluded_from(fold as u32).len();
            let training = units.saturating_sub(test + excluded);
            if training >= needed {
                continue;
            }
            let change = if excluded > 0 {
                match exclusion_radius {
                    Some(radius) => format!(
                        "the exclusion radius {radius} leaves too few: use a smaller --exclusion-radius"
                    ),
                    None => "the scheme's exclusions leave too few: raise --min-training-share or use a smaller \
                             --match-range"
                        .to_string(),
                }
            } else {
                "use fewer --folds, more units, or fewer features".to_string()
            };
            return Err(Error::Folds(format!(
                "fold {} of repetition {} keeps {training} training units ({units} units, {test} tested, {excluded} \
                 excluded), fewer than the {needed} that {model} needs; {change}",
                fold + 1,
                repetition + 1
            )));
        }
    }
    Ok(())
}

/// The held-out predictions of one fold and what its fit reported.
struct FoldPredictions {
    /// `(unit, prediction, note)`.
    predictions: Vec<(u32, f64, Option<&'static str>)>,
    coefficients: Vec<(String, f64)>,
}

/// One repetition's held-out predictions, before scoring.
pub struct Predicted {
    /// The folds.
    pub folds: FoldSet,
    /// Held-out prediction of each unit, in dataset order.
    pub predicted: Vec<f64>,
    /// Per fold, the fitted terms.
    pub coefficients: Vec<Vec<(String, f64)>>,
}

/// Fits every fold of every repetition and scores the held-out predictions.
///
/// # Errors
/// [`Error::Fit`] for the first fold (lowest repetition, then fold) that
/// cannot be fitted.
pub fn fit_and_score(
    data: &Dataset,
    plan: &Plan<'_>,
    sets: Vec<FoldSet>,
) -> Result<RunOutcome, Error> {
    let mut repetitions = Vec::with_capacity(sets.len());
    let mut notes: Vec<(String, usize)> = Vec::new();
    for (repetition, folds) in sets.into_iter().enumerate() {
        let per_fold = predict_folds(data, plan.model, &folds, repetition as u32)?;
        let mut predicted = vec![f64::NAN; data.len()];
        let mut coefficients = Vec::with_capacity(per_fold.len());
        for fold in per_fold {
            for (unit, value, note) in fold.predictions {
                predicted[unit as usize] = value;
                if let Some(note) = note {
                    match notes.iter_mut().find(|(n, _)| n == note) {
                        Some(entry) => entry.1 += 1,
                        None => notes.push((note.to_string(), 1)),
                    }
                }
            }
            coefficients.push(fold.coefficients);
        }
        repetitions.push(Predicted {
            folds,
            predicted,
            coefficients,
        });
    }
    let mut outcome = score_predictions(data, plan.model.family(), repetitions);
    outcome.notes = notes;
    Ok(outcome)
}

/// Scores held-out predictions (from geofold's fits, or loaded from a model
/// fitted elsewhere): per fold, pooled, spreads and the baseline.
pub fn score_predictions(data: &Dataset, family: Family, predicted: Vec<Predicted>) -> RunOutcome {
    let mut repetitions = Vec::with_capacity(predicted.len());
    let mut baseline_pairs = Vec::with_capacity(data.len() * predicted.len());
    for Predicted {
        folds,
        predicted,
        coefficients,
    } in predicted
    {
        let test_units = folds.test_units();
        let baseline = Baseline::new(data, family, &folds, &test_units);
        let fold_results = test_units
            .iter()
            .enumerate()
            .map(|(fold, units)| {
                let mut pairs = Vec::with_capacity(units.len());
                for &unit in units {
                    let observed = data.target[unit as usize];
                    pairs.push((observed, predicted[unit as usize]));
                    baseline_pairs.push((observed, baseline.predict(data, fold, unit)));
                }
                let n_excluded = folds.excluded_from(fold as u32).len();
                FoldResult {
                    n_train: data.len() - units.len() - n_excluded,
                    n_test: units.len(),
                    n_excluded,
                    scores: family.score(&pairs),
                    coefficients: coefficients.get(fold).cloned().unwrap_or_default(),
                }
            })
            .collect();
        repetitions.push(Repetition {
            folds,
            predicted,
            fold_results,
        });
    }
    let pooled_pairs: Vec<(f64, f64)> = repetitions
        .iter()
        .flat_map(|r| data.target.iter().copied().zip(r.predicted.iter().copied()))
        .collect();
    let pooled = family.score(&pooled_pairs);
    let fold_spread = spreads(
        family,
        repetitions
            .iter()
            .flat_map(|r| r.fold_results.iter().map(|f| &f.scores)),
    );
    let repeat_spread = (repetitions.len() > 1).then(|| {
        let per_repetition: Vec<Scores> = repetitions
            .iter()
            .map(|r| {
                let pairs: Vec<(f64, f64)> = data
                    .target
                    .iter()
                    .copied()
                    .zip(r.predicted.iter().copied())
                    .collect();
                family.score(&pairs)
            })
            .collect();
        spreads(family, per_repetition.iter())
    });
    RunOutcome {
        family,
        repetitions,
        pooled,
        fold_spread,
        repeat_spread,
        baseline: family.score(&baseline_pairs),
        notes: Vec::new(),
        held_out_moran: None,
        fold_distances: Vec::new(),
        matching: None,
    }
}

/// The outcome of a run made with `--assign-only`: its folds, with no
/// predictions (NaN) and no scores.
pub fn assigned(data: &Dataset, family: Family, sets: Vec<FoldSet>) -> RunOutcome {
    let empty = family.score(&[]);
    let repetitions: Vec<Repetition> = sets
        .into_iter()
        .map(|folds| {
            let fold_results = folds
                .test_units()
                .iter()
                .enumerate()
                .map(|(fold, units)| {
                    let n_excluded = folds.excluded_from(fold as u32).len();
                    FoldResult {
                        n_train: data.len() - units.len() - n_excluded,
                        n_test: units.len(),
                        n_excluded,
                        scores: empty.clone(),
                        coefficients: Vec::new(),
                    }
                })
                .collect();
            Repetition {
                folds,
                predicted: vec![f64::NAN; data.len()],
                fold_results,
            }
        })
        .collect();
    RunOutcome {
        family,
        repetitions,
        pooled: empty.clone(),
        fold_spread: Vec::new(),
        repeat_spread: None,
        baseline: empty,
        notes: Vec::new(),
        held_out_moran: None,
        fold_distances: Vec::new(),
        matching: None,
    }
}

/// The family's intercept-only prediction of each fold: the training sum
/// of the target and the training count or exposure.
struct Baseline {
    /// Per fold: training mean, or training rate when `exposure`.
    level: Vec<f64>,
    exposure: bool,
}

impl Baseline {
    fn new(data: &Dataset, family: Family, folds: &FoldSet, test_units: &[Vec<u32>]) -> Baseline {
        let exposure = match (family, &data.exposure) {
            (Family::Count, Some(e)) => Some(e),
            _ => None,
        };
        let weight = |unit: u32| exposure.map_or(1.0, |e| e[unit as usize]);
        let total: f64 = data.target.iter().sum();
        let total_weight: f64 = (0..data.len() as u32).map(weight).sum();
        let level = test_units
            .iter()
            .enumerate()
            .map(|(fold, units)| {
                let removed = units.iter().chain(folds.excluded_from(fold as u32));
                let (mut sum, mut weights) = (0.0, 0.0);
                for &unit in removed {
                    sum += data.target[unit as usize];
                    weights += weight(unit);
                }
                (total - sum) / (total_weight - weights)
            })
            .collect();
        Baseline {
            level,
            exposure: exposure.is_some(),
        }
    }

    fn predict(&self, data: &Dataset, fold: usize, unit: u32) -> f64 {
        match (&data.exposure, self.exposure) {
            (Some(e), true) => self.level[fold] * e[unit as usize],
            _ => self.level[fold],
        }
    }
}

/// Fits every fold of one repetition and predicts its held-out units: the
/// model's own all-folds fit when it has one, else fold by fold on the
/// machine's cores (each fit dropped once its fold is predicted). When
/// several folds fail, the error reported is the one of the lowest fold.
fn predict_folds(
    data: &Dataset,
    model: &dyn Model,
    folds: &FoldSet,
    repetition: u32,
) -> Result<Vec<FoldPredictions>, Error> {
    let k = folds.k as usize;
    let test_units = folds.test_units();
    let needed = model.min_training_units(data.n_features());
    let too_few = |fold: usize| -> Option<FitError> {
        let n_train = data.len() - test_units[fold].len() - folds.excluded_from(fold as u32).len();
        (n_train < needed).then(|| FitError::TooFewUnits {
            have: n_train,
            need: needed,
            what: format!(
                "{} with {} features ({})",
                model.name(),
                data.n_features(),
                data.feature_names.join(", ")
            ),
        })
    };
    let fold_error = |fold: usize, problem: FitError| Error::Fit {
        fold: fold as u32 + 1,
        repetition: repetition + 1,
        model: model.name().to_string(),
        problem,
    };
    if let Some(problem) = (0..k).find_map(|fold| too_few(fold).map(|p| (fold, p))) {
        return Err(fold_error(problem.0, problem.1));
    }
    let predict = |fold: usize, fit: &dyn Fitted| -> Result<FoldPredictions, FitError> {
        let mut predictions = Vec::with_capacity(test_units[fold].len());
        for &unit in &test_units[fold] {
            let (value, note) = fit.predict_with_note(&data.view(unit as usize));
            if !value.is_finite() {
                return Err(FitError::Problem(format!(
                    "the prediction for unit {} is not a finite number",
                    data.ids[unit as usize]
                )));
            }
            predictions.push((unit, value, note));
        }
        Ok(FoldPredictions {
            predictions,
            coefficients: fit.coefficients(),
        })
    };
    let results: Vec<Result<FoldPredictions, FitError>> = match model.fit_folds(data, folds) {
        Some(fits) => parallel_map(k, |fold| match &fits[fold] {
            Ok(fit) => predict(fold, fit.as_ref()),
            Err(problem) => Err(problem.clone()),
        }),
        None => parallel_map(k, |fold| {
            let excluded = folds.excluded_from(fold as u32);
            let rows: Vec<u32> = (0..data.len() as u32)
                .filter(|&unit| {
                    folds.fold_of[unit as usize] as usize != fold
                        && excluded.binary_search(&unit).is_err()
                })
                .collect();
            let fit = model.fit(&TrainingSet { data, rows: &rows })?;
            predict(fold, fit.as_ref())
        }),
    };
    results
        .into_iter()
        .enumerate()
        .map(|(fold, result)| result.map_err(|problem| fold_error(fold, problem)))
        .collect()
}

/// A unit's errors over all repetitions of a run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct UnitSummary {
    /// Mean held-out prediction over repetitions.
    pub mean_predicted: f64,
    /// sqrt(mean over repetitions of (predicted − observed)²).
    pub rmse: f64,
    /// Mean over repetitions of |predicted − observed|.
    pub mae: f64,
    /// Mean over repetitions of the unit's loss term (binary and count
    /// families; see [`Family::loss`]).
    pub mean_loss: Option<f64>,
}

/// The per-unit summary of unit `unit` over the repetitions of `outcome`.
pub fn unit_summary(data: &Dataset, outcome: &RunOutcome, unit: usize) -> UnitSummary {
    let observed = data.target[unit];
    let count = outcome.repetitions.len() as f64;
    let (mut sum, mut squares, mut absolute, mut loss) = (0.0, 0.0, 0.0, 0.0);
    for repetition in &outcome.repetitions {
        let predicted = repetition.predicted[unit];
        sum += predicted;
        squares += (predicted - observed).powi(2);
        absolute += (predicted - observed).abs();
        loss += outcome.family.loss(observed, predicted).unwrap_or(0.0);
    }
    UnitSummary {
        mean_predicted: sum / count,
        rmse: (squares / count).sqrt(),
        mae: absolute / count,
        mean_loss: (outcome.family != Family::Regression).then_some(loss / count),
    }
}

/// The ids of units, as text, for messages.
pub fn id_list(data: &Dataset, units: &[u32], at_most: usize) -> String {
    let shown: Vec<String> = units
        .iter()
        .take(at_most)
        .map(|&u| UnitId::to_string(&data.ids[u as usize]))
        .collect();
    let more = units.len().saturating_sub(at_most);
    if more > 0 {
        format!("{} and {more} more", shown.join(", "))
    } else {
        shown.join(", ")
    }
}

#[cfg(test)]
mod tests;
