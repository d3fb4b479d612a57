//! Ridge regression (Hoerl, A. E. & Kennard, R. W. (1970), Ridge regression:
//! biased estimation for nonorthogonal problems, *Technometrics* 12(1): 55–67).
//!
//! # The penalty and its scaling
//! On each fold, with `z_j` the feature `x_j` standardised on the fold's
//! *training units only* (their mean and population standard deviation,
//! ddof = 0; test units never enter), the fit minimises
//!
//! ```text
//! Σ_i (y_i − b₀ − Σ_j w_j z_ij)²  +  L · Σ_j w_j²
//! ```
//!
//! over the training units: the intercept `b₀` is not penalised, and the sum
//! of squares is *not* divided by the number of units, so `L` weighs less
//! against a larger fold. This is scikit-learn's `Ridge(alpha=L)` on those
//! z-scores (REFERENCES.md §4). `L = 0` is least squares. Coefficients are
//! reported on the original scale: slope `w_j / sd_j`, intercept
//! `ȳ − Σ_j slope_j x̄_j` (training means).
//!
//! # Method
//! The fold's training triangle `R` of `[1, x', y']` ([`linear`], shared with
//! `ols`, merged across folds) gives the training means (row 0 over `R₀₀`)
//! and, in its trailing block `T`, a triangle of the *centred* training
//! columns (`TᵀT` is their cross-product matrix). The ridge solution is the
//! least-squares solution of the augmented system
//! `[T_x D⁻¹; √L·I] w ≈ [t_y; 0]` (`D` the training SDs), solved by
//! Householder QR, so the normal equations are never formed.
//!
//! # Complexity
//! As [`linear`], plus O(p³) per fold.

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

use super::linear::{self, Standardise, Triangle};
use super::{model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::folds::FoldSet;
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::core::units::Dataset;
use crate::error::Error;

/// Largest `--penalty`.
pub const MAX_PENALTY: f64 = 1e12;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "ridge",
    about: "ridge regression: features standardised per training fold, intercept not penalised",
    options: &["penalty"],
    build,
};

/// Options of ridge.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct RidgeParams {
    /// `L` of the module doc, 0 to [`MAX_PENALTY`]; required.
    pub penalty: Option<f64>,
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: RidgeParams = model_params("ridge", ENTRY.options, options)?;
    let penalty = params.penalty.ok_or_else(|| {
        Error::Usage(
            "--model ridge needs --penalty L (0 or more; L multiplies the sum of squared slopes of the \
             standardised features, against the unscaled sum of squared residuals)"
                .into(),
        )
    })?;
    Ridge::new(penalty).map(|r| Box::new(r) as Box<dyn Model>)
}

/// The ridge family.
pub struct Ridge {
    penalty: f64,
}

impl Ridge {
    /// Ridge with penalty `L`.
    ///
    /// # Errors
    /// [`Error::Usage`] outside 0 to [`MAX_PENALTY`].
    pub fn new(penalty: f64) -> Result<Ridge, Error> {
        if !(penalty.is_finite() && (0.0..=MAX_PENALTY).contains(&penalty)) {
            return Err(Error::Usage(format!(
                "--penalty must be a number from 0 to {MAX_PENALTY}, got {penalty}"
            )));
        }
        Ok(Ridge { penalty })
    }

    /// The coefficients of this penalty (see [`solve`]).
    fn coefficients(
        &self,
    ) -> impl Fn(&Triangle, &Standardise, &[usize], &[String]) -> Result<Vec<f64>, FitError> + Send + Sync
    {
        let penalty = self.penalty;
        move |triangle: &Triangle, standardise: &Standardise, used: &[usize], names: &[String]| {
            solve(triangle, standardise, used, names, penalty)
        }
    }
}

