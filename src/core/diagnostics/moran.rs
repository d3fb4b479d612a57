//! Global Moran's I and its analytic inference: moments under normality and
//! under randomisation, and the moments for least-squares residuals.
//!
//! With `z_i = y_i − ȳ`, n units and weights `w_ij` (Moran, P. A. P. (1950).
//! Notes on continuous stochastic phenomena. *Biometrika* 37: 17–23):
//!
//! `I = (n/S0) · Σ_i Σ_j w_ij z_i z_j / Σ_i z_i²`, and `E[I] = −1/(n−1)`.
//!
//! Variances (Cliff, A. D. & Ord, J. K. (1981). *Spatial Processes: Models &
//! Applications*. London: Pion), with S0, S1, S2 of
//! [`WeightSums`] and the sample kurtosis `b2 = n Σz⁴ / (Σz²)²`:
//!
//! - normality: `Var_N = (n²S1 − nS2 + 3S0²) / ((n²−1) S0²) − E[I]²`;
//! - randomisation: `Var_R = [n((n²−3n+3)S1 − nS2 + 3S0²) − b2((n²−n)S1 −
//!   2nS2 + 6S0²)] / ((n−1)(n−2)(n−3) S0²) − E[I]²` (the exact variance over
//!   all permutations of the values).
//!
//! For least-squares residuals `e = My`, `M = I − X(XᵀX)⁻¹Xᵀ` with k columns
//! in X (Cliff & Ord 1981; Anselin, L. (1988). *Spatial Econometrics*.
//! Kluwer): `I = (n/S0) eᵀWe / eᵀe`, `E[I] = (n/S0) tr(MW)/(n−k)` and
//! `Var[I] = (n/S0)² [tr(MWMWᵀ) + tr(MWMW) + (tr MW)²] / ((n−k)(n−k+2)) −
//! E[I]²`. These traces are computed from a thin QR factor Q of X (so
//! `X(XᵀX)⁻¹Xᵀ = QQᵀ`) and the sparse W, never an n × n matrix:
//! O(links · k + n k²) time, O(n k) memory.
//!
//! z-values are `(I − E[I]) / √Var`, and p-values are two-sided,
//! `2·P(Z > |z|)`. Islands (units without neighbours) are kept: they count in
//! n and Σz² but contribute no pair (see [`weights`](super::weights)).

use nalgebra::DMatrix;
use serde::Serialize;

use super::weights::{WeightSums, Weights};
use super::{check_finite, check_length, check_units, normal_two_sided, Caveat, DiagnosticsError};

/// Below this many units the normal approximation is flagged (common
/// practice: n ≳ 30–50).
pub const NORMAL_APPROXIMATION_MIN_UNITS: usize = 30;

/// Moments and a z-test of I under one null hypothesis.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Inference {
    /// `E[I]` under the null.
    pub expected: f64,
    /// `Var[I]` under the null.
    pub variance: f64,
    /// `(I − E[I]) / √Var`.
    pub z: f64,
    /// Two-sided normal p-value `2·P(Z > |z|)`.
    pub p_two_sided: f64,
}

impl Inference {
    pub(crate) fn new(statistic: f64, expected: f64, variance: f64) -> Inference {
        let z = (statistic - expected) / variance.sqrt();
        Inference {
            expected,
            variance,
            z,
            p_two_sided: normal_two_sided(z),
        }
    }
}

/// Global Moran's I of a set of values with its analytic inference.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Moran {
    /// Number of units (islands included).
    pub n: usize,
    /// Units without neighbours.
    pub islands: usize,
    /// S0, S1, S2 of the weights.
    pub sums: WeightSums,
    /// Moran's I.
    pub statistic: f64,
    /// Sample kurtosis `b2 = n Σz⁴ / (Σz²)²` used under randomisation.
    pub kurtosis: f64,
    /// Moments under the normality assumption.
    pub normality: Inference,
    /// Moments under randomisation (all permutations equally likely).
    pub randomisation: Inference,
    /// Warnings: few units, islands, mostly islands.
    pub caveats: Vec<Caveat>,
}

/// Centred values `y − ȳ` after the common checks.
pub(crate) fn centred(
    what: &'static str,
    weights_n: usize,
    values: &[f64],
) -> Result<Vec<f64>, DiagnosticsError> {
    check_length(what, weights_n, values.len())?;
    check_finite(what, values)?;
    let n = values.len();
    check_units("Moran's I (variance under randomisation)", 4, n)?;
    let mean = values.iter().sum::<f64>() / n as f64;
    let z: Vec<f64> = values.iter().map(|v| v - mean).collect();
    if z.iter().all(|&d| d == 0.0) {
        return Err(DiagnosticsError::ConstantValues {
            what,
            n,
            value: values[0],
        });
    }
    Ok(z)
}

