//! Least squares for every fold of a run without a pass over the data per fold.
//!
//! # Method
//! Columns are first standardised with the means and standard deviations of
//! *all* units (`x' = (x − mean) / sd`, `y' = y − mean(y)`). This changes
//! neither the fitted values nor the predictions (an affine reparametrisation
//! with the intercept kept), but it removes the ill-conditioning that raw
//! magnitudes bring. Every set of units is then summarised by the upper
//! triangle `R` of a Householder QR factorisation of its rows `[1, x', y']`
//! (a [`Triangle`]). Triangles merge exactly: the `R` of the union of two sets
//! is the `R` of the stacked triangles (Demmel, J., Grigori, L., Hoemmen, M. &
//! Langou, J. (2012), Communication-optimal parallel and sequential QR and LU
//! factorizations, *SIAM Journal on Scientific Computing* 34(1): A206–A239:
//! "TSQR"). A fold's training triangle is therefore merged from the
//! triangles of the other folds, and the coefficients follow by
//! back-substitution, with QR's accuracy (the normal equations `XᵀX` are
//! never formed).
//!
//! - **Up to [`MERGE_FOLDS`] folds:** one pass builds each fold's triangle;
//!   each fold merges the other folds' triangles. A fold that excludes units
//!   of other folds (an exclusion buffer) rebuilds the triangles of just the
//!   folds it touches, without the excluded units.
//! - **More folds** (leave-one-out and its relatives): one triangle `R̃` of all
//!   units is downdated by the few units a fold removes (its test units and
//!   exclusions, rows `S`): with `Z = S R̃⁻¹` (triangular solves),
//!   `R̃ᵀR̃ − SᵀS = R̃ᵀ(I − ZᵀZ)R̃`, so the training triangle is `LᵀR̃` where
//!   `LLᵀ = I − ZᵀZ` (Cholesky). This is the downdating identity of Golub, G. H.
//!   & Van Loan, C. F. (2013), *Matrix Computations*, 4th ed., §6.5 (from memory
//!   for the section number). Its accuracy check: when a Cholesky pivot of
//!   `I − ZᵀZ` falls below [`DOWNDATE_PIVOT_MIN`] (the removed units carry
//!   almost all the information of some direction, so the subtraction would
//!   lose more than 8 of 16 digits) the fold is refitted from its training
//!   rows directly instead. Checked against brute-force refits in the tests.
//!
//! # Text features and other solvers
//! A fold uses the indicator columns of the text-feature levels seen in its
//! training units but the reference level ([`super::design`]): its training
//! triangle is cut to those columns by one more small QR of the selected
//! columns of `R` (`RᵀR = XᵀX` holds column by column). The solver is given
//! to [`fit_folds`]: least squares ([`solve`], for `ols`) or the ridge
//! solution (`ridge`), which reads the training means and centred cross
//! products from the same triangle.
//!
//! # Rank
//! With columns scaled to their norms over the training units, a diagonal
//! entry `|R_jj| ≤ max(n, p) · 10 · ε` means column `j` is (numerically) a
//! linear combination of the columns before it; a feature whose spread about
//! its training mean is below that tolerance is reported as constant.
//!
//! # Complexity
//! O(n p²) for the triangles plus O(k² p³) for k ≤ [`MERGE_FOLDS`] folds;
//! O(n p²) plus O(k p³) for the downdates otherwise.

use std::sync::Arc;

use nalgebra::DMatrix;

use super::design::{training_level_counts, used_columns};
use super::{FitError, Fitted, UnitView};
use crate::core::folds::FoldSet;
use crate::core::parallel::parallel_map;
use crate::core::units::Dataset;

/// Up to this many folds, training triangles are merged from fold triangles;
/// beyond it, a triangle of all units is downdated per fold.
pub const MERGE_FOLDS: usize = 64;

/// Smallest squared Cholesky pivot of `I − ZᵀZ` accepted by a downdate
/// (see the module doc).
pub const DOWNDATE_PIVOT_MIN: f64 = 1e-8;

/// Rows gathered before they are folded into a triangle.
const CHUNK: usize = 512;

/// The global standardisation of the columns.
#[derive(Debug, Clone)]
pub struct Standardise {
    /// Mean of each feature over all units.
    pub mean: Vec<f64>,
    /// Population standard deviation of each feature (1 where it is 0).
    pub scale: Vec<f64>,
    /// Mean of the target.
    pub y_mean: f64,
}

