//! Checks of the merged and downdated least-squares fits: against the NIST
//! StRD certified values (Longley, rows split into chunks and merged), and
//! against brute-force per-fold refits with the direct Householder QR of
//! `fit_ols`.

use nalgebra::{DMatrix, DVector};

use super::*;
use crate::core::folds::{exclude_within, FoldRng, FoldScheme};
use crate::core::models::ols::fit_ols;
use crate::core::testing::table_dataset;

/// A dataset from feature rows, targets and points.
fn dataset(features: &[Vec<f64>], target: &[f64], points: &[[f64; 2]]) -> Dataset {
    let names: Vec<String> = (1..=features[0].len()).map(|j| format!("x{j}")).collect();
    let names: Vec<&str> = names.iter().map(String::as_str).collect();
    table_dataset(&names, features, target, points)
}

/// A reproducible scattered dataset: y = 2 + x1 − 0.5 x2 + 0.1 x3 + noise, on
/// points of a low-discrepancy scatter (no random numbers needed).
fn scattered(n: usize) -> Dataset {
    // The R2 sequence (Roberts 2018, additive recurrence with the plastic
    // number): well spread in the plane, no random numbers needed.
    let (a1, a2) = (0.754_877_666_246_692_7, 0.569_840_290_998_053_2);
    let points: Vec<[f64; 2]> = (0..n)
        .map(|i| {
            let u = (i as f64 * a1).fract();
            let v = (i as f64 * a2).fract();
            [500_000.0 + u * 10_000.0, 5_000_000.0 + v * 10_000.0]
        })
        .collect();
    let features: Vec<Vec<f64>> = points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            vec![
                (p[0] - 500_000.0) / 1000.0,
                ((i * 7919) % 101) as f64,
                1e4 + (p[1] - 5_000_000.0),
            ]
        })
        .collect();
    let target: Vec<f64> = features
        .iter()
        .enumerate()
        .map(|(i, x)| 2.0 + x[0] - 0.5 * x[1] + 1e-4 * x[2] + ((i * 104_729) % 17) as f64 / 17.0)
        .collect();
    dataset(&features, &target, &points)
}

/// The brute-force refit of fold `f`: `fit_ols` on its training rows.
fn refit(data: &Dataset, folds: &FoldSet, fold: u32) -> Vec<f64> {
    let excluded = folds.excluded_from(fold);
    let rows: Vec<usize> = (0..data.len())
        .filter(|&i| folds.fold_of[i] != fold && excluded.binary_search(&(i as u32)).is_err())
        .collect();
    let m = data.n_features();
    let design = DMatrix::from_fn(rows.len(), m + 1, |i, j| {
        if j == 0 {
            1.0
        } else {
            data.features_of(rows[i])[j - 1]
        }
    });
    let target = DVector::from_iterator(rows.len(), rows.iter().map(|&i| data.target[i]));
    fit_ols(design, target, &data.feature_names)
        .expect("the reference refit")
        .coefficients
}

/// Every fold fitted by least squares through [`fit_folds`].
fn ols_folds(data: &Dataset, folds: &FoldSet) -> Vec<Result<Box<dyn Fitted>, FitError>> {
    fit_every_fold(data, folds, &solve)
}

fn relative_error(a: &[f64], b: &[f64]) -> f64 {
    a.iter()
        .zip(b)
        .map(|(x, y)| ((x - y) / y.abs().max(1e-300)).abs())
        .fold(0.0, f64::max)
}

fn coefficients(fit: &dyn Fitted) -> Vec<f64> {
    fit.coefficients()
        .into_iter()
        .map(|(_, value)| value)
        .collect()
}

#[test]
fn merged_chunks_of_longley_give_the_certified_coefficients() {
    // NIST StRD Longley.dat certified values; tolerance 1e-9 relative as for the
    // direct fit (REFERENCES.md §1.2). The rows are split into three sets whose
    // triangles are merged, as the folds of a run are.
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/nist/Longley.txt"
    ))
    .unwrap();
    let rows: Vec<Vec<f64>> = text
        .lines()
        .filter(|line| !line.starts_with('#') && !line.trim().is_empty())
        .map(|line| {
            line.split_whitespace()
                .map(|v| v.parse().unwrap())
                .collect()
        })
        .collect();
    let features: Vec<Vec<f64>> = rows.iter().map(|row| row[1..].to_vec()).collect();
    let target: Vec<f64> = rows.iter().map(|row| row[0]).collect();
    let data = dataset(&features, &target, &vec![[0.0, 0.0]; rows.len()]);
    let standardise = Arc::new(Standardise::of(&data));
    let parts = [
        Triangle::of_units(&data, &standardise, 0..5),
        Triangle::of_units(&data, &standardise, 5..11),
        Triangle::of_units(&data, &standardise, 11..16),
    ];
    let merged = Triangle::merge(&parts.iter().collect::<Vec<_>>());
    assert_eq!(merged.units, 16);
    let used: Vec<usize> = (0..data.n_features()).collect();
    let beta = solve(&merged, &standardise, &used, &data.feature_names).unwrap();
    let fit = LinearFit::new(
        standardise,
        Arc::new(data.feature_names.clone()),
        &beta,
        &used,
    );
    let certified = [
        -3482258.63459582,
        15.0618722713733,
        -0.358191792925910E-01,
        -2.02022980381683,
        -1.03322686717359,
        -0.511041056535807E-01,
        1829.15146461355,
    ];
    let error = relative_error(&fit.original_coefficients(), &certified);
    assert!(error < 1e-9, "relative error {error:e}");
}

