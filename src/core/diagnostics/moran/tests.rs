//! Tests of `moran`.

use super::*;
use crate::core::diagnostics::contiguity::{contiguity_pairs, fixture, Contiguity};
use crate::core::diagnostics::weights::Transform;
use approx::assert_relative_eq;

fn path4(transform: Transform) -> Weights {
    Weights::from_pairs(4, &[(0, 1), (1, 2), (2, 3)], transform).unwrap()
}

/// 3 × 3 lattice, rook neighbours, row-major.
fn lattice3(transform: Transform) -> Weights {
    let mut pairs = Vec::new();
    for r in 0..3u32 {
        for c in 0..3u32 {
            let i = r * 3 + c;
            if c < 2 {
                pairs.push((i, i + 1));
            }
            if r < 2 {
                pairs.push((i, i + 3));
            }
        }
    }
    Weights::from_pairs(9, &pairs, transform).unwrap()
}

#[test]
fn example_a_exact() {
    // REFERENCES §5.1 example A (derived, exact; [COMP own + esda 2.9.0]):
    // I = 1/3, E[I] = −1/3, Var_N = 4/27, Var_R = 8/45, b2 = 1.64,
    // z_N = √3.
    let m = moran(&path4(Transform::Binary), &[1.0, 2.0, 3.0, 4.0]).unwrap();
    assert_relative_eq!(m.statistic, 1.0 / 3.0, epsilon = 1e-15);
    assert_relative_eq!(m.normality.expected, -1.0 / 3.0, epsilon = 1e-15);
    assert_relative_eq!(m.normality.variance, 4.0 / 27.0, epsilon = 1e-15);
    assert_relative_eq!(m.randomisation.variance, 8.0 / 45.0, epsilon = 1e-15);
    assert_relative_eq!(m.kurtosis, 1.64, epsilon = 1e-15);
    assert_relative_eq!(m.normality.z, 3f64.sqrt(), epsilon = 1e-14);
    assert!(m.caveats.contains(&Caveat::FewUnits { n: 4, minimum: 30 }));
    // Row-standardised: I = 0.4, Var_N = 0.172222222, Var_R = 0.215555556.
    let m = moran(&path4(Transform::Row), &[1.0, 2.0, 3.0, 4.0]).unwrap();
    assert_relative_eq!(m.statistic, 0.4, epsilon = 1e-15);
    assert_relative_eq!(m.normality.variance, 0.172222222, epsilon = 5e-10);
    assert_relative_eq!(m.randomisation.variance, 0.215555556, epsilon = 5e-10);
}

#[test]
fn example_b_exact() {
    // REFERENCES §5.1 example B: 3×3 rook lattice, y = 1..9 row-major.
    // Binary: I = 0.5, E = −1/8, Var_N = 17/320, Var_R = 191/3200,
    // S = 24, 48, 272, b2 = 1.77. Row: I = 5/9, Var_N = 0.0572145062,
    // Var_R = 0.0646566358, S = 9, 6.9166667, 36.8055556.
    let y: Vec<f64> = (1..=9).map(f64::from).collect();
    let m = moran(&lattice3(Transform::Binary), &y).unwrap();
    assert_eq!((m.sums.s0, m.sums.s1, m.sums.s2), (24.0, 48.0, 272.0));
    assert_relative_eq!(m.statistic, 0.5, epsilon = 1e-15);
    assert_relative_eq!(m.normality.expected, -0.125, epsilon = 1e-15);
    assert_relative_eq!(m.normality.variance, 17.0 / 320.0, epsilon = 1e-15);
    assert_relative_eq!(m.randomisation.variance, 191.0 / 3200.0, epsilon = 1e-15);
    assert_relative_eq!(m.kurtosis, 1.77, epsilon = 1e-14);
    let m = moran(&lattice3(Transform::Row), &y).unwrap();
    assert_relative_eq!(m.statistic, 5.0 / 9.0, epsilon = 1e-15);
    assert_relative_eq!(m.sums.s0, 9.0, epsilon = 1e-14);
    assert_relative_eq!(m.sums.s1, 6.9166667, epsilon = 5e-8);
    assert_relative_eq!(m.sums.s2, 36.8055556, epsilon = 5e-8);
    assert_relative_eq!(m.normality.variance, 0.0572145062, epsilon = 5e-11);
    assert_relative_eq!(m.randomisation.variance, 0.0646566358, epsilon = 5e-11);
}

