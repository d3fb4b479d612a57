//! Checks of loaded predictions against recorded folds.

use super::*;
use crate::core::testing::points_dataset;

fn setup() -> (Dataset, Vec<FoldSet>) {
    let data = points_dataset(&[[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]]);
    let sets = vec![FoldSet::plain(2, vec![0, 1, 0, 1])];
    (data, sets)
}

fn row(unit: &str, fold: i64, predicted: f64) -> PredictionRow {
    PredictionRow {
        unit_id: Some(unit.into()),
        repetition: Some(1),
        fold: Some(fold),
        predicted: Some(predicted),
    }
}

#[test]
fn complete_predictions_come_back_in_dataset_order() {
    let (data, sets) = setup();
    let rows = [
        row("3", 1, 0.3),
        row("1", 1, 0.1),
        row("4", 2, 0.4),
        PredictionRow {
            repetition: None,
            ..row("2", 2, 0.2)
        },
    ];
    let predicted = check_predictions("p", &data, &sets, Family::Binary, &rows).unwrap();
    assert_eq!(predicted, vec![vec![0.1, 0.2, 0.3, 0.4]]);
}

#[test]
fn missing_repeated_misplaced_unknown_and_bad_values_are_all_listed() {
    let (data, sets) = setup();
    let rows = [
        row("1", 1, 0.1),
        row("1", 1, 0.1),
        row("2", 1, 0.2),
        row("9", 1, 0.5),
        row("3", 1, 1.5),
    ];
    let error = check_predictions("schema.p", &data, &sets, Family::Binary, &rows).unwrap_err();
    assert_eq!(error.exit_code(), crate::error::exit::DATA);
    let text = error.to_string();
    for expected in [
        "schema.p.unit_id (row id=unit_id=1, repetition 1): a second prediction",
        "schema.p.fold (row id=unit_id=2, repetition 1): fold 1, but the unit is held out in fold 2",
        "schema.p.unit_id (row id=unit_id=9, repetition 1): unknown unit",
        "schema.p.predicted (row id=unit_id=3, repetition 1): predicted value 1.5 is not a probability",
        "schema.p.unit_id (row id=repetition 1): 1 of the run's units have no prediction: 4",
    ] {
        assert!(text.contains(expected), "{expected}\nin: {text}");
    }
}

#[test]
fn a_run_with_several_repetitions_needs_the_repetition_column() {
    let (data, sets) = setup();
    let sets = vec![sets[0].clone(), sets[0].clone()];
    let rows = [PredictionRow {
        repetition: None,
        ..row("1", 1, 0.1)
    }];
    let text = check_predictions("p", &data, &sets, Family::Regression, &rows)
        .unwrap_err()
        .to_string();
    assert!(text.contains("repetition is missing"), "{text}");
    assert!(text.contains("row id=repetition 2"), "{text}");
}
