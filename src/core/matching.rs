//! Nearest-neighbour distances and how well two of their distributions match:
//! the distances from test units to their training units during
//! cross-validation, from the places where the model will be used
//! (prediction locations) to the data, and the Wasserstein-1 distance W
//! between the two (the match statistic of Linnenbrink et al. 2024).
//!
//! # Definitions
//! - **CV distance** of unit `i`: the Euclidean distance (distance CRS) from
//!   `i`'s point to the nearest point of a unit in its fold's training set
//!   (not in its test fold, not excluded from that fold).
//! - **Prediction distance** of a prediction location: the distance to the
//!   nearest unit's point.
//! - **W** between samples `a` and `b`: `∫ |F_a(r) − F_b(r)| dr` over the
//!   real line, `F` the empirical CDFs; 0 exactly when they coincide. It is
//!   what `scipy.stats.wasserstein_distance(a, b)` computes for 1-D samples.
//!
//! # How the CV distances are found
//! All ways give the same distances; they differ only in work.
//! - With at most [`COMPLEMENT_FOLDS`] folds and at least
//!   [`COMPLEMENT_UNITS`] units, from an index of each fold's complement,
//!   built one fold at a time.
//! - Otherwise through the neighbour index of all units, nearest first,
//!   skipping units of the test fold and excluded ones. With at most
//!   [`SKIP_BUDGET_FOLDS`] folds, a unit that skips [`SKIP_BUDGET`] units
//!   (deep inside a large spatial fold) is answered instead from one index
//!   per fold, visiting the other folds by the distance to their bounding
//!   boxes.

use std::sync::OnceLock;

use serde::Serialize;

use crate::core::folds::FoldSet;
use crate::core::neighbours::NeighbourIndex;
use crate::core::parallel::parallel_chunked;

/// Units skipped before a unit's CV distance is looked up fold by fold.
pub const SKIP_BUDGET: usize = 64;

/// Up to this many folds the fold-by-fold lookup is used; beyond, folds are
/// small (leave-one-out and its kin) and skipping is cheap.
pub const SKIP_BUDGET_FOLDS: usize = 64;

/// Up to this many folds, and from [`COMPLEMENT_UNITS`] units, every unit's
/// CV distance comes from an index of its fold's complement.
pub const COMPLEMENT_FOLDS: usize = 16;

/// See [`COMPLEMENT_FOLDS`].
pub const COMPLEMENT_UNITS: usize = 50_000;

/// Units per work item when distances are computed on several cores.
const CHUNK: usize = 4096;

/// The distance-matching record of a run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Matching {
    /// Prediction distance of every prediction location, in their order.
    #[serde(skip)]
    pub prediction: Vec<f64>,
    /// W between each repetition's CV distances and the prediction distances.
    pub w_per_repetition: Vec<f64>,
    /// W between the CV distances of all repetitions together and the
    /// prediction distances.
    pub w: f64,
    /// Median prediction distance.
    pub prediction_median: f64,
    /// Median CV distance over all repetitions.
    pub cv_median: f64,
}

impl Matching {
    /// The record of a run whose repetitions had these CV distances.
    pub fn new(prediction: Vec<f64>, cv: &[&[f64]]) -> Matching {
        let w_per_repetition = cv.iter().map(|d| wasserstein1(d, &prediction)).collect();
        let pooled: Vec<f64> = cv.iter().flat_map(|d| d.iter().copied()).collect();
        Matching {
            w: wasserstein1(&pooled, &prediction),
            w_per_repetition,
            prediction_median: median(&prediction),
            cv_median: median(&pooled),
            prediction,
        }
    }
}

fn median(values: &[f64]) -> f64 {
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    match sorted.len() {
        0 => f64::NAN,
        n if n % 2 == 1 => sorted[n / 2],
        n => (sorted[n / 2 - 1] + sorted[n / 2]) / 2.0,
    }
}