/// Columbus weights and the OLS design CRIME ~ 1 + INC + HOVAL.
struct Columbus {
    queen: Vec<(u32, u32)>,
    rook: Vec<(u32, u32)>,
    crime: Vec<f64>,
    design: DMatrix<f64>,
    residuals: Vec<f64>,
}

fn columbus() -> Columbus {
    let units = fixture::columbus();
    let regression = fixture::columbus_regression(&units);
    // REFERENCES §2.2 [COMP statsmodels 0.15.0]: the OLS coefficients.
    let expected = [68.61896109502548, -1.5973108340847058, -0.2739314781716756];
    for (found, expected) in regression.coefficients.iter().zip(expected) {
        assert_relative_eq!(*found, expected, max_relative = 1e-11);
    }
    let polygons: Vec<_> = units.into_iter().map(|u| u.polygon).collect();
    Columbus {
        queen: contiguity_pairs(&polygons, Contiguity::Queen).unwrap(),
        rook: contiguity_pairs(&polygons, Contiguity::Rook).unwrap(),
        crime: regression.crime,
        design: regression.design,
        residuals: regression.residuals,
    }
}

#[test]
fn columbus_row_standardised_matches_esda() {
    // REFERENCES §2.3 [COMP esda 2.9.0 / libpysal 4.14.1], row-standardised.
    let data = columbus();
    struct Case<'a> {
        pairs: &'a [(u32, u32)],
        values: &'a [f64],
        i: f64,
        var_n: f64,
        z_n: f64,
        p_n: f64,
        var_r: f64,
        z_r: f64,
        p_r: f64,
        b2: f64,
    }
    let cases = [
        Case {
            pairs: &data.queen,
            values: &data.crime,
            i: 0.5001885571828611,
            var_n: 0.00856341311940498,
            z_n: 5.630312787738188,
            p_n: 1.7988309915890043e-08,
            var_r: 0.008689289201332044,
            z_r: 5.58938267504451,
            p_r: 2.2787827007824768e-08,
            b2: 2.2259456941025326,
        },
        Case {
            pairs: &data.queen,
            values: &data.residuals,
            i: 0.2221094065786734,
            var_n: 0.00856341311940498,
            z_n: 2.6253093010344615,
            p_n: 0.008657028715600352,
            var_r: 0.008391172931708919,
            z_r: 2.6521164508267066,
            p_r: 0.007998894905437223,
            b2: 3.7749630039841136,
        },
        Case {
            pairs: &data.rook,
            values: &data.crime,
            i: 0.5236702127502532,
            var_n: 0.009808900066073292,
            z_n: 5.497820514640764,
            p_n: 3.845140021244193e-08,
            var_r: 0.009952987347723773,
            z_r: 5.457880045909277,
            p_r: 4.818529946416237e-08,
            b2: 2.2259456941025326,
        },
        Case {
            pairs: &data.rook,
            values: &data.residuals,
            i: 0.24986247924902633,
            var_n: 0.009808900066073292,
            z_n: 2.733199815404305,
            p_n: 0.006272226826888191,
            var_r: 0.009611740923080002,
            z_r: 2.7610896599606773,
            p_r: 0.005760885863721869,
            b2: 3.7749630039841136,
        },
    ];
    for case in cases {
        let w = Weights::from_pairs(49, case.pairs, Transform::Row).unwrap();
        let m = moran(&w, case.values).unwrap();
        let tol = 1e-10;
        assert_relative_eq!(m.sums.s0, 49.0, max_relative = tol);
        assert_relative_eq!(m.statistic, case.i, max_relative = tol);
        assert_relative_eq!(m.normality.expected, -1.0 / 48.0, max_relative = tol);
        assert_relative_eq!(m.normality.variance, case.var_n, max_relative = tol);
        assert_relative_eq!(m.normality.z, case.z_n, max_relative = tol);
        assert_relative_eq!(m.normality.p_two_sided, case.p_n, max_relative = 1e-8);
        assert_relative_eq!(m.randomisation.variance, case.var_r, max_relative = tol);
        assert_relative_eq!(m.randomisation.z, case.z_r, max_relative = tol);
        assert_relative_eq!(m.randomisation.p_two_sided, case.p_r, max_relative = 1e-8);
        assert_relative_eq!(m.kurtosis, case.b2, max_relative = tol);
        assert!(m.caveats.is_empty(), "{:?}", m.caveats);
    }
    // S1, S2 of the row-standardised weights.
    let queen = Weights::from_pairs(49, &data.queen, Transform::Row)
        .unwrap()
        .sums();
    assert_relative_eq!(queen.s1, 22.75118669690098, max_relative = 1e-12);
    assert_relative_eq!(queen.s2, 203.70909863945576, max_relative = 1e-12);
    let rook = Weights::from_pairs(49, &data.rook, Transform::Row)
        .unwrap()
        .sums();
    assert_relative_eq!(rook.s1, 25.778253968253967, max_relative = 1e-12);
    assert_relative_eq!(rook.s2, 205.56613000755857, max_relative = 1e-12);
}

