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
//! - Baseline: the same folds with the training mean as the prediction (the
//!   mean of the target over each fold's training units), computed on the
//!   side, so every score has a reference.

use serde::Serialize;

use crate::core::folds::{exclude_within, FoldRng, FoldScheme, FoldSet, SchemeInput};
use crate::core::matching::{cv_distances, Matching};
use crate::core::metrics::{spreads, Family, Scores, Spread};
use crate::core::models::{FitError, Fitted, Model, TrainingSet};
use crate::core::parallel::parallel_map;
use crate::core::units::Dataset;
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
    /// Distance matching against the prediction locations, when the run has
    /// them (set by the caller, who holds the locations).
    pub matching: Option<Matching>,
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
    let family = plan.model.family();
    let mut repetitions = Vec::with_capacity(sets.len());
    let mut baseline_pairs = Vec::with_capacity(data.len() * sets.len());
    for (repetition, folds) in sets.into_iter().enumerate() {
        let fits = fit_folds(data, plan.model, &folds, repetition as u32)?;
        let test_units = folds.test_units();
        let mut predicted = vec![f64::NAN; data.len()];
        let means = training_means(data, &folds, &test_units);
        let fold_results: Vec<FoldResult> = test_units
            .iter()
            .enumerate()
            .map(|(fold, units)| {
                let fit = &fits[fold];
                let mut pairs = Vec::with_capacity(units.len());
                for &unit in units {
                    let value = fit.predict(&data.view(unit as usize));
                    predicted[unit as usize] = value;
                    pairs.push((data.target[unit as usize], value));
                    baseline_pairs.push((data.target[unit as usize], means[fold]));
                }
                let n_excluded = folds.excluded_from(fold as u32).len();
                FoldResult {
                    n_train: data.len() - units.len() - n_excluded,
                    n_test: units.len(),
                    n_excluded,
                    scores: family.score(&pairs),
                    coefficients: fit.coefficients(),
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
    Ok(RunOutcome {
        family,
        repetitions,
        pooled,
        fold_spread,
        repeat_spread,
        baseline: family.score(&baseline_pairs),
        matching: None,
    })
}

/// The mean target over each fold's training units.
fn training_means(data: &Dataset, folds: &FoldSet, test_units: &[Vec<u32>]) -> Vec<f64> {
    let total: f64 = data.target.iter().sum();
    test_units
        .iter()
        .enumerate()
        .map(|(fold, units)| {
            let excluded = folds.excluded_from(fold as u32);
            let removed: f64 = units
                .iter()
                .chain(excluded)
                .map(|&unit| data.target[unit as usize])
                .sum();
            let count = data.len() - units.len() - excluded.len();
            (total - removed) / count as f64
        })
        .collect()
}

/// Fits every fold of one repetition: the model's own all-folds fit when it
/// has one, else fold by fold on the machine's cores. When several folds
/// fail, the error reported is the one of the lowest fold.
fn fit_folds(
    data: &Dataset,
    model: &dyn Model,
    folds: &FoldSet,
    repetition: u32,
) -> Result<Vec<Box<dyn Fitted>>, Error> {
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
    let results = match model.fit_folds(data, folds) {
        Some(results) => results,
        None => parallel_map(k, |fold| {
            let excluded = folds.excluded_from(fold as u32);
            let rows: Vec<u32> = (0..data.len() as u32)
                .filter(|&unit| {
                    folds.fold_of[unit as usize] as usize != fold
                        && excluded.binary_search(&unit).is_err()
                })
                .collect();
            model.fit(&TrainingSet { data, rows: &rows })
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
}

/// The per-unit summary of unit `unit` over the repetitions of `outcome`.
pub fn unit_summary(data: &Dataset, outcome: &RunOutcome, unit: usize) -> UnitSummary {
    let observed = data.target[unit];
    let count = outcome.repetitions.len() as f64;
    let (mut sum, mut squares, mut absolute) = (0.0, 0.0, 0.0);
    for repetition in &outcome.repetitions {
        let predicted = repetition.predicted[unit];
        sum += predicted;
        squares += (predicted - observed).powi(2);
        absolute += (predicted - observed).abs();
    }
    UnitSummary {
        mean_predicted: sum / count,
        rmse: (squares / count).sqrt(),
        mae: absolute / count,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::folds::grid::{Grid, GridParams};
    use crate::core::folds::random::Random;
    use crate::core::models::ols::Ols;
    use crate::core::testing::{points_dataset, Points};
    use approx::assert_relative_eq;

    fn lattice() -> Dataset {
        points_dataset(
            &(0..400)
                .map(|i| [(i % 20) as f64, (i / 20) as f64])
                .collect::<Vec<_>>(),
        )
    }

    fn run(
        data: &Dataset,
        scheme: &dyn FoldScheme,
        repeats: u32,
        seed: u64,
    ) -> Result<RunOutcome, Error> {
        let points = Points::new(data.points.clone());
        let plan = Plan {
            scheme,
            model: &Ols,
            repeats,
            seed,
            exclusion_radius: None,
        };
        let sets = assign_folds(&points.input(), &plan)?;
        fit_and_score(data, &plan, sets)
    }

    #[test]
    fn every_unit_is_held_out_once_per_repetition() {
        let data = lattice();
        let outcome = run(&data, &Random::new(5).unwrap(), 3, 1).unwrap();
        assert_eq!(outcome.repetitions.len(), 3);
        for repetition in &outcome.repetitions {
            assert!(repetition.predicted.iter().all(|v| v.is_finite()));
            assert_eq!(repetition.fold_results.len(), 5);
            for fold in &repetition.fold_results {
                assert_eq!(fold.n_train + fold.n_test, 400);
            }
        }
        assert_eq!(outcome.pooled.n, 1200);
        assert!(outcome.repeat_spread.is_some());
        assert_eq!(outcome.baseline.n, 1200);
    }

    #[test]
    fn a_linear_field_is_predicted_exactly_except_for_y() {
        // target = x + y, feature = x: the held-out residual is y minus the
        // training mean of y, so pooled bias is small and R² is about 1 - var(y)/var(x+y) = 0.5.
        let data = lattice();
        let grid = Grid::new(GridParams {
            block_size: 5.0,
            grid_origin: [0.0, 0.0],
            folds: 4,
            block_shape: Default::default(),
            deal: Default::default(),
        })
        .unwrap();
        let outcome = run(&data, &grid, 1, 3).unwrap();
        let r2 = outcome.pooled.get("r2").unwrap();
        assert!(r2 > 0.3 && r2 < 0.6, "r2 = {r2}");
        // The model beats the training mean, which ignores x.
        assert!(outcome.pooled.get("rmse").unwrap() < outcome.baseline.get("rmse").unwrap());
        let summary = unit_summary(&data, &outcome, 0);
        assert_relative_eq!(summary.rmse, summary.mae, epsilon = 1e-12);
    }

    #[test]
    fn a_fold_that_cannot_be_fitted_names_the_fold_and_the_feature() {
        let data = points_dataset(&[[0.0, 0.0], [1.0, 5.0], [2.0, 1.0]]);
        // Each training set has 2 units: enough for intercept + 1 feature.
        assert!(run(&data, &Random::new(3).unwrap(), 1, 1).is_ok());
        let data = points_dataset(&[[0.0, 0.0], [0.0, 5.0], [2.0, 1.0]]);
        // Feature x is constant on the training units of the fold holding out unit 3.
        let text = run(&data, &Random::new(3).unwrap(), 1, 1)
            .unwrap_err()
            .to_string();
        assert!(
            text.starts_with("cannot fit fold") && text.contains("feature x is constant"),
            "{text}"
        );
    }

    #[test]
    fn the_baseline_is_the_training_mean() {
        // Two folds of two units each; hand computation: fold 0 = units {0, 2}
        // or another pair; whichever, each held-out unit's baseline is the mean
        // of the other fold's two targets.
        let data = points_dataset(&[[0.0, 0.0], [1.0, 0.0], [0.0, 3.0], [2.0, 2.0]]);
        let points = Points::new(data.points.clone());
        let plan = Plan {
            scheme: &Random::new(2).unwrap(),
            model: &Ols,
            repeats: 1,
            seed: 4,
            exclusion_radius: None,
        };
        let sets = assign_folds(&points.input(), &plan).unwrap();
        let folds = sets[0].clone();
        let test = folds.test_units();
        let means = training_means(&data, &folds, &test);
        for (fold, units) in test.iter().enumerate() {
            let other: Vec<f64> = (0..4)
                .filter(|i| !units.contains(&(*i as u32)))
                .map(|i| data.target[i])
                .collect();
            assert_relative_eq!(means[fold], other.iter().sum::<f64>() / other.len() as f64);
        }
    }
}
