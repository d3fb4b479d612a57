//! How far each fold's test units are from the nearest unit they were
//! trained on, summarised per fold and over all folds, stored with every run
//! (`fold_distances`), beside the distances from the prediction locations to
//! the data when the run names those. If the folds are to mimic the task the
//! model will face, the two distributions should look alike: test units much
//! closer to their training units than the prediction locations are to the
//! data make the scores optimistic. The CV distance of a unit is defined in
//! [`crate::core::matching`] (its fold's training set: not in the fold, not
//! excluded from it).
//!
//! # Scale
//! Repetition 1 only; nearest points through [`Buckets`]. Per fold, up to [`PER_FOLD_UNITS`] test units, and over
//! all folds up to [`POOLED_UNITS`] units, drawn without replacement from
//! stream [`SAMPLE_STREAM`] of the run seed; the stored row says how many
//! units the sample came from. With more than [`MAX_FOLD_ROWS`] folds
//! (leave-one-out and its kin) only the pooled row is kept. When the run has
//! prediction locations every unit's CV distance is already known and is
//! used whole.
//!
//! # Quantiles
//! Linear interpolation between order statistics at `p (n − 1)` (Hyndman &
//! Fan 1996, definition 7; numpy's default).

use serde::Serialize;

use super::draws::IndexStream;
use crate::core::buckets::Buckets;
use crate::core::folds::FoldSet;
use crate::core::parallel::parallel_chunked;

/// Test units measured per fold at most.
pub const PER_FOLD_UNITS: usize = 2_000;

/// Units measured over all folds at most.
pub const POOLED_UNITS: usize = 10_000;

/// Per-fold rows are kept up to this many folds.
pub const MAX_FOLD_ROWS: u32 = 100;

/// Stream number of the samples (see [`super::draws`]).
pub const SAMPLE_STREAM: u64 = 0x6469_7374; // "dist"

/// The probabilities of [`DistanceSummary::quantiles`].
pub const PROBABILITIES: [f64; 7] = [0.0, 0.1, 0.25, 0.5, 0.75, 0.9, 1.0];

/// One distribution of nearest distances.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DistanceSummary {
    /// `cv` (test units to their training units) or `prediction`
    /// (prediction locations to the data).
    pub kind: &'static str,
    /// The fold (from 0); None for all folds together, and for `prediction`.
    pub fold: Option<u32>,
    /// Distances summarised.
    pub n: usize,
    /// Units the sample was drawn from, when one was.
    pub sampled_from: Option<usize>,
    /// Minimum, 10th, 25th, 50th, 75th, 90th percentile and maximum
    /// ([`PROBABILITIES`]).
    pub quantiles: [f64; 7],
    /// Mean.
    pub mean: f64,
}

impl DistanceSummary {
    /// The median.
    pub fn median(&self) -> f64 {
        self.quantiles[3]
    }
}

/// Summarises finite distances; None when there are none.
pub fn summarise(
    kind: &'static str,
    fold: Option<u32>,
    distances: &[f64],
    sampled_from: Option<usize>,
) -> Option<DistanceSummary> {
    let mut sorted: Vec<f64> = distances
        .iter()
        .copied()
        .filter(|d| d.is_finite())
        .collect();
    if sorted.is_empty() {
        return None;
    }
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    let quantile = |p: f64| {
        let h = p * (n - 1) as f64;
        let below = h.floor() as usize;
        let above = (below + 1).min(n - 1);
        sorted[below] + (h - below as f64) * (sorted[above] - sorted[below])
    };
    Some(DistanceSummary {
        kind,
        fold,
        n,
        sampled_from,
        quantiles: PROBABILITIES.map(quantile),
        mean: sorted.iter().sum::<f64>() / n as f64,
    })
}

/// Up to `limit` of `units`, without replacement, in ascending order.
fn sample(units: &[u32], limit: usize, stream: &mut IndexStream) -> Vec<u32> {
    if units.len() <= limit {
        return units.to_vec();
    }
    let mut pool = units.to_vec();
    for i in 0..limit {
        let j = i + stream.index_below((pool.len() - i) as u32) as usize;
        pool.swap(i, j);
    }
    pool.truncate(limit);
    pool.sort_unstable();
    pool
}

