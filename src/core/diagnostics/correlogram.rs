//! The Moran correlogram: Moran's I by distance class, with binary weights
//! linking the pairs whose distance falls in the class's annulus
//! `(b_k, b_{k+1}]` (Cliff & Ord 1981; Legendre, P. & Fortin, M.-J. (1989).
//! Spatial pattern and ecological analysis. *Vegetatio* 80: 107–138).
//!
//! For class k with `N_k` unordered pairs, binary symmetric weights give
//! `S0 = 2N_k`, `S1 = 4N_k`, `S2 = 4 Σ_i d_ik²` (d_ik: units of class k around
//! i), and `I_k = n Σ_{pairs} z_i z_j / (N_k Σ z²)`. `E[I]` = −1/(n−1); the
//! variances under normality and randomisation are those of
//! [`moran`](super::moran) with these sums. Units with no pair in a class are
//! islands of that class and are kept in n, as in [`moran`](super::moran).
//!
//! Classes are the lags of [`pairs`](super::pairs) (same defaults). When the
//! pairs are sampled, I_k is the ratio estimate from the weighted sample and
//! no variance is given (S2 needs every pair).

use serde::Serialize;

use super::moran::{variance_normality, variance_randomisation, Inference};
use super::pairs::{summarise_pairs, LagParams, PairMode, PairSummary};
use super::weights::WeightSums;
use super::{check_units, Caveat, DiagnosticsError};

/// One distance class.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CorrelogramClass {
    /// Lower edge (excluded).
    pub lower: f64,
    /// Upper edge (included).
    pub upper: f64,
    /// Pairs visited (all when exact).
    pub pairs: u64,
    /// Estimated pairs over all pairs (= `pairs` when exact).
    pub estimated_pairs: f64,
    /// Mean pair distance; None when empty.
    pub distance: Option<f64>,
    /// Moran's I of the class; None when empty.
    pub statistic: Option<f64>,
    /// Under normality (exact pass only, non-empty class).
    pub normality: Option<Inference>,
    /// Under randomisation (exact pass only, non-empty class).
    pub randomisation: Option<Inference>,
}

/// Moran's I by distance class.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Correlogram {
    /// Number of units.
    pub n: usize,
    /// The classes, empty ones included.
    pub classes: Vec<CorrelogramClass>,
    /// Exact or sampled.
    pub mode: PairMode,
    /// Warnings from the pass.
    pub caveats: Vec<Caveat>,
}

impl Correlogram {
    /// The correlogram of a pass over pairs.
    ///
    /// # Errors
    /// [`DiagnosticsError::ConstantValues`] when Σz² = 0; fewer than 4 units
    /// ([`DiagnosticsError::TooFewUnits`]), where Var_R is undefined.
    pub fn from_pairs(summary: &PairSummary) -> Result<Correlogram, DiagnosticsError> {
        check_units("a correlogram", 4, summary.n)?;
        if summary.sum_squares == 0.0 {
            return Err(DiagnosticsError::ConstantValues {
                what: "values",
                n: summary.n,
                value: f64::NAN,
            });
        }
        let n = summary.n as f64;
        let expected = -1.0 / (n - 1.0);
        let classes = summary
            .bins
            .iter()
            .map(|bin| {
                let filled = bin.pairs > 0 && bin.estimated_pairs > 0.0;
                let statistic = filled.then(|| {
                    n * bin.sum_cross_product / (bin.estimated_pairs * summary.sum_squares)
                });
                let inference = match (statistic, bin.sum_degree_squared) {
                    (Some(i), Some(degree_squared)) => {
                        let sums = WeightSums {
                            s0: 2.0 * bin.estimated_pairs,
                            s1: 4.0 * bin.estimated_pairs,
                            s2: 4.0 * degree_squared,
                        };
                        Some((
                            Inference::new(i, expected, variance_normality(n, &sums, expected)),
                            Inference::new(
                                i,
                                expected,
                                variance_randomisation(n, &sums, summary.kurtosis, expected),
                            ),
                        ))
                    }
                    _ => None,
                };
                CorrelogramClass {
                    lower: bin.lower,
                    upper: bin.upper,
                    pairs: bin.pairs,
                    estimated_pairs: bin.estimated_pairs,
                    distance: filled.then(|| bin.sum_distance / bin.estimated_pairs),
                    statistic,
                    normality: inference.map(|i| i.0),
                    randomisation: inference.map(|i| i.1),
                }
            })
            .collect();
        Ok(Correlogram {
            n: summary.n,
            classes,
            mode: summary.mode,
            caveats: summary.caveats.clone(),
        })
    }
}

/// The correlogram of `values` at `points`.
///
/// # Errors
/// As [`summarise_pairs`] and [`Correlogram::from_pairs`].
pub fn correlogram(
    points: &[[f64; 2]],
    values: &[f64],
    params: &LagParams,
) -> Result<Correlogram, DiagnosticsError> {
    Correlogram::from_pairs(&summarise_pairs(points, values, params)?)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::diagnostics::moran::moran;
    use crate::core::diagnostics::weights::{Transform, Weights};
    use approx::assert_relative_eq;

    #[test]
    fn each_class_equals_moran_with_binary_annulus_weights() {
        // Definition check (Cliff & Ord 1981): class k's I and variances must
        // equal global Moran's I with binary weights linking exactly the pairs
        // in (b_k, b_{k+1}], built independently from the pair list.
        let points: Vec<[f64; 2]> = (0..150)
            .map(|i| {
                let u = (i as f64 * 0.618_033_988_749_894_9).fract();
                let v = (i as f64 * 0.754_877_666_246_692_7).fract();
                [u * 100.0, v * 100.0]
            })
            .collect();
        let values: Vec<f64> = points
            .iter()
            .map(|p| (p[0] / 20.0).sin() * 3.0 + p[1] / 40.0)
            .collect();
        let params = LagParams {
            cutoff: Some(40.0),
            lags: 4,
            ..LagParams::default()
        };
        let correlogram = correlogram(&points, &values, &params).unwrap();
        for (k, class) in correlogram.classes.iter().enumerate() {
            let (lower, upper) = (10.0 * k as f64, 10.0 * (k + 1) as f64);
            let mut pairs = Vec::new();
            for i in 0..150u32 {
                for j in i + 1..150u32 {
                    let (a, b) = (points[i as usize], points[j as usize]);
                    let d = ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt();
                    if d > lower && d <= upper {
                        pairs.push((i, j));
                    }
                }
            }
            assert_eq!(class.pairs, pairs.len() as u64);
            let w = Weights::from_pairs(150, &pairs, Transform::Binary).unwrap();
            let reference = moran(&w, &values).unwrap();
            assert_relative_eq!(
                class.statistic.unwrap(),
                reference.statistic,
                max_relative = 1e-10
            );
            let normality = class.normality.unwrap();
            let randomisation = class.randomisation.unwrap();
            assert_relative_eq!(
                normality.variance,
                reference.normality.variance,
                max_relative = 1e-10
            );
            assert_relative_eq!(
                randomisation.variance,
                reference.randomisation.variance,
                max_relative = 1e-10
            );
            assert_relative_eq!(
                randomisation.z,
                reference.randomisation.z,
                max_relative = 1e-9
            );
        }
        // Positive autocorrelation at short range for this smooth surface.
        assert!(correlogram.classes[0].statistic.unwrap() > 0.5);
    }

    #[test]
    fn constant_values_are_refused() {
        let points = [[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]];
        assert!(matches!(
            correlogram(&points, &[1.0; 4], &LagParams::default()),
            Err(DiagnosticsError::ConstantValues { .. })
        ));
    }
}