#[test]
fn merged_fold_fits_equal_direct_refits() {
    let data = scattered(500);
    let points = crate::core::testing::Points::new(data.points.clone());
    let scheme = crate::core::folds::random::Random::new(7).unwrap();
    let folds = scheme
        .assign(&points.input(), &mut FoldRng::new(3, 0))
        .unwrap();
    let fits = ols_folds(&data, &folds);
    assert_eq!(fits.len(), 7);
    for (fold, fit) in fits.iter().enumerate() {
        let fit = fit.as_ref().unwrap();
        let error = relative_error(
            &coefficients(fit.as_ref()),
            &refit(&data, &folds, fold as u32),
        );
        assert!(error < 1e-10, "fold {fold}: relative error {error:e}");
    }
}

#[test]
fn buffered_folds_equal_direct_refits() {
    let data = scattered(400);
    let points = crate::core::testing::Points::new(data.points.clone());
    let scheme = crate::core::folds::random::Random::new(5).unwrap();
    let mut folds = scheme
        .assign(&points.input(), &mut FoldRng::new(8, 0))
        .unwrap();
    exclude_within(&mut folds, &points.input(), 900.0);
    assert!(folds.has_exclusions());
    for (fold, fit) in ols_folds(&data, &folds).iter().enumerate() {
        let fit = fit.as_ref().unwrap();
        let error = relative_error(
            &coefficients(fit.as_ref()),
            &refit(&data, &folds, fold as u32),
        );
        assert!(error < 1e-10, "fold {fold}: relative error {error:e}");
    }
}

#[test]
fn leave_one_out_with_a_radius_equals_brute_force_refits() {
    // More folds than MERGE_FOLDS: the downdate path. The accuracy
    // target for leave-one-out is 1e-9 relative to brute-force refits.
    let data = scattered(300);
    let points = crate::core::testing::Points::new(data.points.clone());
    let mut folds = FoldSet::plain(300, (0..300).collect());
    exclude_within(&mut folds, &points.input(), 1500.0);
    // About π·1500²/10000² ≈ 7 % of the other units fall within the radius.
    let excluded: usize = folds.excluded.iter().map(Vec::len).sum();
    assert!(excluded > 300 * 15, "{excluded} exclusions");
    let fits = ols_folds(&data, &folds);
    for fold in [0u32, 1, 77, 150, 299] {
        let fit = fits[fold as usize].as_ref().unwrap();
        let error = relative_error(&coefficients(fit.as_ref()), &refit(&data, &folds, fold));
        assert!(error < 1e-9, "fold {fold}: relative error {error:e}");
        // The prediction of the held-out unit, too.
        let reference = refit(&data, &folds, fold);
        let x = data.features_of(fold as usize);
        let expected = reference[0]
            + reference[1..]
                .iter()
                .zip(x)
                .map(|(b, v)| b * v)
                .sum::<f64>();
        let predicted = fit.predict(&data.view(fold as usize));
        assert!(((predicted - expected) / expected).abs() < 1e-9);
    }
}

#[test]
fn a_fold_whose_training_feature_is_constant_names_it_on_both_paths() {
    // x2 is 1 on units 0..4 and 0 elsewhere: a fold that holds out (or
    // excludes) units 0..4 leaves x2 constant on its training units.
    let n = 100;
    let features: Vec<Vec<f64>> = (0..n)
        .map(|i| vec![i as f64, if i < 5 { 1.0 } else { 0.0 }])
        .collect();
    let target: Vec<f64> = (0..n).map(|i| (i % 7) as f64).collect();
    let points: Vec<[f64; 2]> = (0..n).map(|i| [i as f64, 0.0]).collect();
    let data = dataset(&features, &target, &points);
    let mut fold_of = vec![1u32; n];
    fold_of[..5].fill(0);
    let fits = ols_folds(&data, &FoldSet::plain(2, fold_of));
    match &fits[0] {
        Err(FitError::Constant { feature, value }) => {
            assert_eq!(feature, "x2");
            assert!(value.abs() < 1e-12, "{value}");
        }
        other => panic!("{:?}", other.as_ref().err()),
    }
    // Leave-one-out where unit 0's fold excludes units 1..4: the downdate's
    // check fails and the direct refit names the constant feature.
    let mut loo = FoldSet::plain(n as u32, (0..n as u32).collect());
    loo.excluded = vec![Vec::new(); n];
    loo.excluded[0] = vec![1, 2, 3, 4];
    let fits = ols_folds(&data, &loo);
    assert!(matches!(&fits[0], Err(FitError::Constant { feature, .. }) if feature == "x2"));
    assert!(fits[10].is_ok());
}