/// The Wasserstein-1 distance between the empirical distributions of `a`
/// and `b` (module doc); NaN when either is empty.
pub fn wasserstein1(a: &[f64], b: &[f64]) -> f64 {
    if a.is_empty() || b.is_empty() {
        return f64::NAN;
    }
    let mut a = a.to_vec();
    let mut b = b.to_vec();
    a.sort_by(f64::total_cmp);
    b.sort_by(f64::total_cmp);
    let (na, nb) = (a.len() as f64, b.len() as f64);
    let (mut i, mut j) = (0usize, 0usize);
    let mut total = 0.0;
    let mut at = a[0].min(b[0]);
    while i < a.len() || j < b.len() {
        let next = match (a.get(i), b.get(j)) {
            (Some(&x), Some(&y)) => x.min(y),
            (Some(&x), None) => x,
            (None, Some(&y)) => y,
            (None, None) => break,
        };
        // On [at, next) the CDFs are constant: F_a = i/na, F_b = j/nb.
        total += (i as f64 / na - j as f64 / nb).abs() * (next - at);
        while i < a.len() && a[i] == next {
            i += 1;
        }
        while j < b.len() && b[j] == next {
            j += 1;
        }
        at = next;
    }
    total
}

/// The prediction distance of every location (module doc).
pub fn prediction_distances(locations: &[[f64; 2]], index: &NeighbourIndex) -> Vec<f64> {
    chunked(locations.len(), |i| {
        index
            .nearest_one(locations[i], |_| true)
            .map_or(f64::NAN, |n| n.distance)
    })
}

/// Leave-one-out nearest-neighbour distances: each unit to its nearest other unit.
pub fn loo_distances(points: &[[f64; 2]], index: &NeighbourIndex) -> Vec<f64> {
    chunked(points.len(), |i| {
        index
            .nearest_one(points[i], |j| j as usize != i)
            .map_or(f64::NAN, |n| n.distance)
    })
}

/// The CV distance of every unit (module doc); NaN for a unit whose fold
/// has no training unit.
pub fn cv_distances(set: &FoldSet, points: &[[f64; 2]], index: &NeighbourIndex) -> Vec<f64> {
    if (set.k as usize) <= COMPLEMENT_FOLDS && points.len() >= COMPLEMENT_UNITS {
        return by_complement(set, points);
    }
    let all: Vec<u32> = (0..points.len() as u32).collect();
    cv_distances_of(set, points, index, &all)
}

/// Every unit's CV distance from an index of each fold's complement (the
/// units of the other folds), built one fold at a time: k indexes of about
/// n units each, one query per unit, whatever the shape of the folds.
fn by_complement(set: &FoldSet, points: &[[f64; 2]]) -> Vec<f64> {
    let mut distances = vec![f64::NAN; points.len()];
    for (fold, members) in set.test_units().into_iter().enumerate() {
        let others: Vec<u32> = (0..points.len() as u32)
            .filter(|&j| set.fold_of[j as usize] as usize != fold)
            .collect();
        let located: Vec<[f64; 2]> = others.iter().map(|&j| points[j as usize]).collect();
        let tree = NeighbourIndex::new(&located);
        let excluded = set.excluded_from(fold as u32);
        let found = chunked(members.len(), |position| {
            let at = points[members[position] as usize];
            tree.nearest_distance_within(
                at,
                |local| excluded.binary_search(&others[local as usize]).is_err(),
                usize::MAX,
            )
            .ok()
            .flatten()
            .unwrap_or(f64::NAN)
        });
        for (&unit, d) in members.iter().zip(found) {
            distances[unit as usize] = d;
        }
    }
    distances
}

