//! OLS against the NIST StRD linear least squares certified values.
//!
//! Source of data and certified values: NIST/ITL Statistical Reference Datasets,
//! Linear Least Squares Regression (Longley, Norris, Pontius, Filip, Wampler1–5);
//! the data rows are in `tests/fixtures/nist/`, copied verbatim from the .dat files,
//! and the certified values below are copied from the same files.
//! Thresholds follow the float64 Householder QR accuracy that numpy/LAPACK reach
//! on the same problems (project REFERENCES.md §1.2): 1e-9 relative for Longley.

use nalgebra::{DMatrix, DVector};

use super::fit_ols;

fn load(name: &str) -> Vec<Vec<f64>> {
    let path = format!(
        "{}/tests/fixtures/nist/{name}.txt",
        env!("CARGO_MANIFEST_DIR")
    );
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .filter(|line| !line.starts_with('#') && !line.trim().is_empty())
        .map(|line| {
            line.split_whitespace()
                .map(|v| v.parse().unwrap())
                .collect()
        })
        .collect()
}

/// Design with intercept and the given columns of x (file columns 1..).
fn design_from_columns(rows: &[Vec<f64>]) -> (DMatrix<f64>, DVector<f64>, Vec<String>) {
    let p = rows[0].len();
    let design = DMatrix::from_fn(rows.len(), p, |i, j| if j == 0 { 1.0 } else { rows[i][j] });
    let target = DVector::from_iterator(rows.len(), rows.iter().map(|row| row[0]));
    let names = (1..p).map(|j| format!("x{j}")).collect();
    (design, target, names)
}

/// Polynomial design 1, x, …, x^degree in the single x column.
fn polynomial(rows: &[Vec<f64>], degree: usize) -> (DMatrix<f64>, DVector<f64>, Vec<String>) {
    let design = DMatrix::from_fn(rows.len(), degree + 1, |i, j| rows[i][1].powi(j as i32));
    let target = DVector::from_iterator(rows.len(), rows.iter().map(|row| row[0]));
    let names = (1..=degree).map(|j| format!("x^{j}")).collect();
    (design, target, names)
}

fn assert_close(label: &str, actual: &[f64], certified: &[f64], relative: f64) {
    assert_eq!(actual.len(), certified.len(), "{label}");
    for (j, (a, c)) in actual.iter().zip(certified).enumerate() {
        let error = if *c == 0.0 {
            a.abs()
        } else {
            ((a - c) / c).abs()
        };
        assert!(
            error <= relative,
            "{label}[{j}]: {a} vs certified {c} (relative error {error:e} > {relative:e})"
        );
    }
}

#[test]
fn longley_matches_certified_values() {
    // NIST StRD Longley.dat, certified values (15 significant digits).
    let (design, target, names) = design_from_columns(&load("Longley"));
    let fit = fit_ols(design, target, &names).unwrap();
    assert_close(
        "Longley coefficients",
        &fit.coefficients,
        &[
            -3482258.63459582,
            15.0618722713733,
            -0.358191792925910E-01,
            -2.02022980381683,
            -1.03322686717359,
            -0.511041056535807E-01,
            1829.15146461355,
        ],
        1e-9,
    );
    assert_close(
        "Longley standard errors",
        &fit.standard_errors,
        &[
            890420.383607373,
            84.9149257747669,
            0.334910077722432E-01,
            0.488399681651699,
            0.214274163161675,
            0.226073200069370,
            455.478499142212,
        ],
        1e-9,
    );
    assert_close(
        "Longley residual SD",
        &[fit.residual_sd],
        &[304.854073561965],
        1e-10,
    );
    assert_close("Longley R²", &[fit.r_squared], &[0.995479004577296], 1e-10);
}

#[test]
fn norris_matches_certified_values() {
    // NIST StRD Norris.dat.
    let (design, target, names) = design_from_columns(&load("Norris"));
    let fit = fit_ols(design, target, &names).unwrap();
    assert_close(
        "Norris coefficients",
        &fit.coefficients,
        &[-0.262323073774029, 1.00211681802045],
        1e-10,
    );
    assert_close(
        "Norris SEs",
        &fit.standard_errors,
        &[0.232818234301152, 0.429796848199937E-03],
        1e-10,
    );
    assert_close(
        "Norris residual SD",
        &[fit.residual_sd],
        &[0.884796396144373],
        1e-10,
    );
    assert_close("Norris R²", &[fit.r_squared], &[0.999993745883712], 1e-12);
}

