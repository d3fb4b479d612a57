//! Moran's I of a run's held-out residuals (observed minus held-out
//! prediction, averaged over repetitions), stored with every run: residuals
//! still spatially autocorrelated after spatial cross-validation say the model
//! misses spatial structure, and the folds' error figures then depend on how
//! the test units sit among the training units.
//!
//! Held-out residuals are not the least-squares residuals of one design, so
//! only the moments under normality and randomisation apply (Cliff & Ord
//! 1981), not the regression-residual moments of [`super::moran`]. No
//! permutation test is run: it would cost seconds at a million units on every
//! run; `geofold inspect` runs one.
//!
//! # Scale
//! Up to [`EXACT_LIMIT`] units every unit is used. Beyond, a seeded sample of
//! [`EXACT_LIMIT`] units (drawn without replacement, stream
//! [`SAMPLE_STREAM`] of the run seed) gets its own weights; the stored row
//! says how many units the sample came from. k nearest neighbours within a
//! sample are farther apart than within all units, so the statistic then
//! describes structure at a coarser spacing. Measured on this project's
//! 2-core machine: 8-nearest-neighbour weights over 1,000,000 units took
//! 4.4 s, against about 1.6 s for the whole run without them
//! (`cargo run --release --example bench_diagnostics`).

use super::draws::IndexStream;
use super::moran::{moran, Moran};
use super::weights::{Transform, Weights};
use super::DiagnosticsError;

/// The most units used without sampling.
pub const EXACT_LIMIT: usize = 100_000;

/// Stream number of the unit sample (see [`super::draws`]).
pub const SAMPLE_STREAM: u64 = 0x6865_6c64; // "held"

/// Weights between points, for units without polygons at hand.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PointRule {
    /// The k nearest units.
    Nearest(usize),
    /// Units within a distance (CRS units).
    Band(f64),
}

/// Weights built once per invocation and shared by its runs (the primary run
/// and its random comparison see the same units).
pub struct HeldOutWeights {
    name: String,
    total: usize,
    sample: Option<Vec<u32>>,
    weights: Weights,
}

/// Moran's I of one run's held-out residuals.
#[derive(Debug, Clone, serde::Serialize)]
pub struct HeldOutMoran {
    /// The weights rule, e.g. `knn:8`.
    pub weights: String,
    /// Units the sample was drawn from; None when every unit was used.
    pub sampled_from: Option<usize>,
    /// I with its moments under normality and randomisation.
    pub moran: Moran,
}

impl HeldOutWeights {
    /// Row-standardised weights of `rule` over `points` (or over a seeded
    /// sample of them, module doc). `name` is how the rule is written.
    ///
    /// # Errors
    /// As [`Weights::k_nearest`] and [`Weights::distance_band`].
    pub fn new(
        points: &[[f64; 2]],
        rule: PointRule,
        name: &str,
        seed: u64,
    ) -> Result<HeldOutWeights, DiagnosticsError> {
        let sample = (points.len() > EXACT_LIMIT).then(|| sample(points.len(), seed));
        let chosen: Vec<[f64; 2]>;
        let used: &[[f64; 2]] = match &sample {
            Some(units) => {
                chosen = units.iter().map(|&u| points[u as usize]).collect();
                &chosen
            }
            None => points,
        };
        let weights = match rule {
            PointRule::Nearest(k) => Weights::k_nearest(used, k, Transform::Row)?,
            PointRule::Band(distance) => Weights::distance_band(used, distance, Transform::Row)?,
        };
        Ok(HeldOutWeights {
            name: name.to_string(),
            total: points.len(),
            sample,
            weights,
        })
    }

    /// Moran's I of `residuals` (one per unit, in the points' order).
    ///
    /// # Errors
    /// As [`moran`]: non-finite or constant residuals, no links.
    pub fn moran(&self, residuals: &[f64]) -> Result<HeldOutMoran, DiagnosticsError> {
        let moran = match &self.sample {
            Some(units) => {
                if residuals.len() != self.total {
                    return Err(DiagnosticsError::LengthMismatch {
                        what: "held-out residuals",
                        expected: self.total,
                        found: residuals.len(),
                    });
                }
                let values: Vec<f64> = units.iter().map(|&u| residuals[u as usize]).collect();
                moran(&self.weights, &values)?
            }
            None => moran(&self.weights, residuals)?,
        };
        Ok(HeldOutMoran {
            weights: self.name.clone(),
            sampled_from: self.sample.as_ref().map(|_| self.total),
            moran,
        })
    }
}

/// [`EXACT_LIMIT`] distinct units of `0..n`, ascending: the first positions
/// of a partial Fisher–Yates shuffle.
fn sample(n: usize, seed: u64) -> Vec<u32> {
    let mut stream = IndexStream::new(seed, SAMPLE_STREAM);
    let mut units: Vec<u32> = (0..n as u32).collect();
    for i in 0..EXACT_LIMIT {
        let j = i + stream.index_below((n - i) as u32) as usize;
        units.swap(i, j);
    }
    units.truncate(EXACT_LIMIT);
    units.sort_unstable();
    units
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lattice(side: usize) -> Vec<[f64; 2]> {
        (0..side * side)
            .map(|i| [(i % side) as f64, (i / side) as f64])
            .collect()
    }

    #[test]
    fn small_layers_use_every_unit_and_match_plain_moran() {
        let points = lattice(10);
        let values: Vec<f64> = points.iter().map(|p| p[0] + 0.1 * p[1] * p[1]).collect();
        let held = HeldOutWeights::new(&points, PointRule::Nearest(4), "knn:4", 1).unwrap();
        let got = held.moran(&values).unwrap();
        let direct = moran(
            &Weights::k_nearest(&points, 4, Transform::Row).unwrap(),
            &values,
        )
        .unwrap();
        assert_eq!(got.sampled_from, None);
        assert_eq!(got.moran.statistic, direct.statistic);
        assert_eq!(got.weights, "knn:4");
    }

    #[test]
    fn samples_are_distinct_sorted_seeded_and_of_the_stated_size() {
        let n = EXACT_LIMIT + 12_345;
        let a = sample(n, 7);
        assert_eq!(a.len(), EXACT_LIMIT);
        assert!(a.windows(2).all(|w| w[0] < w[1]));
        assert!(*a.last().unwrap() < n as u32);
        assert_eq!(a, sample(n, 7));
        assert_ne!(a, sample(n, 8));
    }

    #[test]
    fn large_layers_are_sampled_and_say_so() {
        let points = lattice(320); // 102,400 units > EXACT_LIMIT
        let values: Vec<f64> = points.iter().map(|p| (p[0] / 40.0).sin()).collect();
        let held = HeldOutWeights::new(&points, PointRule::Nearest(8), "knn:8", 3).unwrap();
        let got = held.moran(&values).unwrap();
        assert_eq!(got.sampled_from, Some(points.len()));
        assert_eq!(got.moran.n, EXACT_LIMIT);
        // A smooth field stays strongly autocorrelated in the sample.
        assert!(got.moran.statistic > 0.9, "{}", got.moran.statistic);
        assert!(held.moran(&values[1..]).is_err());
    }
}
