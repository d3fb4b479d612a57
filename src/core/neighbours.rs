//! The neighbour index: "units within R of a point" and "k nearest units",
//! over the units' representative points, shared by exclusion buffers,
//! leave-one-out, distance matching, distance-based models and diagnostics.
//!
//! An R*-tree from the `rstar` crate (bulk-loaded, so building it is
//! O(n log n)). Distances are Euclidean in the units of the distance CRS
//! (metres for a projected CRS). Results are deterministic: ties in distance
//! are broken by the lower unit index, whatever order the tree holds them in.
//! The tree is built on the first query, so a run whose scheme never asks
//! (square blocks without a buffer) does not pay for it (about a quarter of a
//! second at a million units, measured).

use std::sync::OnceLock;

use rstar::primitives::GeomWithData;
use rstar::RTree;

type Entry = GeomWithData<[f64; 2], u32>;

/// An index over points, answering radius and nearest-neighbour queries by
/// point index (the position in the slice it was built from).
pub struct NeighbourIndex {
    points: Vec<[f64; 2]>,
    tree: OnceLock<RTree<Entry>>,
}

/// A neighbour found by a query: its index and its distance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Neighbour {
    /// Index of the point in the slice the index was built from.
    pub index: u32,
    /// Euclidean distance from the query point.
    pub distance: f64,
}

impl NeighbourIndex {
    /// Builds the index over `points` (bulk load).
    ///
    /// # Panics
    /// Never for fewer than 2³² points; more is not supported (indices are u32).
    pub fn new(points: &[[f64; 2]]) -> NeighbourIndex {
        NeighbourIndex {
            points: points.to_vec(),
            tree: OnceLock::new(),
        }
    }

    /// The tree, built on first use.
    fn tree(&self) -> &RTree<Entry> {
        self.tree.get_or_init(|| {
            let entries: Vec<Entry> = self
                .points
                .iter()
                .enumerate()
                .map(|(index, point)| GeomWithData::new(*point, index as u32))
                .collect();
            RTree::bulk_load(entries)
        })
    }

    /// Number of indexed points.
    pub fn len(&self) -> usize {
        self.points.len()
    }

    /// True when no point is indexed.
    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    /// Indices of the points at distance ≤ `radius` from `at` (the point
    /// itself included when indexed), in ascending index order. The test is on
    /// squared distances: `dx² + dy² ≤ radius²`.
    pub fn within(&self, at: [f64; 2], radius: f64) -> Vec<u32> {
        let mut found: Vec<u32> = self
            .tree()
            .locate_within_distance(at, radius * radius)
            .map(|entry| entry.data)
            .collect();
        found.sort_unstable();
        found
    }

    /// Calls `visit(index)` for every point at distance ≤ `radius` of `at`,
    /// in no particular order (the allocation-free form of [`within`](Self::within)).
    pub fn for_each_within(&self, at: [f64; 2], radius: f64, mut visit: impl FnMut(u32)) {
        for entry in self.tree().locate_within_distance(at, radius * radius) {
            visit(entry.data);
        }
    }

    /// The `k` points nearest to `at` for which `keep(index)` is true,
    /// nearest first; equal distances are ordered by index, so the result does
    /// not depend on the tree's layout. Fewer than `k` when fewer are kept.
    pub fn nearest(&self, at: [f64; 2], k: usize, keep: impl Fn(u32) -> bool) -> Vec<Neighbour> {
        if k == 0 {
            return Vec::new();
        }
        let mut found: Vec<(f64, u32)> = Vec::with_capacity(k + 4);
        let mut kth = f64::INFINITY;
        for (entry, distance_2) in self.tree().nearest_neighbor_iter_with_distance_2(&at) {
            if distance_2 > kth {
                break;
            }
            if !keep(entry.data) {
                continue;
            }
            found.push((distance_2, entry.data));
            if found.len() == k {
                // Keep collecting points tied with the k-th, then cut by index.
                kth = distance_2;
            }
        }
        found.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        found.truncate(k);
        found
            .into_iter()
            .map(|(distance_2, index)| Neighbour {
                index,
                distance: distance_2.sqrt(),
            })
            .collect()
    }

    /// The nearest point to `at` for which `keep(index)` is true (ties to the
    /// lower index), or None when no point is kept.
    pub fn nearest_one(&self, at: [f64; 2], keep: impl Fn(u32) -> bool) -> Option<Neighbour> {
        self.nearest(at, 1, keep).into_iter().next()
    }