#[test]
fn columbus_binary_matches_esda() {
    // REFERENCES §2.3 binary weights (transformation='b') on CRIME.
    let data = columbus();
    for (pairs, i, s, var_n, var_r, z_n, z_r) in [
        (
            &data.queen,
            0.5154614368862791,
            (236.0, 472.0, 5304.0),
            0.007349774769383,
            0.0074543943427878515,
            6.255565079514331,
            6.211512737303757,
        ),
        (
            &data.rook,
            0.5193899776675832,
            (200.0, 400.0, 3704.0),
            0.008929555555555555,
            0.00905841262361498,
            5.716871078957337,
            5.676063829121542,
        ),
    ] {
        let w = Weights::from_pairs(49, pairs, Transform::Binary).unwrap();
        let m = moran(&w, &data.crime).unwrap();
        assert_eq!((m.sums.s0, m.sums.s1, m.sums.s2), s);
        assert_relative_eq!(m.statistic, i, max_relative = 1e-10);
        // Var_N is printed to 13 significant digits in REFERENCES.
        assert_relative_eq!(m.normality.variance, var_n, max_relative = 1e-10);
        assert_relative_eq!(m.randomisation.variance, var_r, max_relative = 1e-10);
        assert_relative_eq!(m.normality.z, z_n, max_relative = 1e-10);
        assert_relative_eq!(m.randomisation.z, z_r, max_relative = 1e-10);
    }
}

#[test]
fn columbus_residual_moments_match_the_regression_formulas() {
    // REFERENCES §2.3 residual Moran with regression moments (k = 3)
    // [COMP own numpy; spreg 1.9.0 moran_res agrees for queen: I
    // 0.22210940657867684, z 2.8393189345136975, p 0.0045209944743342485].
    let data = columbus();
    for (pairs, i, e, var, z) in [
        (
            &data.queen,
            0.222109406578674,
            -0.03341833457648182,
            0.008099305013311447,
            2.8393189345136642,
        ),
        (
            &data.rook,
            0.2498624792490269,
            -0.034589114070341806,
            0.009381495867578601,
            2.93678616084402,
        ),
    ] {
        let w = Weights::from_pairs(49, pairs, Transform::Row).unwrap();
        let m = moran_residuals(&w, &data.residuals, &data.design).unwrap();
        assert_eq!(m.regressors, 3);
        assert_relative_eq!(m.statistic, i, max_relative = 1e-10);
        assert_relative_eq!(m.inference.expected, e, max_relative = 1e-10);
        assert_relative_eq!(m.inference.variance, var, max_relative = 1e-10);
        assert_relative_eq!(m.inference.z, z, max_relative = 1e-10);
    }
    let w = Weights::from_pairs(49, &data.queen, Transform::Row).unwrap();
    let m = moran_residuals(&w, &data.residuals, &data.design).unwrap();
    assert_relative_eq!(
        m.inference.p_two_sided,
        0.0045209944743342485,
        max_relative = 1e-8
    );
}

