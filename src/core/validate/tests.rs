//! Checks of the validation loop: folds, fits, predictions, the baseline.

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
    let baseline = Baseline::new(&data, Family::Regression, &folds, &test);
    for (fold, units) in test.iter().enumerate() {
        let other: Vec<f64> = (0..4)
            .filter(|i| !units.contains(&(*i as u32)))
            .map(|i| data.target[i])
            .collect();
        assert_relative_eq!(
            baseline.predict(&data, fold, units[0]),
            other.iter().sum::<f64>() / other.len() as f64
        );
    }
}

#[test]
fn the_count_baseline_is_the_training_rate_times_the_exposure() {
    // Hand computation: fold 1 holds unit 3; training units 0..3 have
    // counts 1, 2, 3 and exposures 10, 20, 30: rate 6/60 = 0.1, so unit 3
    // with exposure 50 gets 5.
    let mut data = points_dataset(&[[0.0, 0.0], [1.0, 0.0], [0.0, 3.0], [2.0, 2.0]]);
    data.target = vec![1.0, 2.0, 3.0, 7.0];
    data.exposure = Some(vec![10.0, 20.0, 30.0, 50.0]);
    let folds = FoldSet::plain(2, vec![0, 0, 0, 1]);
    let test = folds.test_units();
    let baseline = Baseline::new(&data, Family::Count, &folds, &test);
    assert_relative_eq!(baseline.predict(&data, 1, 3), 5.0, max_relative = 1e-15);
    // For a regression family the exposure plays no part: the mean 2.
    let baseline = Baseline::new(&data, Family::Regression, &folds, &test);
    assert_relative_eq!(baseline.predict(&data, 1, 3), 2.0, max_relative = 1e-15);
}