    /// The distance from `at` to the nearest point for which `keep(index)` is
    /// true, visiting points nearest first and giving up after `budget` points
    /// that are not kept: `Ok(Some(d))`, `Ok(None)` when no point is kept, or
    /// `Err(BudgetSpent)`. Only the distance is returned, so ties do not matter.
    pub fn nearest_distance_within(
        &self,
        at: [f64; 2],
        keep: impl Fn(u32) -> bool,
        budget: usize,
    ) -> Result<Option<f64>, BudgetSpent> {
        let mut rejected = 0usize;
        for (entry, distance_2) in self.tree().nearest_neighbor_iter_with_distance_2(&at) {
            if keep(entry.data) {
                return Ok(Some(distance_2.sqrt()));
            }
            rejected += 1;
            if rejected >= budget {
                return Err(BudgetSpent);
            }
        }
        Ok(None)
    }

    /// The squared distance from `at` to the bounding box of the indexed
    /// points (0 inside it; infinite when nothing is indexed).
    pub fn envelope_distance_2(&self, at: [f64; 2]) -> f64 {
        if self.is_empty() {
            return f64::INFINITY;
        }
        self.tree().root().envelope().distance_2(&at)
    }
}

/// [`NeighbourIndex::nearest_distance_within`] visited its budget of points
/// without finding one that is kept.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BudgetSpent;

#[cfg(test)]
mod tests {
    use super::*;

    /// Brute force over all points: the reference for every query here
    /// (common practice, no source).
    fn brute(points: &[[f64; 2]], at: [f64; 2]) -> Vec<(f64, u32)> {
        let mut all: Vec<(f64, u32)> = points
            .iter()
            .enumerate()
            .map(|(i, p)| (((p[0] - at[0]).powi(2) + (p[1] - at[1]).powi(2)), i as u32))
            .collect();
        all.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        all
    }

    fn scattered(n: usize) -> Vec<[f64; 2]> {
        // The R2 sequence (Roberts 2018, additive recurrence with the plastic
        // number): well spread in the plane, no random numbers needed.
        let (a1, a2) = (0.754_877_666_246_692_7, 0.569_840_290_998_053_2);
        (0..n)
            .map(|i| {
                let u = (i as f64 * a1).fract();
                let v = (i as f64 * a2).fract();
                [u * 1000.0, v * 1000.0]
            })
            .collect()
    }

    #[test]
    fn radius_queries_match_brute_force() {
        let points = scattered(2000);
        let index = NeighbourIndex::new(&points);
        for (q, radius) in [
            ([500.0, 500.0], 40.0),
            ([0.0, 0.0], 100.0),
            ([999.0, 3.0], 0.0),
        ] {
            let mut expected: Vec<u32> = brute(&points, q)
                .into_iter()
                .filter(|(d2, _)| *d2 <= radius * radius)
                .map(|(_, i)| i)
                .collect();
            expected.sort_unstable();
            assert_eq!(index.within(q, radius), expected);
        }
    }

    #[test]
    fn nearest_queries_match_brute_force_and_skip_what_is_not_kept() {
        let points = scattered(3000);
        let index = NeighbourIndex::new(&points);
        let q = [250.0, 750.0];
        let expected: Vec<u32> = brute(&points, q)
            .into_iter()
            .filter(|(_, i)| i % 3 != 0)
            .take(7)
            .map(|(_, i)| i)
            .collect();
        let found: Vec<u32> = index
            .nearest(q, 7, |i| i % 3 != 0)
            .iter()
            .map(|n| n.index)
            .collect();
        assert_eq!(found, expected);
    }

    #[test]
    fn ties_are_broken_by_index() {
        // Four points at distance 1 from the origin and one at the origin.
        let points = [[0.0, 1.0], [1.0, 0.0], [0.0, 0.0], [-1.0, 0.0], [0.0, -1.0]];
        let index = NeighbourIndex::new(&points);
        let found: Vec<u32> = index
            .nearest([0.0, 0.0], 3, |_| true)
            .iter()
            .map(|n| n.index)
            .collect();
        assert_eq!(found, vec![2, 0, 1]);
        assert_eq!(index.nearest_one([0.0, 0.0], |i| i != 2).unwrap().index, 0);
        assert!(index.nearest_one([0.0, 0.0], |_| false).is_none());
        assert_eq!(index.within([0.0, 0.0], 1.0), vec![0, 1, 2, 3, 4]);
    }
}