/// The CV-distance summaries of one fold set: all folds pooled first, then
/// each fold (module doc).
pub fn fold_distances(
    set: &FoldSet,
    points: &[[f64; 2]],
    cells: &Buckets,
    seed: u64,
) -> Vec<DistanceSummary> {
    let members = set.test_units();
    let per_fold = set.k <= MAX_FOLD_ROWS;
    let all: Vec<u32> = (0..points.len() as u32).collect();
    // With prediction locations every unit's distance is known: no sample.
    let limits = match set.cv_distances {
        Some(_) => (usize::MAX, usize::MAX),
        None => (POOLED_UNITS, PER_FOLD_UNITS),
    };
    let mut stream = IndexStream::new(seed, SAMPLE_STREAM);
    let pooled_units = sample(&all, limits.0, &mut stream);
    let fold_units: Vec<Vec<u32>> = if per_fold {
        members
            .iter()
            .map(|units| sample(units, limits.1, &mut stream))
            .collect()
    } else {
        Vec::new()
    };
    let distance_of: Box<dyn Fn(u32) -> f64 + '_> = match &set.cv_distances {
        Some(known) => Box::new(move |u| known[u as usize]),
        None => {
            // One lookup for every unit any summary needs.
            let mut needed: Vec<u32> = pooled_units
                .iter()
                .chain(fold_units.iter().flatten())
                .copied()
                .collect();
            needed.sort_unstable();
            needed.dedup();
            let found = cv_distances(set, points, cells, &needed);
            Box::new(move |u| {
                needed
                    .binary_search(&u)
                    .map_or(f64::NAN, |position| found[position])
            })
        }
    };
    let summary = |fold: Option<u32>, units: &[u32], total: usize| {
        let distances: Vec<f64> = units.iter().map(|&u| distance_of(u)).collect();
        summarise(
            "cv",
            fold,
            &distances,
            (units.len() < total).then_some(total),
        )
    };
    let mut summaries: Vec<DistanceSummary> = summary(None, &pooled_units, points.len())
        .into_iter()
        .collect();
    for (fold, units) in fold_units.iter().enumerate() {
        summaries.extend(summary(Some(fold as u32), units, members[fold].len()));
    }
    summaries
}

/// The CV distance of each listed unit (NaN when its fold has no training
/// unit), on the machine's cores.
fn cv_distances(set: &FoldSet, points: &[[f64; 2]], cells: &Buckets, units: &[u32]) -> Vec<f64> {
    parallel_chunked(units.len(), 1024, |position| {
        let unit = units[position];
        let fold = set.fold_of[unit as usize];
        let excluded = set.excluded_from(fold);
        let keep = |j: u32| set.fold_of[j as usize] != fold && excluded.binary_search(&j).is_err();
        cells
            .nearest_distance(points, points[unit as usize], keep)
            .unwrap_or(f64::NAN)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_interpolate_as_numpy_does() {
        // numpy.quantile([1, 2, 3, 4, 10], [0, .1, .25, .5, .75, .9, 1])
        // = [1, 1.4, 2, 3, 4, 7.6, 10] (definition 7; worked by hand).
        let s = summarise("cv", None, &[4.0, 1.0, 10.0, 3.0, 2.0, f64::NAN], None).unwrap();
        let want = [1.0, 1.4, 2.0, 3.0, 4.0, 7.6, 10.0];
        for (got, want) in s.quantiles.iter().zip(want) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
        assert_eq!(s.n, 5);
        assert!((s.mean - 4.0).abs() < 1e-12);
        assert!(summarise("cv", None, &[f64::NAN], None).is_none());
    }

    #[test]
    fn two_strips_measure_the_gap_between_them() {
        // Units on a line at x = 0..20; fold 0 holds x < 10, fold 1 the rest.
        // Every test unit's nearest training unit is across the boundary:
        // fold 0's unit at x has distance 10 − x (brute force by hand).
        let points: Vec<[f64; 2]> = (0..20).map(|i| [i as f64, 0.0]).collect();
        let fold_of: Vec<u32> = (0..20).map(|i| u32::from(i >= 10)).collect();
        let set = FoldSet::plain(2, fold_of);
        let cells = Buckets::new(&points);
        let rows = fold_distances(&set, &points, &cells, 1);
        assert_eq!(rows.len(), 3);
        assert_eq!(rows[0].fold, None);
        assert_eq!(rows[1].fold, Some(0));
        assert_eq!(rows[1].quantiles[0], 1.0);
        assert_eq!(rows[1].quantiles[6], 10.0);
        assert!((rows[1].mean - 5.5).abs() < 1e-12);
        assert_eq!(rows[0].n, 20);
        assert_eq!(rows[0].sampled_from, None);
    }

    #[test]
    fn large_folds_are_sampled_and_say_so() {
        let points: Vec<[f64; 2]> = (0..30_000).map(|i| [i as f64, 0.0]).collect();
        let fold_of: Vec<u32> = (0..30_000).map(|i| (i % 3) as u32).collect();
        let set = FoldSet::plain(3, fold_of);
        let cells = Buckets::new(&points);
        let rows = fold_distances(&set, &points, &cells, 7);
        assert_eq!(rows[0].n, POOLED_UNITS);
        assert_eq!(rows[0].sampled_from, Some(30_000));
        assert_eq!(rows[1].n, PER_FOLD_UNITS);
        assert_eq!(rows[1].sampled_from, Some(10_000));
        // Interleaved folds: every unit's neighbour one step away is training.
        assert_eq!(rows[0].quantiles[6], 1.0);
        assert_eq!(rows, fold_distances(&set, &points, &cells, 7));
    }
}