impl Model for Ridge {
    fn name(&self) -> &'static str {
        "ridge"
    }

    fn family(&self) -> Family {
        Family::Regression
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({
            "penalty": self.penalty,
            "intercept_penalised": false,
            "standardisation": "training fold mean and population SD (ddof 0)",
            "loss": "sum of squares, not divided by n",
        })
    }

    fn describe(&self) -> String {
        format!(
            "ridge regression, penalty {} on the squared slopes of features standardised per training fold \
             (intercept not penalised)",
            self.penalty
        )
    }

    fn min_training_units(&self, _n_features: usize) -> usize {
        2
    }

    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        linear::fit_training(training.data, training.rows, &self.coefficients())
    }

    fn fit_folds(
        &self,
        data: &Dataset,
        folds: &FoldSet,
    ) -> Option<Vec<Result<Box<dyn Fitted>, FitError>>> {
        Some(linear::fit_every_fold(data, folds, &self.coefficients()))
    }
}

/// The ridge coefficients of `[1, x'_used]` (the parametrisation of
/// [`linear::LinearFit`]) from a training triangle of `[1, x'_used, y']`.
///
/// # Errors
/// Fewer than 2 units; a feature constant on the training units; with
/// `penalty = 0`, a rank-deficient design.
pub fn solve(
    triangle: &Triangle,
    standardise: &Standardise,
    used: &[usize],
    features: &[String],
    penalty: f64,
) -> Result<Vec<f64>, FitError> {
    let r = &triangle.r;
    let width = r.ncols();
    let q = width - 2;
    let n = triangle.units;
    if n < 2 || r.nrows() == 0 {
        return Err(FitError::TooFewUnits {
            have: n,
            need: 2,
            what: "ridge".into(),
        });
    }
    if penalty == 0.0 {
        return linear::solve(triangle, standardise, used, features);
    }
    let root_n = r[(0, 0)];
    // Training means of [x', y'] and the centred triangle T = R[1.., 1..].
    let means: Vec<f64> = (1..width).map(|c| r[(0, c)] / root_n).collect();
    let rows = r.nrows().saturating_sub(1);
    let t = DMatrix::from_fn(rows, width - 1, |i, j| r[(i + 1, j + 1)]);
    let count = n as f64;
    let mut sd = Vec::with_capacity(q);
    for j in 0..q {
        let column_norm = t.column(j).norm();
        let scale = (0..r.nrows())
            .map(|i| r[(i, j + 1)].powi(2))
            .sum::<f64>()
            .sqrt();
        if column_norm.is_nan() || column_norm <= (n as f64) * 10.0 * f64::EPSILON * scale {
            let column = used[j];
            return Err(FitError::Constant {
                feature: features.get(j).cloned().unwrap_or_default(),
                value: standardise.mean[column] + standardise.scale[column] * means[j],
            });
        }
        sd.push(column_norm / count.sqrt());
    }
    let root_penalty = penalty.sqrt();
    let stack = DMatrix::from_fn(rows + q, q, |i, j| {
        if i < rows {
            t[(i, j)] / sd[j]
        } else if i - rows == j {
            root_penalty
        } else {
            0.0
        }
    });
    let rhs = DVector::from_fn(rows + q, |i, _| if i < rows { t[(i, q)] } else { 0.0 });
    let qr = stack.qr();
    let mut qty = rhs;
    qr.q_tr_mul(&mut qty);
    let upper = qr.r();
    let w = upper
        .solve_upper_triangular(&qty.rows(0, q).into_owned())
        .ok_or_else(|| FitError::Collinear {
            term: "the design".into(),
            earlier: Vec::new(),
            features: features.to_vec(),
        })?;
    // Slopes on x', then the intercept of [1, x'] through the training means.
    let mut beta = vec![means[q]; q + 1];
    for j in 0..q {
        let slope = w[j] / sd[j];
        beta[j + 1] = slope;
        beta[0] -= slope * means[j];
    }
    Ok(beta)
}

#[cfg(test)]
mod tests;