impl Standardise {
    /// The means and standard deviations of all units of `data`.
    pub fn of(data: &Dataset) -> Standardise {
        let m = data.n_features();
        let n = data.len().max(1) as f64;
        let mut mean = vec![0.0; m];
        for i in 0..data.len() {
            for (total, value) in mean.iter_mut().zip(data.features_of(i)) {
                *total += value;
            }
        }
        mean.iter_mut().for_each(|v| *v /= n);
        let mut scale = vec![0.0; m];
        for i in 0..data.len() {
            for (j, value) in data.features_of(i).iter().enumerate() {
                scale[j] += (value - mean[j]).powi(2);
            }
        }
        for value in &mut scale {
            *value = (*value / n).sqrt();
            if !(value.is_finite() && *value > 0.0) {
                *value = 1.0;
            }
        }
        let y_mean = data.target.iter().sum::<f64>() / n;
        Standardise {
            mean,
            scale,
            y_mean,
        }
    }

    /// Row `[1, x', y']` of unit `i` into `out` (length features + 2).
    fn row(&self, data: &Dataset, i: usize, out: &mut [f64]) {
        out[0] = 1.0;
        for (j, value) in data.features_of(i).iter().enumerate() {
            out[j + 1] = (value - self.mean[j]) / self.scale[j];
        }
        out[out.len() - 1] = data.target[i] - self.y_mean;
    }
}

/// The triangular factor `R` of the rows `[1, x', y']` of a set of units.
#[derive(Debug, Clone)]
pub struct Triangle {
    /// Number of units folded in.
    pub units: usize,
    /// Upper triangle, `min(units, width)` rows by `width` columns.
    pub r: DMatrix<f64>,
}

/// The `R` of a QR factorisation of `stack`, `min(rows, cols)` by `cols`.
fn r_of(stack: DMatrix<f64>) -> DMatrix<f64> {
    if stack.nrows() == 0 {
        return stack;
    }
    stack.qr().r()
}

impl Triangle {
    /// The triangle of no units.
    pub fn empty(width: usize) -> Triangle {
        Triangle {
            units: 0,
            r: DMatrix::zeros(0, width),
        }
    }

    /// The triangle of the given units.
    pub fn of_units(
        data: &Dataset,
        standardise: &Standardise,
        units: impl IntoIterator<Item = u32>,
    ) -> Triangle {
        let width = data.n_features() + 2;
        let mut triangle = Triangle::empty(width);
        let mut buffer: Vec<f64> = Vec::with_capacity(CHUNK * width);
        let mut row = vec![0.0; width];
        let mut pending = 0usize;
        for unit in units {
            standardise.row(data, unit as usize, &mut row);
            buffer.extend_from_slice(&row);
            pending += 1;
            if pending == CHUNK {
                triangle = triangle.with_rows(&buffer, pending);
                buffer.clear();
                pending = 0;
            }
        }
        if pending > 0 {
            triangle = triangle.with_rows(&buffer, pending);
        }
        triangle
    }

    /// Folds `count` row-major rows into this triangle.
    fn with_rows(self, rows: &[f64], count: usize) -> Triangle {
        let width = self.r.ncols();
        let top = self.r.nrows();
        let stack = DMatrix::from_fn(top + count, width, |i, j| {
            if i < top {
                self.r[(i, j)]
            } else {
                rows[(i - top) * width + j]
            }
        });
        Triangle {
            units: self.units + count,
            r: r_of(stack),
        }
    }

    /// The triangle of the same units with only the columns `[1, x'_used, y']`
    /// (`used`: feature indices, ascending).
    pub fn select(&self, used: &[usize]) -> Triangle {
        let width = self.r.ncols();
        if used.len() + 2 == width {
            return self.clone();
        }
        let keep: Vec<usize> = std::iter::once(0)
            .chain(used.iter().map(|&u| u + 1))
            .chain(std::iter::once(width - 1))
            .collect();
        let stack = DMatrix::from_fn(self.r.nrows(), keep.len(), |i, j| self.r[(i, keep[j])]);
        Triangle {
            units: self.units,
            r: r_of(stack),
        }
    }

    /// The triangle of the union of disjoint sets.
    pub fn merge(parts: &[&Triangle]) -> Triangle {
        let width = parts.first().map_or(0, |t| t.r.ncols());
        let rows: usize = parts.iter().map(|t| t.r.nrows()).sum();
        let mut stack = DMatrix::zeros(rows, width);
        let mut at = 0;
        for part in parts {
            let height = part.r.nrows();
            stack.rows_mut(at, height).copy_from(&part.r);
            at += height;
        }
        Triangle {
            units: parts.iter().map(|t| t.units).sum(),
            r: r_of(stack),
        }
    }

