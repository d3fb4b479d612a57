//! k-means of points in the plane: k-means++ seeding and Lloyd iterations,
//! best of several starts, every random draw from a [`FoldRng`].
//!
//! Arthur, D. & Vassilvitskii, S. (2007). k-means++: the advantages of
//! careful seeding. *Proceedings of the 18th annual ACM-SIAM Symposium on
//! Discrete Algorithms (SODA)*, 1027–1035. Lloyd, S. P. (1982). Least squares
//! quantization in PCM. *IEEE Transactions on Information Theory* 28(2):
//! 129–137. (Bibliographic details from memory; the seeding rule below is
//! the paper's D² weighting as it is commonly stated.)
//!
//! # Rules
//! - **Seeding (one start).** The first centre is the unit at a uniform index
//!   ([`FoldRng::index_below`]). Each next centre is drawn with probability
//!   proportional to `D(x)²`, the squared distance from unit `x` to its
//!   nearest centre so far: with `u` from [`FoldRng::unit_interval`], the
//!   unit chosen is the first `i` (in id order) whose running sum of `D²`
//!   (summed pairwise in a balanced binary tree over the units, so the sums
//!   are the same on every machine) exceeds `u · ΣD²`. Units at a centre
//!   have weight 0 and are never drawn again, so the centres are distinct
//!   points; fewer distinct points than clusters is an error.
//! - **Starts.** All starts are seeded first, in order, from the one stream;
//!   then each runs its iterations (which draw nothing).
//! - **Lloyd iteration.** Every unit goes to its nearest centre (squared
//!   Euclidean distance; ties to the lowest cluster number); each centre
//!   moves to the mean of its units (summed in id order within blocks of
//!   8192 units, the blocks' sums added in order). A cluster left
//!   empty takes as its new centre the unit farthest from its own centre
//!   (ties to the lowest id; several empty clusters take the farthest units
//!   in turn). Iterations stop when no unit changes cluster, or after
//!   `max_iterations`.
//! - **Best start.** The smallest within-cluster sum of squares (squared
//!   distances of units to the mean of their cluster), ties to the earliest.
//!
//! Units that provably keep their cluster are not compared with every centre
//! again ([`super::hamerly`]); the assignments are those of plain Lloyd.
//!
//! # Complexity
//! Seeding O(n·q) at worst (less typically: after the first centres a new
//! centre only visits the units within reach of it, found through the
//! neighbour index); each iteration O(n) for the bounds plus O(q) or O(log q)
//! (more than 512 clusters: the centres in an R-tree) for each unit compared
//! in full. Work is spread over the cores; results do not depend on their
//! number.

use super::hamerly::{cluster_means, Iterations};
use crate::core::folds::FoldRng;
use crate::core::neighbours::NeighbourIndex;
use crate::core::parallel::parallel_map;
use crate::error::Error;

/// Up to this many clusters, units find their centre by comparing all.
const BRUTE_CLUSTERS: usize = 32;

/// Units per work item.
const CHUNK: usize = 8192;

/// What to cluster for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Settings {
    /// Number of clusters.
    pub clusters: usize,
    /// Independent starts; the best is kept.
    pub starts: usize,
    /// Most Lloyd iterations of a start.
    pub max_iterations: u32,
}

/// A clustering.
#[derive(Debug, Clone, PartialEq)]
pub struct Clustering {
    /// Each unit's cluster, in id order.
    pub cluster_of: Vec<u32>,
    /// Each cluster's centre (the mean of its units).
    pub centres: Vec<[f64; 2]>,
    /// Within-cluster sum of squares.
    pub wcss: f64,
    /// Lloyd iterations of the kept start.
    pub iterations: u32,
    /// Whether the kept start stopped because no unit changed cluster.
    pub converged: bool,
    /// Which start was kept (0-based).
    pub start: usize,
}

impl Clustering {
    /// Units per cluster.
    pub fn sizes(&self) -> Vec<usize> {
        let mut sizes = vec![0usize; self.centres.len()];
        for &c in &self.cluster_of {
            sizes[c as usize] += 1;
        }
        sizes
    }
}

fn distance_2(a: [f64; 2], b: [f64; 2]) -> f64 {
    let dx = a[0] - b[0];
    let dy = a[1] - b[1];
    dx * dx + dy * dy
}