/// Refuses weights with S0 = 0 and lists caveats about n and islands.
pub(crate) fn weights_caveats(
    weights: &Weights,
    sums: &WeightSums,
) -> Result<Vec<Caveat>, DiagnosticsError> {
    let n = weights.n();
    if sums.s0 <= 0.0 {
        return Err(DiagnosticsError::NoLinks {
            n,
            hint: "use a longer distance band, k nearest neighbours, or contiguity",
        });
    }
    let mut caveats = Vec::new();
    if n < NORMAL_APPROXIMATION_MIN_UNITS {
        caveats.push(Caveat::FewUnits {
            n,
            minimum: NORMAL_APPROXIMATION_MIN_UNITS,
        });
    }
    let islands = weights.islands();
    if 2 * islands > n {
        caveats.push(Caveat::MostlyIslands { count: islands, n });
    } else if islands > 0 {
        caveats.push(Caveat::Islands { count: islands, n });
    }
    Ok(caveats)
}

/// Variance of I under normality (Cliff & Ord 1981), given `E[I]`.
pub(crate) fn variance_normality(n: f64, sums: &WeightSums, expected: f64) -> f64 {
    let WeightSums { s0, s1, s2 } = *sums;
    (n * n * s1 - n * s2 + 3.0 * s0 * s0) / ((n * n - 1.0) * s0 * s0) - expected * expected
}

/// Variance of I under randomisation (Cliff & Ord 1981), given `E[I]` and b2.
pub(crate) fn variance_randomisation(
    n: f64,
    sums: &WeightSums,
    kurtosis: f64,
    expected: f64,
) -> f64 {
    let WeightSums { s0, s1, s2 } = *sums;
    let a = n * ((n * n - 3.0 * n + 3.0) * s1 - n * s2 + 3.0 * s0 * s0);
    let b = kurtosis * ((n * n - n) * s1 - 2.0 * n * s2 + 6.0 * s0 * s0);
    (a - b) / ((n - 1.0) * (n - 2.0) * (n - 3.0) * s0 * s0) - expected * expected
}

/// `b2 = n Σz⁴ / (Σz²)²` of centred values.
pub(crate) fn kurtosis(z: &[f64]) -> f64 {
    let m2: f64 = z.iter().map(|v| v * v).sum();
    let m4: f64 = z.iter().map(|v| v.powi(4)).sum();
    z.len() as f64 * m4 / (m2 * m2)
}

/// Global Moran's I of `values` (one per unit, in the weights' order) with
/// moments and z-tests under normality and randomisation.
///
/// # Complexity
/// O(links · log(max degree)) for the weight sums, O(links) for I.
///
/// # Errors
/// [`DiagnosticsError::LengthMismatch`], [`DiagnosticsError::NonFinite`],
/// [`DiagnosticsError::TooFewUnits`] (n < 4, where Var_R is undefined),
/// [`DiagnosticsError::ConstantValues`], [`DiagnosticsError::NoLinks`].
pub fn moran(weights: &Weights, values: &[f64]) -> Result<Moran, DiagnosticsError> {
    let z = centred("values", weights.n(), values)?;
    let sums = weights.sums();
    let caveats = weights_caveats(weights, &sums)?;
    let n = z.len() as f64;
    let sum_sq: f64 = z.iter().map(|v| v * v).sum();
    let statistic = n / sums.s0 * weights.quadratic_form(&z) / sum_sq;
    let expected = -1.0 / (n - 1.0);
    let b2 = kurtosis(&z);
    Ok(Moran {
        n: z.len(),
        islands: weights.islands(),
        sums,
        statistic,
        kurtosis: b2,
        normality: Inference::new(statistic, expected, variance_normality(n, &sums, expected)),
        randomisation: Inference::new(
            statistic,
            expected,
            variance_randomisation(n, &sums, b2, expected),
        ),
        caveats,
    })
}

/// Moran's I of least-squares residuals with the regression moments.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ResidualMoran {
    /// Number of units.
    pub n: usize,
    /// Number of columns of the design (intercept included), k.
    pub regressors: usize,
    /// `I = (n/S0) eᵀWe / eᵀe` (residuals not re-centred).
    pub statistic: f64,
    /// `tr(MW)`.
    pub trace_mw: f64,
    /// `E[I]`, `Var[I]`, z and two-sided p under the regression null.
    pub inference: Inference,
    /// Warnings: few units, islands, mostly islands.
    pub caveats: Vec<Caveat>,
}

