//! Tests of `sections`.

use super::*;

#[test]
fn ecdf_ends_at_one_and_is_thinned() {
    let values: Vec<f64> = (0..10_000).map(f64::from).collect();
    let curve = ecdf(&values);
    assert_eq!(curve.len(), ECDF_STEPS + 1);
    assert_eq!(curve.last(), Some(&(9999.0, 1.0)));
    assert!(curve
        .windows(2)
        .all(|w| w[0].0 <= w[1].0 && w[0].1 <= w[1].1));
    assert_eq!(ecdf(&[2.0, 1.0]), vec![(1.0, 0.0), (1.0, 0.5), (2.0, 1.0)]);
    assert_eq!(median(&[3.0, 1.0, 2.0, 10.0]), Some(2.5));
}

#[test]
fn a_run_level_score_is_pooled_but_has_no_per_fold_column() {
    let mut report = crate::render::fixtures::minimal_report();
    report.scores.definitions.push(ScoreDefinition {
        name: "W (nearest-distance match)".to_string(),
        unit: "m".to_string(),
        better: Better::Lower,
        description: "distance match".to_string(),
    });
    report.scores.pooled.push(Score {
        name: "W (nearest-distance match)".to_string(),
        value: 1234.5,
    });
    let mut page = String::new();
    scores(&mut page, &report);
    let (pooled, per_fold) = page.split_at(page.find("<h3>Per fold</h3>").expect("a fold table"));
    assert!(pooled.contains("W (nearest-distance match)"), "{pooled}");
    assert!(
        !per_fold.contains("W (nearest-distance match)"),
        "{per_fold}"
    );
    assert!(
        per_fold.contains("<th class=\"num\">RMSE</th>"),
        "{per_fold}"
    );
}