/// Clusters `points` (indexed by `index`) by the module rules.
///
/// # Errors
/// [`Error::Folds`] when there are fewer units, or fewer distinct points,
/// than clusters.
pub fn kmeans(
    points: &[[f64; 2]],
    index: &NeighbourIndex,
    settings: Settings,
    rng: &mut FoldRng,
) -> Result<Clustering, Error> {
    let q = settings.clusters;
    if q == 0 || points.len() < q {
        return Err(Error::Folds(format!(
            "{} units cannot make {q} clusters",
            points.len()
        )));
    }
    let clock = std::time::Instant::now();
    let mut seeds = Vec::with_capacity(settings.starts.max(1));
    for _ in 0..settings.starts.max(1) {
        seeds.push(seed(points, index, q, rng)?);
    }
    tracing::debug!(
        clusters = q,
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "k-means++ seeding"
    );
    let mut best: Option<Clustering> = None;
    for (start, centres) in seeds.into_iter().enumerate() {
        let clock = std::time::Instant::now();
        let run = lloyd(points, centres, settings.max_iterations, start);
        tracing::debug!(
            clusters = q,
            iterations = run.iterations,
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "Lloyd iterations"
        );
        if best.as_ref().is_none_or(|b| run.wcss < b.wcss) {
            best = Some(run);
        }
    }
    best.ok_or_else(|| Error::Internal("k-means ran no start".into()))
}

/// k-means++ seeding of `q` centres.
fn seed(
    points: &[[f64; 2]],
    index: &NeighbourIndex,
    q: usize,
    rng: &mut FoldRng,
) -> Result<Vec<[f64; 2]>, Error> {
    let n = points.len();
    let first = points[rng.index_below(n)];
    let mut centres = vec![first];
    let mut weights = WeightTree::new(
        &points
            .iter()
            .map(|&p| distance_2(p, first))
            .collect::<Vec<_>>(),
    );
    while centres.len() < q {
        let total = weights.total();
        if !(total > 0.0 && total.is_finite()) {
            return Err(Error::Folds(format!(
                "the units stand on only {} distinct locations, fewer than the {q} clusters asked; \
                 use fewer --clusters or --folds",
                centres.len()
            )));
        }
        let target = rng.unit_interval() * total;
        let chosen = weights.find(target);
        let centre = points[chosen];
        centres.push(centre);
        if q <= BRUTE_CLUSTERS {
            for (i, &p) in points.iter().enumerate() {
                let d = distance_2(p, centre);
                if d < weights.get(i) {
                    weights.set(i, d);
                }
            }
        } else {
            let reach = weights.largest().sqrt() * (1.0 + 1e-9);
            let mut changed: Vec<(usize, f64)> = Vec::new();
            index.for_each_within(centre, reach, |i| {
                let i = i as usize;
                let d = distance_2(points[i], centre);
                if d < weights.get(i) {
                    changed.push((i, d));
                }
            });
            for (i, d) in changed {
                weights.set(i, d);
            }
        }
    }
    Ok(centres)
}

/// Lloyd iterations from `centres` (module rules), skipping the units that
/// provably keep their cluster ([`super::hamerly`]).
fn lloyd(
    points: &[[f64; 2]],
    mut centres: Vec<[f64; 2]>,
    max_iterations: u32,
    start: usize,
) -> Clustering {
    let q = centres.len();
    let mut state = Iterations::new(points, &centres);
    let mut iterations = 0;
    let mut converged = false;
    while iterations < max_iterations {
        iterations += 1;
        let next = means(points, state.cluster_of(), &centres);
        let changed = state.step(points, &centres, &next);
        centres = next;
        if !changed {
            converged = true;
            break;
        }
    }
    let cluster_of = state.cluster_of().to_vec();
    let centres = means(points, &cluster_of, &centres);
    let wcss = points
        .iter()
        .zip(&cluster_of)
        .map(|(&p, &c)| distance_2(p, centres[c as usize]))
        .sum();
    debug_assert_eq!(centres.len(), q);
    Clustering {
        cluster_of,
        centres,
        wcss,
        iterations,
        converged,
        start,
    }
}

