//! The seeded permutation test of Moran's I (a randomisation test in the
//! sense of Cliff & Ord 1981; p-values as in Hope, A. C. A. (1968). A
//! simplified Monte Carlo significance test procedure. *JRSS B* 30: 582–598).
//!
//! The centred values are shuffled R times over the fixed weights, and I is
//! recomputed for each arrangement. With `M≥` the number of permuted I at or
//! above the observed I and `M≤` the number at or below it:
//!
//! - `p_greater = (M≥ + 1) / (R + 1)`: one-sided, alternative *positive*
//!   autocorrelation (similar values cluster, the kind that makes random
//!   cross-validation optimistic). This is the headline p-value.
//! - `p_less = (M≤ + 1) / (R + 1)`: one-sided, negative autocorrelation.
//! - `p_two_sided = min(1, 2·min(p_greater, p_less))`.
//!
//! The "+1" counts the observed arrangement among the permutations, so the
//! smallest p is 1/(R+1) (0.001 at the default 999). esda's `p_sim` instead
//! folds to the tail the observed value lies in; it equals
//! `min(p_greater, p_less)` up to ties. Permuted values within
//! `1e-12 · max(1, |I|)` of the observed I count as ties, in both tails, so
//! floating-point rounding cannot hide arrangements that give the same I.
//! The mean and the standard deviation (population, ddof = 0) of the permuted
//! values and `z = (I − mean)/sd` are reported too.
//!
//! For regression residuals the test treats the residuals as exchangeable,
//! which they are only approximately (they are correlated through the fit);
//! for OLS residuals the regression moments of
//! [`moran_residuals`](super::moran::moran_residuals) are the exact analytic
//! alternative.
//!
//! # Reproducibility
//! Permutation r (0-based) is a Fisher–Yates shuffle drawn from stream r of
//! the seed ([`IndexStream`]), so the result depends on the seed, the values
//! and the weights only, not on the number of threads.
//!
//! # Speed
//! Permutations run in parallel (rayon). The values are permuted, not the
//! neighbour lists, and the units are first relabelled in a breadth-first
//! order of the weights graph, so that a unit's neighbours sit near it in
//! memory and the sparse product per permutation reads mostly from cache;
//! the values are shuffled in that order (the permutation distribution is the
//! same whatever the order). O(R · (n + links)) time, O(n + links) memory per
//! thread.

use rayon::prelude::*;
use serde::Serialize;

use super::draws::IndexStream;
use super::moran::{centred, weights_caveats};
use super::weights::Weights;
use super::{Caveat, DiagnosticsError};

/// Options of the permutation test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PermutationParams {
    /// Number of permutations R (default 999, so the smallest p is 0.001).
    pub permutations: usize,
    /// Seed of the permutation streams; pass the run's seed.
    pub seed: u64,
}

impl Default for PermutationParams {
    fn default() -> Self {
        PermutationParams {
            permutations: 999,
            seed: 0,
        }
    }
}

/// The outcome of the permutation test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PermutationTest {
    /// Observed Moran's I.
    pub statistic: f64,
    /// Number of permutations R.
    pub permutations: usize,
    /// Seed used.
    pub seed: u64,
    /// Permuted I at or above the observed (ties included).
    pub at_or_above: usize,
    /// Permuted I at or below the observed (ties included).
    pub at_or_below: usize,
    /// `(at_or_above + 1)/(R + 1)`: alternative positive autocorrelation.
    pub p_greater: f64,
    /// `(at_or_below + 1)/(R + 1)`: alternative negative autocorrelation.
    pub p_less: f64,
    /// `min(1, 2·min(p_greater, p_less))`.
    pub p_two_sided: f64,
    /// Mean of the permuted I.
    pub mean: f64,
    /// Standard deviation of the permuted I (ddof = 0).
    pub sd: f64,
    /// `(I − mean) / sd`.
    pub z: f64,
    /// The permuted I in permutation order (for histograms).
    #[serde(skip)]
    pub permuted: Vec<f64>,
    /// Warnings about the weights (islands).
    pub caveats: Vec<Caveat>,
}

