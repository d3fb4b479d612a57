//! The validation itself: folds, a fit per fold, held-out predictions, scores.
//!
//! Pure: a [`Dataset`] and a [`Plan`] in, a [`RunOutcome`] out. Adapters read
//! and write; this module knows nothing of where the data live.

use serde::Serialize;

use crate::core::folds::{FoldAssignment, FoldRng, SchemeSpec};
use crate::core::metrics::{score, spread, Scores, Spread};
use crate::core::models::{Model, TrainingSet};
use crate::core::units::Dataset;
use crate::error::Error;

/// What to run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Plan {
    /// Fold scheme and its parameters.
    pub scheme: SchemeSpec,
    /// Number of repetitions, at least 1.
    pub repeats: u32,
    /// Seed of repetition streams (see [`FoldRng`]).
    pub seed: u64,
}

/// Scores of one fold of one repetition.
#[derive(Debug, Clone, Serialize)]
pub struct FoldScore {
    /// Repetition, 0-based.
    pub repetition: u32,
    /// Fold, 0-based.
    pub fold: u32,
    /// Training units.
    pub n_train: usize,
    /// Held-out units.
    pub n_test: usize,
    /// Scores of the held-out predictions.
    pub scores: Scores,
}

/// One repetition: its folds and the held-out prediction of every unit.
#[derive(Debug, Clone)]
pub struct Repetition {
    /// The fold assignment.
    pub assignment: FoldAssignment,
    /// Held-out prediction of each unit, in dataset order.
    pub predicted: Vec<f64>,
}

/// Errors of one unit over all repetitions.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct UnitError {
    /// Observed target.
    pub observed: f64,
    /// Mean held-out prediction over repetitions.
    pub mean_predicted: f64,
    /// Observed minus mean prediction.
    pub mean_residual: f64,
    /// sqrt(mean over repetitions of (predicted - observed)²).
    pub rmse: f64,
    /// Mean over repetitions of |predicted - observed|.
    pub mae: f64,
}

/// Spread of per-fold scores over all folds of all repetitions.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct FoldSpread {
    /// RMSE.
    pub rmse: Spread,
    /// MAE.
    pub mae: Spread,
    /// Bias.
    pub bias: Spread,
    /// R² (folds where it is defined).
    pub r2: Spread,
}

/// Everything a run produces.
#[derive(Debug, Clone)]
pub struct RunOutcome {
    /// One entry per repetition.
    pub repetitions: Vec<Repetition>,
    /// Per fold and repetition.
    pub fold_scores: Vec<FoldScore>,
    /// Per unit, in dataset order.
    pub unit_errors: Vec<UnitError>,
    /// Pooled over all held-out predictions of all repetitions.
    pub pooled: Scores,
    /// Mean and SD of the per-fold scores.
    pub fold_spread: FoldSpread,
}

/// Runs the plan on the dataset with the model.
///
/// # Errors
/// [`Error::Folds`] when the scheme cannot split the units; [`Error::Fit`] when a
/// fold has too few training units or a rank-deficient design.
pub fn cross_validate(
    dataset: &Dataset,
    plan: &Plan,
    model: &dyn Model,
) -> Result<RunOutcome, Error> {
    if plan.repeats == 0 {
        return Err(Error::Usage("--repeats must be at least 1".into()));
    }
    let n = dataset.len();
    let mut repetitions = Vec::with_capacity(plan.repeats as usize);
    let mut fold_scores = Vec::new();
    for repetition in 0..plan.repeats {
        let mut rng = FoldRng::new(plan.seed, repetition);
        let assignment = plan.scheme.assign(dataset, &mut rng)?;
        let mut predicted = vec![f64::NAN; n];
        for fold in fit_folds(dataset, &assignment, repetition, model)? {
            for (&unit, &value) in fold.test.iter().zip(&fold.predicted) {
                predicted[unit] = value;
            }
            fold_scores.push(fold.score);
        }
        repetitions.push(Repetition {
            assignment,
            predicted,
        });
    }
    let unit_errors = unit_errors(dataset, &repetitions);
    let mut pooled_pairs = Vec::with_capacity(n * repetitions.len());
    for repetition in &repetitions {
        pooled_pairs.extend(
            dataset
                .target
                .iter()
                .copied()
                .zip(repetition.predicted.iter().copied()),
        );
    }
    let pooled = score(&pooled_pairs);
    let fold_spread = FoldSpread {
        rmse: spread(fold_scores.iter().map(|f| f.scores.rmse)),
        mae: spread(fold_scores.iter().map(|f| f.scores.mae)),
        bias: spread(fold_scores.iter().map(|f| f.scores.bias)),
        r2: spread(fold_scores.iter().filter_map(|f| f.scores.r2)),
    };
    Ok(RunOutcome {
        repetitions,
        fold_scores,
        unit_errors,
        pooled,
        fold_spread,
    })
}