/// The CV distances of the listed units only, in the order listed.
pub fn cv_distances_of(
    set: &FoldSet,
    points: &[[f64; 2]],
    index: &NeighbourIndex,
    units: &[u32],
) -> Vec<f64> {
    let k = set.k as usize;
    let per_fold: OnceLock<Vec<(NeighbourIndex, Vec<u32>)>> = OnceLock::new();
    let by_fold = || {
        per_fold.get_or_init(|| {
            let members = set.test_units();
            members
                .into_iter()
                .map(|units| {
                    let own: Vec<[f64; 2]> = units.iter().map(|&u| points[u as usize]).collect();
                    (NeighbourIndex::new(&own), units)
                })
                .collect()
        })
    };
    chunked(units.len(), |position| {
        let unit = units[position] as usize;
        let fold = set.fold_of[unit];
        let excluded = set.excluded_from(fold);
        let keep = |j: u32| set.fold_of[j as usize] != fold && excluded.binary_search(&j).is_err();
        let budget = if k <= SKIP_BUDGET_FOLDS {
            SKIP_BUDGET
        } else {
            usize::MAX
        };
        match index.nearest_distance_within(points[unit], keep, budget) {
            Ok(found) => found.unwrap_or(f64::NAN),
            Err(_) => {
                let at = points[unit];
                let folds = by_fold();
                let mut order: Vec<(f64, usize)> = folds
                    .iter()
                    .enumerate()
                    .filter(|&(g, _)| g != fold as usize)
                    .map(|(g, (tree, _))| (tree.envelope_distance_2(at), g))
                    .collect();
                order.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
                let mut best = f64::INFINITY;
                for (envelope_2, g) in order {
                    if envelope_2 >= best * best {
                        break;
                    }
                    let (tree, members) = &folds[g];
                    if let Ok(Some(d)) = tree.nearest_distance_within(
                        at,
                        |local| excluded.binary_search(&members[local as usize]).is_err(),
                        usize::MAX,
                    ) {
                        best = best.min(d);
                    }
                }
                if best.is_finite() {
                    best
                } else {
                    f64::NAN
                }
            }
        }
    })
}