/// Runs the permutation test of Moran's I of `values` over `weights`.
///
/// # Errors
/// As [`moran`](super::moran::moran); [`DiagnosticsError::BadParameter`] when
/// R is 0.
pub fn moran_permutation(
    weights: &Weights,
    values: &[f64],
    params: &PermutationParams,
) -> Result<PermutationTest, DiagnosticsError> {
    if params.permutations == 0 {
        return Err(DiagnosticsError::BadParameter {
            name: "permutations",
            value: "0".into(),
            problem: "at least 1 permutation is needed (999 is usual)".into(),
        });
    }
    let z = centred("values", weights.n(), values)?;
    let sums = weights.sums();
    let mut caveats = weights_caveats(weights, &sums)?;
    // The permutation test is exact whatever n; the n caveat is about the
    // normal approximation only.
    caveats.retain(|c| !matches!(c, Caveat::FewUnits { .. }));
    let n = z.len();
    let sum_sq: f64 = z.iter().map(|v| v * v).sum();
    let scale = n as f64 / (sums.s0 * sum_sq);
    let statistic = scale * weights.quadratic_form(&z);

    let local = Relabelled::new(weights);
    let base: Vec<f64> = local.order.iter().map(|&i| z[i as usize]).collect();
    let permuted: Vec<f64> = (0..params.permutations)
        .into_par_iter()
        .map_init(
            || vec![0.0; n],
            |buffer, r| {
                buffer.copy_from_slice(&base);
                IndexStream::new(params.seed, r as u64).shuffle(buffer);
                scale * local.quadratic_form(buffer)
            },
        )
        .collect();

    let tolerance = 1e-12 * statistic.abs().max(1.0);
    let at_or_above = permuted
        .iter()
        .filter(|&&v| v >= statistic - tolerance)
        .count();
    let at_or_below = permuted
        .iter()
        .filter(|&&v| v <= statistic + tolerance)
        .count();
    let r = params.permutations as f64;
    let p_greater = (at_or_above as f64 + 1.0) / (r + 1.0);
    let p_less = (at_or_below as f64 + 1.0) / (r + 1.0);
    let mean = permuted.iter().sum::<f64>() / r;
    let sd = (permuted.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / r).sqrt();
    Ok(PermutationTest {
        statistic,
        permutations: params.permutations,
        seed: params.seed,
        at_or_above,
        at_or_below,
        p_greater,
        p_less,
        p_two_sided: (2.0 * p_greater.min(p_less)).min(1.0),
        mean,
        sd,
        z: (statistic - mean) / sd,
        permuted,
        caveats,
    })
}

/// The weights relabelled in breadth-first order.
struct Relabelled {
    /// `order[p]` is the original index of the unit at position p.
    order: Vec<u32>,
    offsets: Vec<usize>,
    neighbours: Vec<u32>,
    row_weight: Vec<f64>,
}

impl Relabelled {
    fn new(weights: &Weights) -> Relabelled {
        let n = weights.n();
        let mut visited = vec![false; n];
        let mut order: Vec<u32> = Vec::with_capacity(n);
        for start in 0..n {
            if visited[start] {
                continue;
            }
            visited[start] = true;
            let mut head = order.len();
            order.push(start as u32);
            while head < order.len() {
                let i = order[head] as usize;
                head += 1;
                for &j in weights.neighbours(i) {
                    if !visited[j as usize] {
                        visited[j as usize] = true;
                        order.push(j);
                    }
                }
            }
        }
        let mut position = vec![0u32; n];
        for (p, &i) in order.iter().enumerate() {
            position[i as usize] = p as u32;
        }
        let mut offsets = Vec::with_capacity(n + 1);
        offsets.push(0);
        let mut neighbours = Vec::with_capacity(weights.links());
        let mut row_weight = Vec::with_capacity(n);
        for &i in &order {
            neighbours.extend(
                weights
                    .neighbours(i as usize)
                    .iter()
                    .map(|&j| position[j as usize]),
            );
            offsets.push(neighbours.len());
            row_weight.push(weights.row_weight(i as usize));
        }
        Relabelled {
            order,
            offsets,
            neighbours,
            row_weight,
        }
    }