/// The held-out predictions and scores of one fold.
struct FoldResult {
    test: Vec<usize>,
    predicted: Vec<f64>,
    score: FoldScore,
}

/// Fits every fold of one repetition, on as many threads as the machine has
/// (at most one per fold). Folds are independent, so the results do not depend
/// on the number of threads; when several folds fail, the error reported is
/// the one of the lowest fold.
fn fit_folds(
    dataset: &Dataset,
    assignment: &FoldAssignment,
    repetition: u32,
    model: &dyn Model,
) -> Result<Vec<FoldResult>, Error> {
    let k = assignment.k as usize;
    let threads = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1)
        .min(k)
        .max(1);
    let next = std::sync::atomic::AtomicUsize::new(0);
    let mut slots: Vec<Option<Result<FoldResult, Error>>> = (0..k).map(|_| None).collect();
    std::thread::scope(|scope| {
        let workers: Vec<_> = (0..threads)
            .map(|_| {
                scope.spawn(|| {
                    let mut done = Vec::new();
                    loop {
                        let fold = next.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
                        if fold >= k {
                            break;
                        }
                        done.push((
                            fold,
                            fit_fold(dataset, assignment, fold as u32, repetition, model),
                        ));
                    }
                    done
                })
            })
            .collect();
        for worker in workers {
            // A worker that panicked leaves its folds empty: reported below.
            if let Ok(done) = worker.join() {
                for (fold, result) in done {
                    slots[fold] = Some(result);
                }
            }
        }
    });
    slots
        .into_iter()
        .enumerate()
        .map(|(fold, slot)| {
            slot.unwrap_or_else(|| {
                Err(Error::Internal(format!("fold {} was not fitted", fold + 1)))
            })
        })
        .collect()
}

fn fit_fold(
    dataset: &Dataset,
    assignment: &FoldAssignment,
    fold: u32,
    repetition: u32,
    model: &dyn Model,
) -> Result<FoldResult, Error> {
    let mut train = Vec::with_capacity(dataset.len());
    let mut test = Vec::new();
    for (unit, &unit_fold) in assignment.fold_of.iter().enumerate() {
        if unit_fold == fold {
            test.push(unit);
        } else {
            train.push(unit);
        }
    }
    let fit_error = |problem: String| Error::Fit {
        fold: fold + 1,
        repetition: repetition + 1,
        model: model.name().to_string(),
        problem,
    };
    let needed = model.min_training_units(dataset.n_features());
    if train.len() < needed {
        return Err(fit_error(format!(
            "{} training units, but {} with {} features ({}) needs at least {needed}",
            train.len(),
            model.name(),
            dataset.n_features(),
            dataset.feature_names.join(", ")
        )));
    }
    let predictor = model
        .fit(&TrainingSet {
            dataset,
            rows: &train,
        })
        .map_err(fit_error)?;
    let predicted: Vec<f64> = test
        .iter()
        .map(|&unit| predictor.predict(dataset.features_of(unit)))
        .collect();
    let pairs: Vec<(f64, f64)> = test
        .iter()
        .zip(&predicted)
        .map(|(&unit, &value)| (dataset.target[unit], value))
        .collect();
    let score = FoldScore {
        repetition,
        fold,
        n_train: train.len(),
        n_test: test.len(),
        scores: score(&pairs),
    };
    Ok(FoldResult {
        test,
        predicted,
        score,
    })
}