    /// The triangle with the rows of `removed` taken out by the downdate of
    /// the module doc, or None when its accuracy check fails (or this
    /// triangle is not of full rank).
    fn downdate(
        &self,
        data: &Dataset,
        standardise: &Standardise,
        removed: &[u32],
    ) -> Option<Triangle> {
        let width = self.r.ncols();
        if self.r.nrows() < width {
            return None;
        }
        let scale_y = self.r[(width - 1, width - 1)].abs();
        let y_norm: f64 = (0..width)
            .map(|i| self.r[(i, width - 1)].powi(2))
            .sum::<f64>()
            .sqrt();
        if scale_y.is_nan() || scale_y <= 1e-8 * y_norm {
            return None;
        }
        let mut m = DMatrix::<f64>::identity(width, width);
        let mut row = vec![0.0; width];
        let mut z = vec![0.0; width];
        for &unit in removed {
            standardise.row(data, unit as usize, &mut row);
            // Forward substitution with Rᵀ: z = R⁻ᵀ row.
            for i in 0..width {
                let mut value = row[i];
                for (k, zk) in z.iter().enumerate().take(i) {
                    value -= self.r[(k, i)] * zk;
                }
                let pivot = self.r[(i, i)];
                if pivot == 0.0 {
                    return None;
                }
                z[i] = value / pivot;
            }
            for a in 0..width {
                for b in 0..=a {
                    m[(a, b)] -= z[a] * z[b];
                }
            }
        }
        // Cholesky M = L Lᵀ on the lower triangle; the last pivot (the
        // target's residual) may be zero.
        let mut l = DMatrix::<f64>::zeros(width, width);
        for j in 0..width {
            let mut d = m[(j, j)];
            for k in 0..j {
                d -= l[(j, k)] * l[(j, k)];
            }
            if j + 1 < width && (d.is_nan() || d < DOWNDATE_PIVOT_MIN) {
                return None;
            }
            let pivot = d.max(0.0).sqrt();
            l[(j, j)] = pivot;
            for i in j + 1..width {
                let mut value = m[(i, j)];
                for k in 0..j {
                    value -= l[(i, k)] * l[(j, k)];
                }
                l[(i, j)] = if pivot > 0.0 { value / pivot } else { 0.0 };
            }
        }
        Some(Triangle {
            units: self.units - removed.len(),
            r: l.transpose() * &self.r,
        })
    }
}

/// A least-squares fit of `p` coefficients (intercept and features) on `have`
/// units, fewer than `p`.
pub(crate) fn too_few_units(have: usize, p: usize, features: &[String]) -> FitError {
    FitError::TooFewUnits {
        have,
        need: p,
        what: format!(
            "least squares with an intercept and {} features ({})",
            p - 1,
            features.join(", ")
        ),
    }
}

/// The names of the terms: the intercept, then the features.
pub fn term_name(features: &[String], j: usize) -> String {
    if j == 0 {
        "the intercept".to_string()
    } else {
        features
            .get(j - 1)
            .map(|name| format!("feature {name}"))
            .unwrap_or_else(|| format!("column {j}"))
    }
}