    /// `zᵀWz` over the relabelled weights.
    fn quadratic_form(&self, values: &[f64]) -> f64 {
        let mut total = 0.0;
        for (p, window) in self.offsets.windows(2).enumerate() {
            let sum: f64 = self.neighbours[window[0]..window[1]]
                .iter()
                .map(|&q| values[q as usize])
                .sum();
            total += values[p] * self.row_weight[p] * sum;
        }
        total
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::diagnostics::moran::moran;
    use crate::core::diagnostics::on_one_thread;
    use crate::core::diagnostics::weights::Transform;
    use approx::assert_relative_eq;

    fn path4() -> Weights {
        Weights::from_pairs(4, &[(0, 1), (1, 2), (2, 3)], Transform::Binary).unwrap()
    }

    /// Every permutation of 0..n (Heap's algorithm).
    fn all_permutations(n: usize) -> Vec<Vec<usize>> {
        fn heap(k: usize, items: &mut Vec<usize>, out: &mut Vec<Vec<usize>>) {
            if k == 1 {
                out.push(items.clone());
                return;
            }
            for i in 0..k {
                heap(k - 1, items, out);
                let j = if k.is_multiple_of(2) { i } else { 0 };
                items.swap(j, k - 1);
            }
        }
        let mut out = Vec::new();
        heap(n, &mut (0..n).collect(), &mut out);
        out
    }

    #[test]
    fn exact_permutation_distribution_of_example_a() {
        // REFERENCES §5.1 [VER, exact enumeration]: over the 24 permutations
        // of example A the mean I is −1/3 and the population variance 8/45
        // (= Var_R); 2 of 24 reach the observed 1/3, the maximum; the
        // distinct values are −1, −0.8667, −0.4667, −0.2, 0.2, 1/3.
        let w = path4();
        let y = [1.0, 2.0, 3.0, 4.0];
        let values: Vec<f64> = all_permutations(4)
            .iter()
            .map(|p| {
                let arranged: Vec<f64> = p.iter().map(|&i| y[i]).collect();
                moran(&w, &arranged).unwrap().statistic
            })
            .collect();
        assert_eq!(values.len(), 24);
        let mean = values.iter().sum::<f64>() / 24.0;
        let variance = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / 24.0;
        assert_relative_eq!(mean, -1.0 / 3.0, epsilon = 1e-15);
        assert_relative_eq!(variance, 8.0 / 45.0, epsilon = 1e-15);
        let observed = moran(&w, &y).unwrap();
        assert_relative_eq!(variance, observed.randomisation.variance, epsilon = 1e-15);
        let top = values
            .iter()
            .filter(|&&v| v >= observed.statistic - 1e-12)
            .count();
        assert_eq!(top, 2);
        let mut distinct: Vec<f64> = values.clone();
        distinct.sort_by(f64::total_cmp);
        distinct.dedup_by(|a, b| (*a - *b).abs() < 1e-12);
        let expected = [-1.0, -0.8667, -0.4667, -0.2, 0.2, 1.0 / 3.0];
        assert_eq!(distinct.len(), expected.len());
        for (found, want) in distinct.iter().zip(expected) {
            assert!((found - want).abs() < 5e-5, "{found} vs {want}");
        }
    }

    #[test]
    fn seeded_test_of_example_a_approaches_the_exact_p() {
        // The exact one-sided p of example A is 2/24 = 1/12 (REFERENCES
        // §5.1). With R = 9999 the count M≥ is Binomial(R, 1/12): p_greater
        // lies within 5 SD (0.014) of 1/12.
        let w = path4();
        let y = [1.0, 2.0, 3.0, 4.0];
        let params = PermutationParams {
            permutations: 9999,
            seed: 2024,
        };
        let test = moran_permutation(&w, &y, &params).unwrap();
        assert!(
            (test.p_greater - 1.0 / 12.0).abs() < 0.014,
            "{}",
            test.p_greater
        );
        // Every arrangement is at or below the maximum: p_less = 1.
        assert_eq!(test.at_or_below, 9999);
        assert_eq!(test.p_less, 1.0);
        assert_relative_eq!(test.p_two_sided, 2.0 * test.p_greater, epsilon = 1e-15);
        // Mean and SD approach the exact −1/3 and √(8/45) (5 SD bands).
        assert!((test.mean + 1.0 / 3.0).abs() < 5.0 * (8.0f64 / 45.0 / 9999.0).sqrt());
        assert!((test.sd - (8.0f64 / 45.0).sqrt()).abs() < 0.02);
        assert_eq!(test.permuted.len(), 9999);
    }

    #[test]
    fn results_depend_on_the_seed_only_not_on_threads() {
        let points: Vec<[f64; 2]> = (0..500)
            .map(|i| [((i * 7919) % 1000) as f64, ((i * 104729) % 997) as f64])
            .collect();
        let values: Vec<f64> = points
            .iter()
            .map(|p| (p[0] / 100.0).sin() + p[1] / 500.0)
            .collect();
        let w = Weights::k_nearest(&points, 6, Transform::Row).unwrap();
        let params = PermutationParams {
            permutations: 199,
            seed: 7,
        };
        let parallel = moran_permutation(&w, &values, &params).unwrap();
        let single = on_one_thread(|| moran_permutation(&w, &values, &params).unwrap());
        assert_eq!(parallel, single);
        let other =
            moran_permutation(&w, &values, &PermutationParams { seed: 8, ..params }).unwrap();
        assert_ne!(parallel.permuted, other.permuted);
        // The observed statistic is the one of moran().
        let analytic = moran(&w, &values).unwrap();
        assert_relative_eq!(parallel.statistic, analytic.statistic, max_relative = 1e-14);
    }

    #[test]
    fn relabelling_preserves_the_statistic() {
        // zᵀWz is invariant under relabelling units (common practice, no
        // source): the breadth-first order must give the same value.
        let points: Vec<[f64; 2]> = (0..300)
            .map(|i| [((i * 31) % 97) as f64, ((i * 17) % 89) as f64])
            .collect();
        let w = Weights::k_nearest(&points, 4, Transform::Row).unwrap();
        let z: Vec<f64> = (0..300).map(|i| ((i * 13) % 29) as f64 - 14.0).collect();
        let local = Relabelled::new(&w);
        let mut sorted = local.order.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, (0..300).collect::<Vec<u32>>());
        let relabelled: Vec<f64> = local.order.iter().map(|&i| z[i as usize]).collect();
        assert_relative_eq!(
            local.quadratic_form(&relabelled),
            w.quadratic_form(&z),
            max_relative = 1e-13
        );
    }

    #[test]
    fn zero_permutations_is_a_usage_error() {
        let error = moran_permutation(
            &path4(),
            &[1.0, 2.0, 3.0, 4.0],
            &PermutationParams {
                permutations: 0,
                seed: 1,
            },
        )
        .unwrap_err();
        assert!(error.is_usage());
    }
}