fn unit_errors(dataset: &Dataset, repetitions: &[Repetition]) -> Vec<UnitError> {
    let count = repetitions.len() as f64;
    (0..dataset.len())
        .map(|unit| {
            let observed = dataset.target[unit];
            let (mut sum, mut squares, mut absolute) = (0.0, 0.0, 0.0);
            for repetition in repetitions {
                let predicted = repetition.predicted[unit];
                sum += predicted;
                squares += (predicted - observed).powi(2);
                absolute += (predicted - observed).abs();
            }
            let mean_predicted = sum / count;
            UnitError {
                observed,
                mean_predicted,
                mean_residual: observed - mean_predicted,
                rmse: (squares / count).sqrt(),
                mae: absolute / count,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::folds::grid::GridParams;
    use crate::core::folds::random::RandomParams;
    use crate::core::models::ols::Ols;
    use crate::core::testing::points_dataset;
    use approx::assert_relative_eq;

    fn lattice() -> Dataset {
        points_dataset(
            &(0..400)
                .map(|i| [(i % 20) as f64, (i / 20) as f64])
                .collect::<Vec<_>>(),
        )
    }

    #[test]
    fn every_unit_is_held_out_once_per_repetition() {
        let dataset = lattice();
        let plan = Plan {
            scheme: SchemeSpec::Random(RandomParams { folds: 5 }),
            repeats: 3,
            seed: 1,
        };
        let outcome = cross_validate(&dataset, &plan, &Ols).unwrap();
        assert_eq!(outcome.repetitions.len(), 3);
        assert_eq!(outcome.fold_scores.len(), 15);
        for repetition in &outcome.repetitions {
            assert!(repetition.predicted.iter().all(|v| v.is_finite()));
        }
        for score in &outcome.fold_scores {
            assert_eq!(score.n_train + score.n_test, 400);
        }
        assert_eq!(outcome.pooled.n, 1200);
    }

    #[test]
    fn a_linear_field_is_predicted_exactly_except_for_y() {
        // target = x + y, feature = x: the held-out residual is y minus the
        // training mean of y, so pooled bias is small and R² is about 1 - var(y)/var(x+y) = 0.5.
        let dataset = lattice();
        let plan = Plan {
            scheme: SchemeSpec::Grid(GridParams {
                block_size: 5.0,
                origin: [0.0, 0.0],
                folds: 4,
            }),
            repeats: 1,
            seed: 3,
        };
        let outcome = cross_validate(&dataset, &plan, &Ols).unwrap();
        let r2 = outcome.pooled.r2.unwrap();
        assert!(r2 > 0.3 && r2 < 0.6, "r2 = {r2}");
        let first = outcome.unit_errors[0];
        assert_relative_eq!(first.mean_residual, first.observed - first.mean_predicted);
        assert_relative_eq!(first.rmse, first.mean_residual.abs(), epsilon = 1e-12);
    }

    #[test]
    fn a_fold_without_enough_training_units_names_the_fold() {
        let dataset = points_dataset(&[[0.0, 0.0], [1.0, 5.0], [2.0, 1.0]]);
        let plan = Plan {
            scheme: SchemeSpec::Random(RandomParams { folds: 3 }),
            repeats: 1,
            seed: 1,
        };
        // Each training set has 2 units: enough for intercept + 1 feature.
        assert!(cross_validate(&dataset, &plan, &Ols).is_ok());
        let dataset = points_dataset(&[[0.0, 0.0], [0.0, 5.0], [2.0, 1.0]]);
        // Feature x is constant on the training units of the fold holding out unit 3.
        let error = cross_validate(&dataset, &plan, &Ols).unwrap_err();
        let text = error.to_string();
        assert!(
            text.starts_with("cannot fit fold") && text.contains("feature x is constant"),
            "{text}"
        );
    }
}
