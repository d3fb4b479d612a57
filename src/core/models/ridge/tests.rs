//! Ridge against the scikit-learn conventions of REFERENCES.md §4 on the
//! Columbus data, and against an independent closed form on folds.

use nalgebra::{DMatrix, DVector};

use super::*;
use crate::core::folds::FoldSet;
use crate::core::testing::{columbus, table_dataset};
use approx::assert_relative_eq;

fn coefficients(fit: &dyn Fitted) -> Vec<f64> {
    fit.coefficients().into_iter().map(|(_, v)| v).collect()
}

fn all_rows(data: &Dataset) -> Vec<u32> {
    (0..data.len() as u32).collect()
}

#[test]
fn columbus_matches_the_standardised_scikit_learn_convention() {
    // REFERENCES.md §4 [COMP sklearn 1.9.1, numpy]: CRIME ~ INC + HOVAL on
    // z-scores with population SD (ddof 0), λ = 10, intercept unpenalised:
    // back-transformed slopes −1.345606420845279, −0.25977673433695386;
    // intercept 64.45667065898179.
    let data = columbus();
    let rows = all_rows(&data);
    let fit = Ridge::new(10.0)
        .unwrap()
        .fit(&TrainingSet {
            data: &data,
            rows: &rows,
        })
        .unwrap();
    let got = coefficients(fit.as_ref());
    let expected = [64.45667065898179, -1.345606420845279, -0.25977673433695386];
    for (g, e) in got.iter().zip(expected) {
        assert_relative_eq!(*g, e, max_relative = 1e-12);
    }
    assert_eq!(
        fit.coefficients()
            .iter()
            .map(|(n, _)| n.as_str())
            .collect::<Vec<_>>(),
        vec!["(intercept)", "INC", "HOVAL"]
    );
}

#[test]
fn a_zero_penalty_is_least_squares() {
    // REFERENCES.md §2.2 [COMP statsmodels 0.15.0]: OLS CRIME ~ 1 + INC + HOVAL.
    let data = columbus();
    let rows = all_rows(&data);
    let fit = Ridge::new(0.0)
        .unwrap()
        .fit(&TrainingSet {
            data: &data,
            rows: &rows,
        })
        .unwrap();
    let expected = [68.61896109502548, -1.5973108340847058, -0.2739314781716756];
    for (g, e) in coefficients(fit.as_ref()).iter().zip(expected) {
        assert_relative_eq!(*g, e, max_relative = 1e-12);
    }
}

/// The closed form w = (ZᵀZ + λI)⁻¹Zᵀỹ on the training rows, standardised
/// with their own means and population SDs, solved by LU (a different
/// algorithm from the module's QR of the augmented triangle).
fn closed_form(data: &Dataset, rows: &[u32], penalty: f64) -> Vec<f64> {
    let m = data.n_features();
    let n = rows.len() as f64;
    let column = |j: usize| -> Vec<f64> {
        rows.iter()
            .map(|&i| data.features_of(i as usize)[j])
            .collect()
    };
    let mut means = Vec::new();
    let mut sds = Vec::new();
    let mut z = DMatrix::zeros(rows.len(), m);
    for j in 0..m {
        let values = column(j);
        let mean = values.iter().sum::<f64>() / n;
        let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n).sqrt();
        for (i, v) in values.iter().enumerate() {
            z[(i, j)] = (v - mean) / sd;
        }
        means.push(mean);
        sds.push(sd);
    }
    let y: Vec<f64> = rows.iter().map(|&i| data.target[i as usize]).collect();
    let y_mean = y.iter().sum::<f64>() / n;
    let yc = DVector::from_iterator(y.len(), y.iter().map(|v| v - y_mean));
    let gram = z.transpose() * &z + DMatrix::identity(m, m) * penalty;
    let w = gram.lu().solve(&(z.transpose() * yc)).unwrap();
    let mut out = vec![y_mean];
    for j in 0..m {
        let slope = w[j] / sds[j];
        out[0] -= slope * means[j];
        out.push(slope);
    }
    out
}

#[test]
fn every_fold_standardises_on_its_own_training_units() {
    // Features whose spread differs between the halves, so standardising on
    // all units would give other coefficients.
    let n = 60;
    let rows: Vec<Vec<f64>> = (0..n)
        .map(|i| {
            let t = i as f64;
            let spread = if i < 30 { 1.0 } else { 5.0 };
            vec![spread * (t * 0.7).sin(), (t * 0.3).cos() + 0.01 * t]
        })
        .collect();
    let target: Vec<f64> = rows
        .iter()
        .enumerate()
        .map(|(i, r)| 1.0 + 2.0 * r[0] - r[1] + 0.3 * ((i * 7 % 11) as f64 - 5.0))
        .collect();
    let points: Vec<[f64; 2]> = (0..n).map(|i| [i as f64, 0.0]).collect();
    let data = table_dataset(&["a", "b"], &rows, &target, &points);
    let folds = FoldSet::plain(3, (0..n).map(|i| (i / 20) as u32).collect());
    let ridge = Ridge::new(7.5).unwrap();
    let fits = ridge.fit_folds(&data, &folds).unwrap();
    for (fold, fit) in fits.iter().enumerate() {
        let training: Vec<u32> = (0..n as u32)
            .filter(|&i| folds.fold_of[i as usize] as usize != fold)
            .collect();
        let expected = closed_form(&data, &training, 7.5);
        let got = coefficients(fit.as_ref().unwrap().as_ref());
        for (g, e) in got.iter().zip(&expected) {
            assert_relative_eq!(*g, *e, max_relative = 1e-10);
        }
    }
}

#[test]
fn a_feature_constant_on_the_training_units_is_named() {
    let rows: Vec<Vec<f64>> = (0..8)
        .map(|i| vec![if i < 4 { 3.0 } else { i as f64 }, (i * i) as f64])
        .collect();
    let target: Vec<f64> = (0..8).map(|i| i as f64).collect();
    let data = table_dataset(&["flat", "b"], &rows, &target, &[[0.0, 0.0]; 8]);
    let folds = FoldSet::plain(2, vec![0, 0, 0, 0, 1, 1, 1, 1]);
    let fits = Ridge::new(1.0).unwrap().fit_folds(&data, &folds).unwrap();
    match fits[1].as_ref().map(|_| ()).unwrap_err() {
        FitError::Constant { feature, value } => {
            assert_eq!(feature, "flat");
            assert_relative_eq!(*value, 3.0, max_relative = 1e-12);
        }
        other => panic!("{other}"),
    }
}

#[test]
fn the_penalty_is_required_and_bounded() {
    assert!(build(&Options::new())
        .err()
        .unwrap()
        .to_string()
        .contains("--penalty"));
    assert!(Ridge::new(-1.0).is_err());
    assert!(Ridge::new(f64::NAN).is_err());
}
