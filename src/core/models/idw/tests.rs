//! The location-only families against the Columbus leave-one-out baselines
//! of REFERENCES.md §2.4 and hand computations.

use super::*;
use crate::core::folds::random::Random;
use crate::core::folds::FoldSet;
use crate::core::models::knn::Knn;
use crate::core::models::mean::Mean;
use crate::core::testing::{columbus, points_dataset};
use crate::core::units::Dataset;
use crate::core::validate::{fit_and_score, Plan, RunOutcome};
use approx::assert_relative_eq;

fn run(data: &Dataset, model: &dyn Model, folds: FoldSet) -> RunOutcome {
    let scheme = Random::new(2).unwrap();
    let plan = Plan {
        scheme: &scheme,
        model,
        repeats: 1,
        seed: 1,
        exclusion_radius: None,
    };
    fit_and_score(data, &plan, vec![folds]).unwrap()
}

fn leave_one_out(data: &Dataset) -> FoldSet {
    FoldSet::plain(data.len() as u32, (0..data.len() as u32).collect())
}

fn idw(power: f64, neighbours: Option<usize>, radius: Option<f64>) -> Idw {
    Idw {
        power,
        neighbours,
        radius,
        family: Family::Regression,
    }
}

#[test]
fn columbus_leave_one_out_matches_the_reference_baselines() {
    // REFERENCES.md §2.4 [COMP numpy; sklearn KNeighborsRegressor], CRIME at
    // the polygon centroids, values given to 9 decimals:
    // IDW over all other points, power 1: RMSE 14.479249790, MAE 11.674677220;
    // power 2: 12.276030394, 9.153082371; kNN k = 1: 14.261552395,
    // 10.282342918; k = 5: 11.633349694, 7.825957939.
    let data = columbus();
    let cases: Vec<(Box<dyn Model>, f64, f64)> = vec![
        (
            Box::new(idw(1.0, Some(48), None)),
            14.479249790,
            11.674677220,
        ),
        (
            Box::new(idw(2.0, Some(48), None)),
            12.276030394,
            9.153082371,
        ),
        (
            Box::new(idw(2.0, None, Some(1e6))),
            12.276030394,
            9.153082371,
        ),
        (
            Box::new(Knn {
                neighbours: 1,
                family: Family::Regression,
            }),
            14.261552395,
            10.282342918,
        ),
        (
            Box::new(Knn {
                neighbours: 5,
                family: Family::Regression,
            }),
            11.633349694,
            7.825957939,
        ),
    ];
    for (model, rmse, mae) in cases {
        let outcome = run(&data, model.as_ref(), leave_one_out(&data));
        assert_relative_eq!(outcome.pooled.get("rmse").unwrap(), rmse, epsilon = 6e-9);
        assert_relative_eq!(outcome.pooled.get("mae").unwrap(), mae, epsilon = 6e-9);
        assert!(outcome.notes.is_empty());
    }
}

#[test]
fn the_mean_model_scores_exactly_as_the_baseline() {
    let data = columbus();
    let folds = FoldSet::plain(5, (0..49).map(|i| i % 5).collect());
    let outcome = run(
        &data,
        &Mean {
            family: Family::Regression,
        },
        folds,
    );
    assert_same_scores(&outcome.pooled, &outcome.baseline);
}

/// Equal up to rounding (the baseline subtracts the held-out sums from the
/// total; a fit sums its training units).
fn assert_same_scores(a: &crate::core::metrics::Scores, b: &crate::core::metrics::Scores) {
    assert_eq!(a.n, b.n);
    for ((name, x), (_, y)) in a.values.iter().zip(&b.values) {
        assert_relative_eq!(
            x.unwrap(),
            y.unwrap(),
            max_relative = 1e-12,
            epsilon = 1e-14
        );
        let _ = name;
    }
}

#[test]
fn units_with_nothing_within_the_radius_get_the_training_mean_and_are_counted() {
    // Points 10 apart; radius 1: nothing is within reach of a held-out unit.
    let data = points_dataset(&[[0.0, 0.0], [10.0, 0.0], [20.0, 0.0], [30.0, 0.0]]);
    let outcome = run(
        &data,
        &idw(2.0, None, Some(1.0)),
        FoldSet::plain(4, vec![0, 1, 2, 3]),
    );
    assert_eq!(outcome.notes, vec![(FALLBACK_NOTE.to_string(), 4)]);
    assert_same_scores(&outcome.pooled, &outcome.baseline);
}

#[test]
fn a_coincident_training_unit_takes_all_the_weight() {
    // Units 0 and 1 share a point; target = x + y (points_dataset): unit 0's
    // prediction from training {1, 2} is unit 1's target, 0 (hand computation).
    let data = points_dataset(&[[0.0, 0.0], [0.0, 0.0], [3.0, 4.0]]);
    let fit = idw(2.0, Some(2), None)
        .fit(&TrainingSet {
            data: &data,
            rows: &[1, 2],
        })
        .unwrap();
    assert_eq!(fit.predict(&data.view(0)), 0.0);
}

#[test]
fn counts_with_an_exposure_use_the_neighbours_pooled_rate() {
    // Hand computation: training units 1 (count 2, exposure 10) and 2 (count
    // 6, exposure 20) are unit 0's two nearest; pooled rate 8/30; unit 0 has
    // exposure 15: prediction 4.
    let mut data = points_dataset(&[[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [50.0, 0.0]]);
    data.target = vec![0.0, 2.0, 6.0, 100.0];
    data.exposure = Some(vec![15.0, 10.0, 20.0, 1.0]);
    let knn = Knn {
        neighbours: 2,
        family: Family::Count,
    };
    let fit = knn
        .fit(&TrainingSet {
            data: &data,
            rows: &[1, 2, 3],
        })
        .unwrap();
    assert_relative_eq!(fit.predict(&data.view(0)), 4.0, max_relative = 1e-15);
}