/// `f(i)` for `i` in `0..n`, in order, computed on the machine's cores.
fn chunked(n: usize, f: impl Fn(usize) -> f64 + Sync) -> Vec<f64> {
    parallel_chunked(n, CHUNK, f)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::folds::FoldSet;
    use approx::assert_relative_eq;

    use crate::core::diagnostics::contiguity::fixture as loaders;

    #[test]
    fn w_matches_the_scipy_values_of_the_references() {
        // REFERENCES.md §6.5 [COMP scipy.stats.wasserstein_distance]: both 1/3.
        assert_relative_eq!(
            wasserstein1(&[1.0, 2.0, 3.0], &[1.0, 2.0, 4.0]),
            1.0 / 3.0,
            epsilon = 1e-15
        );
        assert_relative_eq!(
            wasserstein1(&[0.0, 0.0, 1.0], &[0.0, 1.0, 1.0]),
            1.0 / 3.0,
            epsilon = 1e-15
        );
        assert_eq!(wasserstein1(&[2.0, 1.0], &[1.0, 2.0]), 0.0);
        // W of a shift by c is c (common practice, no source).
        assert_relative_eq!(
            wasserstein1(&[0.0, 1.0, 5.0], &[2.5, 3.5, 7.5]),
            2.5,
            epsilon = 1e-12
        );
    }

    #[test]
    fn columbus_grid_against_loo_distances_gives_the_reference_w() {
        // REFERENCES.md §2.4 [COMP scipy 1.17.1 cKDTree + scipy.stats]: centroids
        // of the 49 Columbus polygons (shapely); prediction points a 20 × 20
        // grid np.linspace(min, max, 20) over the centroids' bounding box;
        // LOO NND min 0.127628, median 0.316369, mean 0.329114, max 0.618864;
        // grid NND mean 0.609198, median 0.409217; W1 = 0.314220857.
        use geo::Centroid;
        let points: Vec<[f64; 2]> = loaders::columbus()
            .iter()
            .map(|u| {
                let c = u.polygon.centroid().unwrap();
                [c.x(), c.y()]
            })
            .collect();
        let index = NeighbourIndex::new(&points);
        let loo = loo_distances(&points, &index);
        let stat = |v: &[f64]| {
            let mut s = v.to_vec();
            s.sort_by(f64::total_cmp);
            (
                s[0],
                s[s.len() / 2],
                s.iter().sum::<f64>() / s.len() as f64,
                s[s.len() - 1],
            )
        };
        let (min, median, mean, max) = stat(&loo);
        assert_relative_eq!(min, 0.127628, epsilon = 1e-6);
        assert_relative_eq!(median, 0.316369, epsilon = 1e-6);
        assert_relative_eq!(mean, 0.329114, epsilon = 1e-6);
        assert_relative_eq!(max, 0.618864, epsilon = 1e-6);
        // The grid spans the polygons' bounding box (REFERENCES §2.1:
        // [5.87490702, 10.78862953, 11.28742027, 14.74244976]), computed here.
        use geo::BoundingRect;
        let bounds = loaders::columbus()
            .iter()
            .filter_map(|u| u.polygon.bounding_rect())
            .fold([f64::MAX, f64::MAX, f64::MIN, f64::MIN], |b, r| {
                [
                    b[0].min(r.min().x),
                    b[1].min(r.min().y),
                    b[2].max(r.max().x),
                    b[3].max(r.max().y),
                ]
            });
        assert_relative_eq!(bounds[0], 5.87490702, epsilon = 1e-8);
        assert_relative_eq!(bounds[3], 14.74244976, epsilon = 1e-8);
        let (x0, y0, x1, y1) = (bounds[0], bounds[1], bounds[2], bounds[3]);
        let linspace = |a: f64, b: f64, i: usize| a + (b - a) * i as f64 / 19.0;
        let grid: Vec<[f64; 2]> = (0..20)
            .flat_map(|i| (0..20).map(move |j| [linspace(x0, x1, i), linspace(y0, y1, j)]))
            .collect();
        let to_data = prediction_distances(&grid, &index);
        let grid_mean = to_data.iter().sum::<f64>() / 400.0;
        assert_relative_eq!(grid_mean, 0.609198, epsilon = 1e-6);
        assert_relative_eq!(wasserstein1(&to_data, &loo), 0.314220857, epsilon = 1e-9);
        // Leave-one-out folds give the same CV distances as the LOO distances.
        let set = FoldSet::plain(49, (0..49).collect());
        assert_eq!(cv_distances(&set, &points, &index), loo);
    }

    #[test]
    fn cv_distances_skip_the_test_fold_and_exclusions_by_either_path() {
        // A 60 × 60 lattice split into two halves (x < 30 and x ≥ 30): a unit
        // at column c of the left half is 30 − c spacings from the right half
        // (hand computation), so deep units exhaust the skip budget.
        let points: Vec<[f64; 2]> = (0..3600)
            .map(|i| [(i % 60) as f64, (i / 60) as f64])
            .collect();
        let index = NeighbourIndex::new(&points);
        let fold_of: Vec<u32> = points.iter().map(|p| u32::from(p[0] >= 30.0)).collect();
        let mut set = FoldSet::plain(2, fold_of);
        let d = cv_distances(&set, &points, &index);
        for (i, p) in points.iter().enumerate() {
            let expected = if p[0] < 30.0 {
                30.0 - p[0]
            } else {
                p[0] - 29.0
            };
            assert_eq!(d[i], expected, "unit {i}");
        }
        // The complement indexes give the same distances.
        assert_eq!(by_complement(&set, &points), d);
        // Excluding column 30 from fold 0's training set adds one spacing.
        set.excluded = vec![(0..3600u32).filter(|&i| i % 60 == 30).collect(), vec![]];
        let d = cv_distances(&set, &points, &index);
        assert_eq!(by_complement(&set, &points), d);
        assert_eq!(d[0], 31.0);
        assert_eq!(d[29], 2.0);
        assert_eq!(d[30], 1.0);
    }
}