/// The standardised coefficients of the least-squares fit a triangle of the
/// columns `[1, x'_used, y']` holds (`features`: the names of the used features).
///
/// # Errors
/// Too few units, a constant feature, a rank-deficient design.
pub fn solve(
    triangle: &Triangle,
    standardise: &Standardise,
    used: &[usize],
    features: &[String],
) -> Result<Vec<f64>, FitError> {
    let width = triangle.r.ncols();
    let p = width - 1;
    let n = triangle.units;
    if n < p || triangle.r.nrows() < p {
        return Err(too_few_units(n, p, features));
    }
    let r = &triangle.r;
    let tolerance = (n.max(p) as f64) * 10.0 * f64::EPSILON;
    let norms: Vec<f64> = (0..p)
        .map(|j| {
            (0..r.nrows())
                .map(|i| r[(i, j)].powi(2))
                .sum::<f64>()
                .sqrt()
        })
        .collect();
    for (j, norm) in norms.iter().enumerate() {
        if !(norm.is_finite() && *norm > 0.0) {
            return Err(FitError::NotFinite {
                term: term_name(features, j),
            });
        }
    }
    for j in 1..p {
        let spread: f64 = (1..r.nrows().min(width))
            .map(|i| r[(i, j)].powi(2))
            .sum::<f64>()
            .sqrt();
        if spread <= tolerance * norms[j] {
            let mean = r[(0, j)] / r[(0, 0)];
            let column = used[j - 1];
            return Err(FitError::Constant {
                feature: features.get(j - 1).cloned().unwrap_or_default(),
                value: standardise.mean[column] + standardise.scale[column] * mean,
            });
        }
    }
    for j in 0..p {
        if r[(j, j)].abs() <= tolerance * norms[j] {
            return Err(FitError::Collinear {
                term: term_name(features, j),
                earlier: (0..j).map(|i| term_name(features, i)).collect(),
                features: features.to_vec(),
            });
        }
    }
    let mut beta = vec![0.0; p];
    for j in (0..p).rev() {
        let mut value = r[(j, p)];
        for k in j + 1..p {
            value -= r[(j, k)] * beta[k];
        }
        beta[j] = value / r[(j, j)];
    }
    Ok(beta)
}

/// A linear fit on standardised columns.
#[derive(Debug, Clone)]
pub struct LinearFit {
    standardise: Arc<Standardise>,
    features: Arc<Vec<String>>,
    /// Coefficients of `[1, x']` (0 for unused columns).
    beta: Vec<f64>,
    /// The feature columns estimated.
    used: Vec<usize>,
}

impl LinearFit {
    /// A fit from the standardised coefficients of `[1, x'_used]`.
    pub fn new(
        standardise: Arc<Standardise>,
        features: Arc<Vec<String>>,
        coefficients: &[f64],
        used: &[usize],
    ) -> LinearFit {
        let mut beta = vec![0.0; features.len() + 1];
        beta[0] = coefficients[0];
        for (k, &column) in used.iter().enumerate() {
            beta[column + 1] = coefficients[k + 1];
        }
        LinearFit {
            standardise,
            features,
            beta,
            used: used.to_vec(),
        }
    }

    /// The coefficients on the original scale, intercept first.
    pub fn original_coefficients(&self) -> Vec<f64> {
        let s = &self.standardise;
        let mut coefficients = Vec::with_capacity(self.beta.len());
        let mut intercept = s.y_mean + self.beta[0];
        for j in 0..s.mean.len() {
            let slope = self.beta[j + 1] / s.scale[j];
            intercept -= slope * s.mean[j];
            coefficients.push(slope);
        }
        coefficients.insert(0, intercept);
        coefficients
    }
}

impl Fitted for LinearFit {
    fn predict(&self, unit: &UnitView<'_>) -> f64 {
        let s = &self.standardise;
        let mut value = s.y_mean + self.beta[0];
        for (j, x) in unit.features.iter().enumerate() {
            value += self.beta[j + 1] * (x - s.mean[j]) / s.scale[j];
        }
        value
    }

    fn coefficients(&self) -> Vec<(String, f64)> {
        let all = self.original_coefficients();
        std::iter::once(("(intercept)".to_string(), all[0]))
            .chain(
                self.used
                    .iter()
                    .map(|&c| (self.features[c].clone(), all[c + 1])),
            )
            .collect()
    }
}

/// Fits a triangle of the columns `[1, x'_used, y']` into a fitted model.
pub type Solver<'s> = dyn Fn(&Triangle, &[usize]) -> Result<Box<dyn Fitted>, FitError> + Sync + 's;

/// The standardised coefficients of `[1, x'_used]` from a triangle of
/// `[1, x'_used, y']`, given the used columns and their names: [`solve`]
/// (least squares) or the ridge solution.
pub type Coefficients = dyn Fn(&Triangle, &Standardise, &[usize], &[String]) -> Result<Vec<f64>, FitError>
    + Send
    + Sync;

/// The solver of [`fit_folds`] that turns `coefficients` into a [`LinearFit`].
pub fn solver<'s>(
    data: &Dataset,
    standardise: Arc<Standardise>,
    coefficients: &'s Coefficients,
) -> Box<Solver<'s>> {
    let features = Arc::new(data.feature_names.clone());
    Box::new(move |triangle: &Triangle, used: &[usize]| {
        let names: Vec<String> = used.iter().map(|&c| features[c].clone()).collect();
        let beta = coefficients(triangle, &standardise, used, &names)?;
        Ok(Box::new(LinearFit::new(
            standardise.clone(),
            features.clone(),
            &beta,
            used,
        )) as Box<dyn Fitted>)
    })
}

