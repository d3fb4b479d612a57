//! Lloyd's iterations with distance bounds, so that units which provably
//! keep their cluster are not compared with every centre again.
//!
//! Hamerly, G. (2010). Making k-means even faster. *Proceedings of the 2010
//! SIAM International Conference on Data Mining*, 130–140 (from memory).
//! Each unit keeps an upper bound `u` on the distance to its own centre and
//! a lower bound `l` on the distance to every other centre. After the
//! centres move, `u` grows by its centre's move and `l` shrinks by the
//! largest move of another centre; with `s(c)` half the distance from centre
//! `c` to its nearest other centre, a unit with `u < max(s(c), l)` cannot
//! change cluster, nor tie with another centre (then the other centre is
//! strictly farther), so the rule "nearest centre, ties to the lowest
//! number" gives the same answer without looking.
//!
//! # Same result as plain Lloyd
//! A unit that is not skipped is compared with every centre by the very
//! comparison plain Lloyd uses ([`super::lloyd::brute_nearest`], or the centre
//! index for many clusters), so only the skipping could differ. Bounds are
//! sums of rounded distances; a unit is skipped only when `u` is below the
//! bound by more than a relative [`MARGIN`] (far above the rounding of a few
//! hundred sums), so near-ties are always compared in full. The tests check
//! the assignments against plain Lloyd.

use rayon::prelude::*;

use crate::core::neighbours::NeighbourIndex;

/// Relative margin a skip needs (see the module doc).
pub const MARGIN: f64 = 1e-9;

/// Above this many clusters, full comparisons go through an index of the
/// centres rather than every centre.
const INDEXED_CLUSTERS: usize = 512;

/// Units per work item.
const CHUNK: usize = 8192;

fn distance(a: [f64; 2], b: [f64; 2]) -> f64 {
    let dx = a[0] - b[0];
    let dy = a[1] - b[1];
    (dx * dx + dy * dy).sqrt()
}

/// A unit's cluster and its bounds.
#[derive(Debug, Clone, Copy)]
struct Bound {
    cluster: u32,
    upper: f64,
    lower: f64,
}

/// The nearest centre (ties to the lowest number) with its distance, and
/// the distance to the second nearest.
fn nearest_two(p: [f64; 2], centres: &[[f64; 2]], index: Option<&NeighbourIndex>) -> Bound {
    if let Some(index) = index {
        let found = index.nearest(p, 2, |_| true);
        let first = found.first().copied();
        return Bound {
            cluster: first.map_or(0, |n| n.index),
            upper: first.map_or(0.0, |n| n.distance),
            lower: found.get(1).map_or(f64::INFINITY, |n| n.distance),
        };
    }
    let mut best = 0usize;
    let mut best_d2 = f64::INFINITY;
    let mut second_d2 = f64::INFINITY;
    for (c, &centre) in centres.iter().enumerate() {
        let dx = p[0] - centre[0];
        let dy = p[1] - centre[1];
        let d2 = dx * dx + dy * dy;
        if d2 < best_d2 {
            second_d2 = best_d2;
            best_d2 = d2;
            best = c;
        } else if d2 < second_d2 {
            second_d2 = d2;
        }
    }
    Bound {
        cluster: best as u32,
        upper: best_d2.sqrt(),
        lower: second_d2.sqrt(),
    }
}

/// Half the distance from each centre to its nearest other centre.
fn half_gaps(centres: &[[f64; 2]], index: Option<&NeighbourIndex>) -> Vec<f64> {
    centres
        .iter()
        .enumerate()
        .map(|(c, &centre)| {
            let nearest = match index {
                Some(index) => index
                    .nearest_one(centre, |j| j as usize != c)
                    .map_or(f64::INFINITY, |n| n.distance),
                None => centres
                    .iter()
                    .enumerate()
                    .filter(|&(j, _)| j != c)
                    .map(|(_, &other)| distance(centre, other))
                    .fold(f64::INFINITY, f64::min),
            };
            nearest / 2.0
        })
        .collect()
}

