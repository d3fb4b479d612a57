//! Checks of the score definitions against scikit-learn and hand computations.

use super::*;
use approx::assert_relative_eq;

#[test]
fn matches_the_scikit_learn_documentation_example() {
    // y = [3, -0.5, 2, 7], ŷ = [2.5, 0, 2, 8]: r2_score 0.9486081370449679,
    // RMSE 0.6123724356957945, MAE 0.5 (REFERENCES.md §7, [COMP sklearn 1.9.1]).
    let pairs = [(3.0, 2.5), (-0.5, 0.0), (2.0, 2.0), (7.0, 8.0)];
    let scores = Family::Regression.score(&pairs);
    assert_relative_eq!(
        scores.get("r2").unwrap(),
        0.9486081370449679,
        epsilon = 1e-15
    );
    assert_relative_eq!(
        scores.get("rmse").unwrap(),
        0.6123724356957945,
        epsilon = 1e-15
    );
    assert_relative_eq!(scores.get("mae").unwrap(), 0.5, epsilon = 1e-15);
    // bias = mean(ŷ - y) = (-0.5 + 0.5 + 0 + 1) / 4 (hand computation).
    assert_relative_eq!(scores.get("bias").unwrap(), 0.25, epsilon = 1e-15);
    assert_eq!(scores.n, 4);
}

#[test]
fn constant_observed_values_leave_r2_undefined() {
    assert_eq!(
        Family::Regression
            .score(&[(1.0, 2.0), (1.0, 0.0)])
            .get("r2"),
        None
    );
}

/// Outcomes and probabilities with ties and probabilities of exactly 0 and 1.
fn binary_pairs() -> Vec<(f64, f64)> {
    let y = [0.0, 0.0, 1.0, 1.0, 1.0, 0.0, 1.0, 0.0];
    let p = [0.1, 0.4, 0.35, 0.8, 0.4, 0.4, 1.0, 0.0];
    y.into_iter().zip(p).collect()
}

#[test]
fn binary_scores_match_scikit_learn() {
    // scikit-learn 1.9.1 at test-writing time (values from the project's
    // reference environment): log_loss(y, clip(p, 1e-15, 1 - 1e-15)) =
    // 0.4145335213596065, brier_score_loss = 0.1440625, roc_auc_score = 0.8125,
    // accuracy_score(y, p >= 0.5) = 0.75.
    let scores = Family::Binary.score(&binary_pairs());
    assert_relative_eq!(
        scores.get("log_loss").unwrap(),
        0.4145335213596065,
        max_relative = 1e-13
    );
    assert_relative_eq!(scores.get("brier").unwrap(), 0.1440625, epsilon = 1e-15);
    assert_relative_eq!(scores.get("roc_auc").unwrap(), 0.8125, epsilon = 1e-15);
    assert_relative_eq!(scores.get("accuracy").unwrap(), 0.75, epsilon = 1e-15);
    // The per-unit losses average to the log-loss (definition).
    let mean: f64 = binary_pairs()
        .iter()
        .map(|&(y, p)| Family::Binary.loss(y, p).unwrap())
        .sum::<f64>()
        / 8.0;
    assert_relative_eq!(mean, scores.get("log_loss").unwrap(), max_relative = 1e-14);
}

#[test]
fn auc_counts_ties_as_one_half_and_is_undefined_for_one_class() {
    // Hand computation: positives {0.5, 0.9}, negatives {0.5, 0.1}: of the 4
    // pairs, 3 are ordered right and 1 is tied: AUC = 3.5 / 4.
    let pairs = [(1.0, 0.5), (1.0, 0.9), (0.0, 0.5), (0.0, 0.1)];
    assert_relative_eq!(roc_auc(&pairs).unwrap(), 0.875);
    assert_eq!(roc_auc(&[(1.0, 0.2), (1.0, 0.3)]), None);
}

#[test]
fn count_scores_match_scikit_learn() {
    // scikit-learn 1.9.1: mean_poisson_deviance([0,3,1,7,2], [0.5,2.5,1,4,3]) =
    // 0.6613379878853974; RMSE = 1.449137674618944.
    let pairs = [(0.0, 0.5), (3.0, 2.5), (1.0, 1.0), (7.0, 4.0), (2.0, 3.0)];
    let scores = Family::Count.score(&pairs);
    assert_relative_eq!(
        scores.get("poisson_deviance").unwrap(),
        0.6613379878853974,
        max_relative = 1e-14
    );
    assert_relative_eq!(
        scores.get("rmse").unwrap(),
        1.449137674618944,
        max_relative = 1e-14
    );
}

#[test]
fn observed_and_predicted_values_are_checked_per_family() {
    assert!(Family::Binary.check_observed(1.0).is_ok());
    assert!(Family::Binary
        .check_observed(2.0)
        .unwrap_err()
        .contains("0 or 1"));
    assert!(Family::Count
        .check_observed(-1.0)
        .unwrap_err()
        .contains("negative"));
    assert!(Family::Count
        .check_observed(1.5)
        .unwrap_err()
        .contains("whole"));
    assert!(Family::Binary.check_predicted(1.2).is_err());
    assert!(Family::Count.check_predicted(-0.1).is_err());
    assert!(Family::Regression.check_predicted(f64::NAN).is_err());
    assert_eq!(Family::from_name("count"), Some(Family::Count));
    for family in [Family::Regression, Family::Binary, Family::Count] {
        assert!(family.scores().iter().any(|s| s.name == family.headline()));
    }
}

#[test]
fn spread_uses_the_sample_sd() {
    // mean 2, sample variance ((1)² + 0 + (1)²) / 2 = 1 (hand computation).
    let s = spread([1.0, 2.0, 3.0]);
    assert_relative_eq!(s.mean, 2.0);
    assert_relative_eq!(s.sd, 1.0);
}