/// Fits the training `rows` with `coefficients` (the per-fold route).
///
/// # Errors
/// As `coefficients`, and a text feature with one level in training.
pub fn fit_training(
    data: &Dataset,
    rows: &[u32],
    coefficients: &Coefficients,
) -> Result<Box<dyn Fitted>, FitError> {
    let standardise = Arc::new(Standardise::of(data));
    let used = super::design::columns_of_rows(data, rows)?;
    let triangle = Triangle::of_units(data, &standardise, rows.iter().copied());
    solver(data, standardise, coefficients)(&triangle.select(&used), &used)
}

/// Fits every fold with `coefficients` (see [`fit_folds`]).
pub fn fit_every_fold(
    data: &Dataset,
    folds: &FoldSet,
    coefficients: &Coefficients,
) -> Vec<Result<Box<dyn Fitted>, FitError>> {
    let standardise = Arc::new(Standardise::of(data));
    let solver = solver(data, standardise.clone(), coefficients);
    fit_folds(data, folds, &standardise, solver.as_ref())
}

/// The feature columns of every fold ([`super::design`]): all of them
/// without text features.
fn fold_columns(data: &Dataset, folds: &FoldSet) -> Vec<Result<Vec<usize>, FitError>> {
    if data.categorical.is_empty() {
        return vec![Ok((0..data.n_features()).collect()); folds.k as usize];
    }
    training_level_counts(data, folds)
        .iter()
        .map(|counts| used_columns(data, counts))
        .collect()
}

/// Fits the training set of every fold (see the module doc) with `solver`,
/// in fold order; `standardise` must be [`Standardise::of`] the data.
pub fn fit_folds(
    data: &Dataset,
    folds: &FoldSet,
    standardise: &Standardise,
    solver: &Solver<'_>,
) -> Vec<Result<Box<dyn Fitted>, FitError>> {
    let test_units = folds.test_units();
    let k = folds.k as usize;
    let columns = fold_columns(data, folds);
    let fit = |fold: usize, triangle: &Triangle| -> Result<Box<dyn Fitted>, FitError> {
        let used = columns[fold].clone()?;
        solver(&triangle.select(&used), &used)
    };
    // The training units of fold f, directly (the fallback).
    let direct = |fold: usize| -> Triangle {
        let excluded = folds.excluded_from(fold as u32);
        Triangle::of_units(
            data,
            standardise,
            (0..data.len() as u32).filter(|&unit| {
                folds.fold_of[unit as usize] as usize != fold
                    && excluded.binary_search(&unit).is_err()
            }),
        )
    };
    if k <= MERGE_FOLDS {
        let leaves: Vec<Triangle> = parallel_map(k, |g| {
            Triangle::of_units(data, standardise, test_units[g].iter().copied())
        });
        parallel_map(k, |f| {
            let excluded = folds.excluded_from(f as u32);
            let mut partial: Vec<Triangle> = Vec::new();
            let mut touched = vec![false; k];
            touched[f] = true;
            if !excluded.is_empty() {
                for &unit in excluded {
                    touched[folds.fold_of[unit as usize] as usize] = true;
                }
                for g in (0..k).filter(|&g| g != f && touched[g]) {
                    partial.push(Triangle::of_units(
                        data,
                        standardise,
                        test_units[g]
                            .iter()
                            .copied()
                            .filter(|unit| excluded.binary_search(unit).is_err()),
                    ));
                }
            }
            let parts: Vec<&Triangle> = (0..k)
                .filter(|&g| !touched[g])
                .map(|g| &leaves[g])
                .chain(partial.iter())
                .collect();
            if parts.is_empty() {
                return fit(f, &Triangle::empty(data.n_features() + 2));
            }
            fit(f, &Triangle::merge(&parts))
        })
    } else {
        let everything = Triangle::of_units(data, standardise, 0..data.len() as u32);
        parallel_map(k, |f| {
            let mut removed: Vec<u32> = test_units[f].clone();
            removed.extend_from_slice(folds.excluded_from(f as u32));
            match everything.downdate(data, standardise, &removed) {
                Some(triangle) => fit(f, &triangle),
                None => fit(f, &direct(f)),
            }
        })
    }
}

#[cfg(test)]
mod tests;