/// Moran's I of OLS residuals `e = My` of the design `X` (n × k, intercept
/// column included when the model has one), with the regression-residual
/// moments (Cliff & Ord 1981). The residuals must be the least-squares
/// residuals of exactly this design: the moments assume `Xᵀe = 0`, which is
/// checked.
///
/// The plain moments (`E[I]` = −1/(n−1)) are wrong for residuals: on the
/// Columbus crime regression's residuals (Anselin 1988, queen contiguity)
/// they give z = 2.625 instead of 2.839.
///
/// # Complexity
/// O(links · k + n k²) time and O(n k) memory.
///
/// # Errors
/// As [`moran`]; also [`DiagnosticsError::Design`] when X has not n rows, has
/// k ≥ n − 1 columns, is rank-deficient, or the residuals are not orthogonal
/// to its columns (relative tolerance 1e-6).
pub fn moran_residuals(
    weights: &Weights,
    residuals: &[f64],
    design: &DMatrix<f64>,
) -> Result<ResidualMoran, DiagnosticsError> {
    let n = weights.n();
    check_length("residuals", n, residuals.len())?;
    check_finite("residuals", residuals)?;
    check_finite("design", design.as_slice())?;
    let (rows, k) = design.shape();
    if rows != n {
        return Err(DiagnosticsError::Design(format!(
            "{rows} rows for {n} units"
        )));
    }
    if k == 0 || k + 2 > n {
        return Err(DiagnosticsError::Design(format!(
            "{k} columns for {n} units; the moments need 1 ≤ k ≤ n − 2"
        )));
    }
    let sums = weights.sums();
    let caveats = weights_caveats(weights, &sums)?;
    let sum_sq: f64 = residuals.iter().map(|v| v * v).sum();
    if sum_sq == 0.0 {
        return Err(DiagnosticsError::ConstantValues {
            what: "residuals",
            n,
            value: 0.0,
        });
    }
    let q = orthonormal_basis(design)?;
    let residual_norm = sum_sq.sqrt();
    for c in 0..k {
        let dot: f64 = (0..n).map(|i| q[(i, c)] * residuals[i]).sum();
        if dot.abs() > 1e-6 * residual_norm {
            return Err(DiagnosticsError::Design(format!(
                "the residuals are not least-squares residuals of this design \
                 (|Qᵀe| = {:.3e} on column {c}, |e| = {residual_norm:.3e}); the \
                 regression moments apply to OLS residuals only",
                dot.abs()
            )));
        }
    }
    let traces = residual_traces(weights, &q);
    let nf = n as f64;
    let kf = k as f64;
    let scale = nf / sums.s0;
    let statistic = scale * weights.quadratic_form(residuals) / sum_sq;
    let expected = scale * traces.mw / (nf - kf);
    let variance = scale * scale * (traces.mwmwt + traces.mwmw + traces.mw * traces.mw)
        / ((nf - kf) * (nf - kf + 2.0))
        - expected * expected;
    Ok(ResidualMoran {
        n,
        regressors: k,
        statistic,
        trace_mw: traces.mw,
        inference: Inference::new(statistic, expected, variance),
        caveats,
    })
}

/// Q of a thin Householder QR of X (n × k, orthonormal columns spanning X).
fn orthonormal_basis(design: &DMatrix<f64>) -> Result<DMatrix<f64>, DiagnosticsError> {
    let (n, k) = design.shape();
    // Scale columns to unit norm first, so the rank test does not depend on
    // the units of the features.
    let mut scaled = design.clone();
    for c in 0..k {
        let norm = scaled.column(c).norm();
        if norm == 0.0 {
            return Err(DiagnosticsError::Design(format!("column {c} is all zero")));
        }
        scaled.column_mut(c).unscale_mut(norm);
    }
    let qr = scaled.qr();
    let r = qr.r();
    let tolerance = (n.max(k) as f64) * 10.0 * f64::EPSILON;
    if let Some(c) = (0..k).find(|&c| r[(c, c)].abs() <= tolerance) {
        return Err(DiagnosticsError::Design(format!(
            "rank-deficient: column {c} is a linear combination of the columns before it"
        )));
    }
    Ok(qr.q())
}

/// `tr(MW)`, `tr(MWMW)` and `tr(MWMWᵀ)` for `M = I − QQᵀ`.
struct Traces {
    mw: f64,
    mwmw: f64,
    mwmwt: f64,
}

/// With `A = QᵀWQ` (k × k), `P = WQ` and `R = WᵀQ` (n × k):
/// `tr(MW) = tr W − tr A`, `tr(MWMW) = tr(WW) − 2 Σ(R∘P) + tr(A²)`,
/// `tr(MWMWᵀ) = Σ w² − ‖R‖² − ‖P‖² + ‖A‖²` (Frobenius norms).
fn residual_traces(weights: &Weights, q: &DMatrix<f64>) -> Traces {
    let (n, k) = q.shape();
    let mut p = DMatrix::<f64>::zeros(n, k);
    let mut r = DMatrix::<f64>::zeros(n, k);
    for c in 0..k {
        for i in 0..n {
            let w = weights.row_weight(i);
            let mut sum = 0.0;
            for &j in weights.neighbours(i) {
                sum += q[(j as usize, c)];
                r[(j as usize, c)] += w * q[(i, c)];
            }
            p[(i, c)] = w * sum;
        }
    }
    let a = q.transpose() * &p;
    let mut trace_ww = 0.0;
    let mut sum_w2 = 0.0;
    weights.for_each_link(|_, _, w_ij, w_ji| {
        trace_ww += w_ij * w_ji;
        sum_w2 += w_ij * w_ij;
    });
    // No self links, so tr W = 0.
    let mw = -a.trace();
    let rp: f64 = r.iter().zip(p.iter()).map(|(x, y)| x * y).sum();
    let mwmw = trace_ww - 2.0 * rp + (&a * &a).trace();
    let mwmwt = sum_w2 - r.norm_squared() - p.norm_squared() + a.norm_squared();
    Traces { mw, mwmw, mwmwt }
}

#[cfg(test)]
mod tests;