/// The state of the iterations over all units.
pub struct Iterations {
    bounds: Vec<Bound>,
    cluster_of: Vec<u32>,
}

impl Iterations {
    /// Assigns every unit to its nearest centre.
    pub fn new(points: &[[f64; 2]], centres: &[[f64; 2]]) -> Iterations {
        let index = (centres.len() > INDEXED_CLUSTERS).then(|| NeighbourIndex::new(centres));
        let bounds: Vec<Bound> = points
            .par_iter()
            .with_min_len(CHUNK)
            .map(|&p| nearest_two(p, centres, index.as_ref()))
            .collect();
        let cluster_of = bounds.iter().map(|b| b.cluster).collect();
        Iterations { bounds, cluster_of }
    }

    /// Each unit's cluster.
    pub fn cluster_of(&self) -> &[u32] {
        &self.cluster_of
    }

    /// Moves to the new centres (`old` → `new`) and reassigns; returns
    /// whether any unit changed cluster.
    pub fn step(&mut self, points: &[[f64; 2]], old: &[[f64; 2]], new: &[[f64; 2]]) -> bool {
        let drift: Vec<f64> = old.iter().zip(new).map(|(&a, &b)| distance(a, b)).collect();
        let (mut top, mut top_at, mut runner_up) = (0.0f64, usize::MAX, 0.0f64);
        for (c, &d) in drift.iter().enumerate() {
            if d > top {
                runner_up = top;
                top = d;
                top_at = c;
            } else if d > runner_up {
                runner_up = d;
            }
        }
        let index = (new.len() > INDEXED_CLUSTERS).then(|| NeighbourIndex::new(new));
        let gaps = half_gaps(new, index.as_ref());
        self.bounds
            .par_chunks_mut(CHUNK)
            .zip(self.cluster_of.par_chunks_mut(CHUNK))
            .zip(points.par_chunks(CHUNK))
            .map(|((bounds, clusters), points)| {
                let mut changed = false;
                for ((bound, cluster), &p) in bounds.iter_mut().zip(clusters.iter_mut()).zip(points)
                {
                    let own = bound.cluster as usize;
                    let other_drift = if own == top_at { runner_up } else { top };
                    bound.upper += drift[own];
                    bound.lower -= other_drift;
                    let limit = gaps[own].max(bound.lower) * (1.0 - MARGIN);
                    if bound.upper * (1.0 + MARGIN) < limit {
                        continue;
                    }
                    bound.upper = distance(p, new[own]);
                    if bound.upper * (1.0 + MARGIN) < limit {
                        continue;
                    }
                    let fresh = nearest_two(p, new, index.as_ref());
                    changed |= fresh.cluster != bound.cluster;
                    *bound = fresh;
                    *cluster = fresh.cluster;
                }
                changed
            })
            .reduce(|| false, |a, b| a | b)
    }
}

/// The mean of each cluster's units: sums over blocks of 8192 units in
/// id order, the blocks' sums then added in block order (the same on any
/// number of threads). A cluster without units keeps `None`.
pub fn cluster_means(points: &[[f64; 2]], cluster_of: &[u32], q: usize) -> Vec<Option<[f64; 2]>> {
    let partial: Vec<Vec<[f64; 3]>> = points
        .par_chunks(CHUNK)
        .zip(cluster_of.par_chunks(CHUNK))
        .map(|(points, clusters)| {
            let mut sums = vec![[0.0f64; 3]; q];
            for (&p, &c) in points.iter().zip(clusters) {
                let sum = &mut sums[c as usize];
                sum[0] += p[0];
                sum[1] += p[1];
                sum[2] += 1.0;
            }
            sums
        })
        .collect();
    let mut total = vec![[0.0f64; 3]; q];
    for sums in partial {
        for (t, s) in total.iter_mut().zip(sums) {
            t[0] += s[0];
            t[1] += s[1];
            t[2] += s[2];
        }
    }
    total
        .into_iter()
        .map(|[x, y, n]| (n > 0.0).then(|| [x / n, y / n]))
        .collect()
}