/// Each unit's nearest centre, ties to the lowest cluster number.
pub fn nearest_centres(points: &[[f64; 2]], centres: &[[f64; 2]]) -> Vec<u32> {
    let tree = (centres.len() > BRUTE_CLUSTERS).then(|| NeighbourIndex::new(centres));
    let chunks = points.len().div_ceil(CHUNK);
    parallel_map(chunks, |c| {
        points[c * CHUNK..((c + 1) * CHUNK).min(points.len())]
            .iter()
            .map(|&p| match &tree {
                Some(tree) => tree.nearest_one(p, |_| true).map_or(0, |n| n.index),
                None => brute_nearest(p, centres),
            })
            .collect::<Vec<u32>>()
    })
    .into_iter()
    .flatten()
    .collect()
}

/// The nearest centre by comparing all, ties to the lowest number.
pub fn brute_nearest(p: [f64; 2], centres: &[[f64; 2]]) -> u32 {
    let mut best = 0;
    let mut best_d = f64::INFINITY;
    for (c, &centre) in centres.iter().enumerate() {
        let d = distance_2(p, centre);
        if d < best_d {
            best_d = d;
            best = c;
        }
    }
    best as u32
}

/// The mean of each cluster's units ([`cluster_means`]); empty clusters get
/// the farthest units.
pub(super) fn means(points: &[[f64; 2]], cluster_of: &[u32], old: &[[f64; 2]]) -> Vec<[f64; 2]> {
    let q = old.len();
    let found = cluster_means(points, cluster_of, q);
    let mut centres: Vec<[f64; 2]> = found
        .iter()
        .zip(old)
        .map(|(mean, &previous)| mean.unwrap_or(previous))
        .collect();
    let empty: Vec<usize> = (0..q).filter(|&c| found[c].is_none()).collect();
    if !empty.is_empty() {
        let mut far: Vec<(f64, usize)> = points
            .iter()
            .zip(cluster_of)
            .enumerate()
            .map(|(i, (&p, &c))| (distance_2(p, old[c as usize]), i))
            .collect();
        far.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
        for (c, (_, unit)) in empty.into_iter().zip(far) {
            centres[c] = points[unit];
        }
    }
    centres
}

/// Non-negative weights with their sums and maxima in a balanced binary
/// tree: set one, read the total and the largest, and find the first index
/// whose running sum exceeds a target, each in O(log n).
struct WeightTree {
    size: usize,
    sums: Vec<f64>,
    maxima: Vec<f64>,
}

impl WeightTree {
    fn new(weights: &[f64]) -> WeightTree {
        let size = weights.len().next_power_of_two().max(1);
        let mut sums = vec![0.0; 2 * size];
        let mut maxima = vec![0.0; 2 * size];
        sums[size..size + weights.len()].copy_from_slice(weights);
        maxima[size..size + weights.len()].copy_from_slice(weights);
        for node in (1..size).rev() {
            sums[node] = sums[2 * node] + sums[2 * node + 1];
            maxima[node] = maxima[2 * node].max(maxima[2 * node + 1]);
        }
        WeightTree { size, sums, maxima }
    }

    fn get(&self, i: usize) -> f64 {
        self.sums[self.size + i]
    }

    fn set(&mut self, i: usize, weight: f64) {
        let mut node = self.size + i;
        self.sums[node] = weight;
        self.maxima[node] = weight;
        node /= 2;
        while node >= 1 {
            self.sums[node] = self.sums[2 * node] + self.sums[2 * node + 1];
            self.maxima[node] = self.maxima[2 * node].max(self.maxima[2 * node + 1]);
            node /= 2;
        }
    }

    fn total(&self) -> f64 {
        self.sums[1]
    }

    fn largest(&self) -> f64 {
        self.maxima[1]
    }

    /// The first index whose running sum exceeds `target` (0 ≤ target <
    /// total): descending, left when the target is below the left sum. A leaf
    /// of weight 0 reached by rounding gives way to the nearest positive one
    /// before it (or after it, when there is none before).
    fn find(&self, target: f64) -> usize {
        let mut node = 1;
        let mut rest = target;
        while node < self.size {
            let left = self.sums[2 * node];
            if rest < left {
                node *= 2;
            } else {
                rest -= left;
                node = 2 * node + 1;
            }
        }
        let found = node - self.size;
        if self.get(found) > 0.0 {
            return found;
        }
        let n = self.size;
        (0..found)
            .rev()
            .find(|&i| self.get(i) > 0.0)
            .or_else(|| (found..n).find(|&i| self.get(i) > 0.0))
            .unwrap_or(found)
    }
}

#[cfg(test)]
mod tests;
