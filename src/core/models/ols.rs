//! Ordinary least squares with intercept, solved by Householder QR.
//!
//! The design `X = [1, x_1, …, x_m]` is scaled to unit column norms, factored
//! `X = QR` by Householder reflections (nalgebra), and `Rβ = Qᵀy` is solved by
//! back-substitution. `XᵀX` is never formed or inverted: forming it squares the
//! condition number, which loses about half the digits on the NIST StRD Longley
//! problem (McCullough, B. D. (1998). Assessing the reliability of statistical
//! software: Part I. *The American Statistician* 52(4): 358–366).
//!
//! # Rank
//! With unit-norm columns, a diagonal entry `|R_jj| <= max(n, p) · 10 · ε`
//! means column `j` is (numerically) a linear combination of the columns before
//! it; the fit is refused and the message names that feature, never NaN.
//! A constant feature is reported as such, and fewer units than coefficients is
//! refused before factoring.
//!
//! # Complexity
//! O(n p²) time and O(n p) memory for n units and p coefficients.

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

use super::linear;
use super::{model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::folds::FoldSet;
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::core::units::Dataset;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "ols",
    about: "ordinary least squares with intercept",
    options: &[],
    build,
};

/// Options of OLS: none.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct OlsParams {}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let _: OlsParams = model_params("ols", ENTRY.options, options)?;
    Ok(Box::new(Ols))
}

/// The OLS family.
pub struct Ols;

/// An OLS fit with the statistics NIST StRD certifies.
#[derive(Debug, Clone)]
pub struct OlsFit {
    /// Intercept first, then one coefficient per feature.
    pub coefficients: Vec<f64>,
    /// Standard errors `s·sqrt(diag((XᵀX)⁻¹))`, computed from `R⁻¹`.
    pub standard_errors: Vec<f64>,
    /// Residual standard deviation `sqrt(SSR / (n - p))` (NaN when n = p).
    pub residual_sd: f64,
    /// `1 - SSR/SST` (centred).
    pub r_squared: f64,
}

impl Model for Ols {
    fn name(&self) -> &'static str {
        "ols"
    }

    fn family(&self) -> Family {
        Family::Regression
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({ "intercept": true, "solver": "householder_qr" })
    }

    fn describe(&self) -> String {
        "ordinary least squares with intercept".to_string()
    }

    fn min_training_units(&self, n_features: usize) -> usize {
        n_features + 1
    }

    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        linear::fit_training(training.data, training.rows, &linear::solve)
    }

    fn fit_folds(
        &self,
        data: &Dataset,
        folds: &FoldSet,
    ) -> Option<Vec<Result<Box<dyn Fitted>, FitError>>> {
        Some(linear::fit_every_fold(data, folds, &linear::solve))
    }
}

fn predict(coefficients: &[f64], features: &[f64]) -> f64 {
    coefficients[0]
        + coefficients[1..]
            .iter()
            .zip(features)
            .map(|(b, x)| b * x)
            .sum::<f64>()
}

/// The QR solution: coefficients, and what the statistics need.
struct Solution {
    coefficients: Vec<f64>,
    /// The p × p upper triangle of R of the column-scaled design.
    r_square: DMatrix<f64>,
    /// Column norms the design was divided by.
    scales: Vec<f64>,
}

/// Fits `y = Xβ` where the first column of `design` is the intercept, with the
/// statistics NIST StRD certifies. `feature_names` names columns 1.. for messages.
///
/// # Errors
/// Fewer rows than columns, a constant feature, or a rank-deficient design; the
/// error names the feature at fault.
pub fn fit_ols(
    design: DMatrix<f64>,
    target: DVector<f64>,
    feature_names: &[String],
) -> Result<OlsFit, FitError> {
    let (n, p) = design.shape();
    let original = design.clone();
    let solution = solve(design, &target, feature_names)?;
    let ssr: f64 = (0..n)
        .map(|i| {
            let row: Vec<f64> = (1..p).map(|j| original[(i, j)]).collect();
            (target[i] - predict(&solution.coefficients, &row)).powi(2)
        })
        .sum();
    let mean = target.mean();
    let sst: f64 = target.iter().map(|v| (v - mean).powi(2)).sum();
    let residual_sd = if n > p {
        (ssr / (n - p) as f64).sqrt()
    } else {
        f64::NAN
    };
    let r_inverse = solution
        .r_square
        .solve_upper_triangular(&DMatrix::identity(p, p))
        .ok_or_else(|| FitError::Collinear {
            term: "the design".into(),
            earlier: Vec::new(),
            features: feature_names.to_vec(),
        })?;
    let standard_errors = (0..p)
        .map(|j| residual_sd * r_inverse.row(j).norm() / solution.scales[j])
        .collect();
    Ok(OlsFit {
        coefficients: solution.coefficients,
        standard_errors,
        residual_sd,
        r_squared: 1.0 - ssr / sst,
    })
}

/// Checks the design, scales its columns, factors it and solves for β.
fn solve(
    mut design: DMatrix<f64>,
    target: &DVector<f64>,
    feature_names: &[String],
) -> Result<Solution, FitError> {
    let (n, p) = design.shape();
    let name = |j: usize| linear::term_name(feature_names, j);
    if n < p {
        return Err(linear::too_few_units(n, p, feature_names));
    }
    for j in 1..p {
        let column = design.column(j);
        let first = column[0];
        if column.iter().all(|&value| value == first) {
            return Err(FitError::Constant {
                feature: feature_names.get(j - 1).cloned().unwrap_or_default(),
                value: first,
            });
        }
    }
    let mut scales = Vec::with_capacity(p);
    for j in 0..p {
        let norm = design.column(j).norm();
        if norm == 0.0 || !norm.is_finite() {
            return Err(FitError::NotFinite { term: name(j) });
        }
        design.column_mut(j).unscale_mut(norm);
        scales.push(norm);
    }
    let qr = design.qr();
    let r = qr.r();
    let tolerance = (n.max(p) as f64) * 10.0 * f64::EPSILON;
    for j in 0..p {
        if r[(j, j)].abs() <= tolerance {
            return Err(FitError::Collinear {
                term: name(j),
                earlier: (0..j).map(name).collect(),
                features: feature_names.to_vec(),
            });
        }
    }
    let mut qty = target.clone();
    qr.q_tr_mul(&mut qty);
    let head = qty.rows(0, p).into_owned();
    let r_square = r.view((0, 0), (p, p)).into_owned();
    let scaled_beta =
        r_square
            .solve_upper_triangular(&head)
            .ok_or_else(|| FitError::Collinear {
                term: "the design".into(),
                earlier: Vec::new(),
                features: feature_names.to_vec(),
            })?;
    let coefficients = (0..p).map(|j| scaled_beta[j] / scales[j]).collect();
    Ok(Solution {
        coefficients,
        r_square,
        scales,
    })
}

#[cfg(test)]
mod tests;