#[test]
fn pontius_matches_certified_values() {
    // NIST StRD Pontius.dat: y = B0 + B1 x + B2 x².
    let (design, target, names) = polynomial(&load("Pontius"), 2);
    let fit = fit_ols(design, target, &names).unwrap();
    assert_close(
        "Pontius coefficients",
        &fit.coefficients,
        &[
            0.673565789473684E-03,
            0.732059160401003E-06,
            -0.316081871345029E-14,
        ],
        1e-9,
    );
    assert_close(
        "Pontius SEs",
        &fit.standard_errors,
        &[
            0.107938612033077E-03,
            0.157817399981659E-09,
            0.486652849992036E-16,
        ],
        1e-9,
    );
    assert_close(
        "Pontius residual SD",
        &[fit.residual_sd],
        &[0.205177424076185E-03],
        1e-9,
    );
}

#[test]
fn filip_matches_certified_values_or_is_refused() {
    // NIST StRD Filip.dat, degree-10 polynomial, cond(X) ≈ 1.8e15. Per REFERENCES.md
    // §1.2 a float64 QR reaches about 8 digits; solvers that truncate rank fail it.
    let (design, target, names) = polynomial(&load("Filip"), 10);
    let fit = fit_ols(design, target, &names).expect("Filip is full rank and must be fitted");
    assert_close(
        "Filip coefficients",
        &fit.coefficients,
        &[
            -1467.48961422980,
            -2772.17959193342,
            -2316.37108160893,
            -1127.97394098372,
            -354.478233703349,
            -75.1242017393757,
            -10.8753180355343,
            -1.06221498588947,
            -0.670191154593408E-01,
            -0.246781078275479E-02,
            -0.402962525080404E-04,
        ],
        1e-6,
    );
    assert_close(
        "Filip SEs",
        &fit.standard_errors,
        &[
            298.084530995537,
            559.779865474950,
            466.477572127796,
            227.204274477751,
            71.6478660875927,
            15.2897178747400,
            2.23691159816033,
            0.221624321934227,
            0.142363763154724E-01,
            0.535617408889821E-03,
            0.896632837373868E-05,
        ],
        1e-6,
    );
    assert_close("Filip R²", &[fit.r_squared], &[0.996727416185620], 1e-9);
}

#[test]
fn wampler_sets_match_certified_values() {
    // NIST StRD Wampler1–5: degree-5 polynomials in x = 0..20; every coefficient
    // is 1 except Wampler2, whose B_j = 10^-j.
    for (name, coefficients, r_squared) in [
        ("Wampler1", vec![1.0; 6], 1.0),
        ("Wampler2", vec![1.0, 0.1, 0.01, 0.001, 1e-4, 1e-5], 1.0),
        ("Wampler3", vec![1.0; 6], 0.999995559025820),
        ("Wampler4", vec![1.0; 6], 0.957478440825662),
        ("Wampler5", vec![1.0; 6], 0.224668921574940E-02),
    ] {
        let (design, target, names) = polynomial(&load(name), 5);
        let fit = fit_ols(design, target, &names).unwrap();
        // numpy's Householder QR reaches LRE 5.8 on Wampler5 (REFERENCES.md §1.2).
        let tolerance = if name == "Wampler5" { 1e-5 } else { 1e-7 };
        assert_close(
            &format!("{name} coefficients"),
            &fit.coefficients,
            &coefficients,
            tolerance,
        );
        assert_close(&format!("{name} R²"), &[fit.r_squared], &[r_squared], 1e-9);
    }
}

fn names(list: &[&str]) -> Vec<String> {
    list.iter().map(|s| s.to_string()).collect()
}

#[test]
fn collinear_features_are_refused_by_name() {
    let x: Vec<f64> = (0..20).map(|i| i as f64).collect();
    let design = DMatrix::from_fn(20, 3, |i, j| match j {
        0 => 1.0,
        1 => x[i],
        _ => 3.0 * x[i] - 2.0,
    });
    let target = DVector::from_iterator(20, x.iter().map(|v| v * 0.5));
    let message = fit_ols(design, target, &names(&["rain", "runoff"]))
        .unwrap_err()
        .to_string();
    assert!(
        message.contains("feature runoff") && message.contains("rank-deficient"),
        "{message}"
    );
}

#[test]
fn constant_feature_is_refused_by_name() {
    let design = DMatrix::from_fn(10, 3, |i, j| match j {
        0 => 1.0,
        1 => i as f64,
        _ => 4.0,
    });
    let target = DVector::from_element(10, 1.0);
    let message = fit_ols(design, target, &names(&["rain", "soil"]))
        .unwrap_err()
        .to_string();
    assert!(message.contains("feature soil is constant"), "{message}");
}

#[test]
fn too_few_units_are_refused() {
    let design = DMatrix::from_fn(2, 3, |i, j| {
        if j == 0 {
            1.0
        } else {
            (i * j) as f64 + 0.5 * j as f64
        }
    });
    let target = DVector::from_element(2, 1.0);
    let message = fit_ols(design, target, &names(&["a", "b"]))
        .unwrap_err()
        .to_string();
    assert!(
        message.contains("2 training units") && message.contains("at least 3"),
        "{message}"
    );
}