#[test]
fn residual_moments_agree_with_dense_matrices_on_asymmetric_weights() {
    // The trace identities against dense n × n products (common practice,
    // no source): asymmetric kNN weights, a random-looking design.
    let n = 23;
    let points: Vec<[f64; 2]> = (0..n)
        .map(|i| [((i * 37) % 23) as f64, ((i * i * 7) % 19) as f64])
        .collect();
    let w = Weights::k_nearest(&points, 3, Transform::Row).unwrap();
    let x = DMatrix::from_fn(n, 3, |i, c| match c {
        0 => 1.0,
        1 => points[i][0],
        _ => ((i * 13) % 7) as f64,
    });
    let dense_w = DMatrix::from_fn(n, n, |i, j| w.weight(i, j));
    let xtx_inv = (x.transpose() * &x).try_inverse().unwrap();
    let m = DMatrix::identity(n, n) - &x * xtx_inv * x.transpose();
    let mw = &m * &dense_w;
    let y = DMatrix::from_fn(n, 1, |i, _| ((i * 11) % 17) as f64 + points[i][1]);
    let e = &m * y;
    let residuals: Vec<f64> = e.iter().copied().collect();
    let s0 = w.sums().s0;
    let (nf, kf) = (n as f64, 3.0);
    let expected_e = nf / s0 * mw.trace() / (nf - kf);
    let expected_var = (nf / s0).powi(2)
        * ((&mw * &m * dense_w.transpose()).trace() + (&mw * &mw).trace() + mw.trace().powi(2))
        / ((nf - kf) * (nf - kf + 2.0))
        - expected_e * expected_e;
    let result = moran_residuals(&w, &residuals, &x).unwrap();
    assert_relative_eq!(result.inference.expected, expected_e, max_relative = 1e-11);
    assert_relative_eq!(
        result.inference.variance,
        expected_var,
        max_relative = 1e-11
    );
    // Values that are not residuals of X are refused.
    let not_residuals: Vec<f64> = (0..n).map(|i| i as f64).collect();
    assert!(matches!(
        moran_residuals(&w, &not_residuals, &x),
        Err(DiagnosticsError::Design(_))
    ));
}

#[test]
fn bad_input_is_refused_with_the_figures() {
    let w = path4(Transform::Row);
    assert!(matches!(
        moran(&w, &[1.0, 2.0, 3.0]),
        Err(DiagnosticsError::LengthMismatch {
            expected: 4,
            found: 3,
            ..
        })
    ));
    assert!(matches!(
        moran(&w, &[1.0, f64::NAN, 3.0, f64::INFINITY]),
        Err(DiagnosticsError::NonFinite { count: 2, .. })
    ));
    assert!(matches!(
        moran(&w, &[2.0; 4]),
        Err(DiagnosticsError::ConstantValues { n: 4, .. })
    ));
    let empty = Weights::from_pairs(5, &[], Transform::Row).unwrap();
    assert!(matches!(
        moran(&empty, &[1.0, 2.0, 3.0, 4.0, 5.0]),
        Err(DiagnosticsError::NoLinks { n: 5, .. })
    ));
    let three = Weights::from_pairs(3, &[(0, 1), (1, 2)], Transform::Row).unwrap();
    assert!(matches!(
        moran(&three, &[1.0, 2.0, 4.0]),
        Err(DiagnosticsError::TooFewUnits {
            needed: 4,
            found: 3,
            ..
        })
    ));
    // Mostly islands: a band that links 2 of 40 units.
    let mostly = Weights::from_pairs(40, &[(0, 1)], Transform::Row).unwrap();
    let values: Vec<f64> = (0..40).map(f64::from).collect();
    let m = moran(&mostly, &values).unwrap();
    assert!(m
        .caveats
        .contains(&Caveat::MostlyIslands { count: 38, n: 40 }));
}
