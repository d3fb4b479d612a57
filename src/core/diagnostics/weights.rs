//! Sparse spatial weights: for each unit, its neighbours and the weight of
//! each link, stored row by row (compressed sparse rows).
//!
//! Built from neighbour pairs (contiguity, whether from
//! [`contiguity`](super::contiguity) or from a PostGIS self-join), from the k
//! nearest neighbours, or from a distance band. Every link of a row carries
//! the same weight: 1 for binary weights, `1/(number of neighbours)` for
//! row-standardised weights (the default, as is usual in spatial econometrics,
//! e.g. Anselin 1988, *Spatial Econometrics*, Kluwer).
//!
//! # Islands
//! A unit without neighbours keeps an empty (all-zero) row, under either
//! transform; it is not dropped. So S0 is below n for row-standardised weights
//! with islands, islands still count in n and in Σz² of Moran's I, and
//! [`Weights::islands`] reports how many there are. Weights with no link at
//! all are refused where a statistic needs S0 > 0.
//!
//! # Order
//! Neighbours are stored in ascending index order within each row, without
//! duplicates and never the unit itself, so the same neighbour sets give the
//! same `Weights` whatever order they arrived in.

use rayon::prelude::*;
use serde::Serialize;

use super::{check_points, DiagnosticsError};
use crate::core::neighbours::NeighbourIndex;

/// How link weights are scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Transform {
    /// Each row sums to 1: every link of unit i weighs `1/|N(i)|`.
    #[default]
    Row,
    /// Every link weighs 1.
    Binary,
}

/// The weight sums of Cliff & Ord (1981, *Spatial Processes: Models &
/// Applications*, Pion): `S0 = Σᵢⱼ wᵢⱼ`, `S1 = ½ Σᵢⱼ (wᵢⱼ + wⱼᵢ)²`,
/// `S2 = Σᵢ (wᵢ· + w·ᵢ)²`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct WeightSums {
    /// Sum of all weights.
    pub s0: f64,
    /// Half the sum of squared symmetrised weights.
    pub s1: f64,
    /// Sum over units of (row sum + column sum)².
    pub s2: f64,
}

/// Spatial weights over `n` units in compressed sparse rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Weights {
    /// `offsets[i]..offsets[i + 1]` indexes the neighbours of unit i.
    offsets: Vec<usize>,
    /// Neighbour indices, ascending within each row.
    neighbours: Vec<u32>,
    /// The weight of every link of row i.
    row_weight: Vec<f64>,
    transform: Transform,
}

impl Weights {
    /// Weights from undirected neighbour pairs `(i, j)` over `n` units: each
    /// pair links i to j and j to i. A pair given twice, or in both
    /// directions, is one link each way, so pairs listed once (`i < j`, as a
    /// self-join with `a.id < b.id` returns them) and pairs listed both ways
    /// build identical weights.
    ///
    /// # Errors
    /// [`DiagnosticsError::BadPairs`] for a pair of a unit with itself or an
    /// index not below `n`, listing every bad pair (up to 20, then a count).
    pub fn from_pairs(
        n: usize,
        pairs: &[(u32, u32)],
        transform: Transform,
    ) -> Result<Weights, DiagnosticsError> {
        let mut problems = Vec::new();
        let mut bad = 0usize;
        for &(i, j) in pairs {
            let problem = if i == j {
                Some(format!("unit {i} is paired with itself"))
            } else if i as usize >= n || j as usize >= n {
                Some(format!("pair ({i}, {j}) names a unit beyond the {n} units"))
            } else {
                None
            };
            if let Some(problem) = problem {
                bad += 1;
                if problems.len() < 20 {
                    problems.push(problem);
                }
            }
        }
        if bad > 0 {
            if bad > problems.len() {
                problems.push(format!("and {} more", bad - problems.len()));
            }
            return Err(DiagnosticsError::BadPairs { problems });
        }
        let mut rows = vec![Vec::new(); n];
        for &(i, j) in pairs {
            rows[i as usize].push(j);
            rows[j as usize].push(i);
        }
        Ok(Weights::from_rows(rows, transform))
    }

    /// Weights from each unit's neighbour list (directed: `rows[i]` lists the
    /// neighbours of i, which need not list i back). Rows are sorted and
    /// deduplicated.
    ///
    /// # Errors
    /// [`DiagnosticsError::BadPairs`] when a row names its own unit or an
    /// index not below `rows.len()`.
    pub fn from_neighbour_lists(
        rows: Vec<Vec<u32>>,
        transform: Transform,
    ) -> Result<Weights, DiagnosticsError> {
        let n = rows.len();
        let mut problems = Vec::new();
        let mut bad = 0usize;
        for (i, row) in rows.iter().enumerate() {
            for &j in row {
                if j as usize == i || j as usize >= n {
                    bad += 1;
                    if problems.len() < 20 {
                        problems.push(if j as usize == i {
                            format!("unit {i} lists itself as a neighbour")
                        } else {
                            format!("unit {i} lists neighbour {j} beyond the {n} units")
                        });
                    }
                }
            }
        }
        if bad > 0 {
            if bad > problems.len() {
                problems.push(format!("and {} more", bad - problems.len()));
            }
            return Err(DiagnosticsError::BadPairs { problems });
        }
        Ok(Weights::from_rows(rows, transform))
    }

    /// The k nearest neighbours of each point (Euclidean, in the points'
    /// units), the point itself excluded; equal distances go to the lower index
    /// ([`NeighbourIndex::nearest`]). The result is asymmetric in general
    /// (j among i's nearest does not make i among j's). Coincident points are
    /// neighbours at distance 0.
    ///
    /// # Complexity
    /// O(n log n) to build the R*-tree and about O(n (k + log n)) for the
    /// queries, run in parallel; O(n k) memory.
    ///
    /// # Errors
    /// [`DiagnosticsError::BadParameter`] when k is 0 or not below the number
    /// of points; [`DiagnosticsError::NonFinite`] for a non-finite coordinate.
    pub fn k_nearest(
        points: &[[f64; 2]],
        k: usize,
        transform: Transform,
    ) -> Result<Weights, DiagnosticsError> {
        check_points(points)?;
        if k == 0 || k >= points.len() {
            return Err(DiagnosticsError::BadParameter {
                name: "k (nearest neighbours)",
                value: k.to_string(),
                problem: format!(
                    "k must be at least 1 and below the number of units ({})",
                    points.len()
                ),
            });
        }
        Ok(Weights::from_point_queries(
            points,
            transform,
            |index, i| {
                index
                    .nearest(points[i], k, |j| j as usize != i)
                    .into_iter()
                    .map(|neighbour| neighbour.index)
                    .collect()
            },
        ))
    }

    /// Binary distance-band neighbours: j is a neighbour of i when
    /// `0 ≤ d(i, j) ≤ distance` and `j ≠ i` (squared distances compared, as
    /// [`NeighbourIndex::within`]). Symmetric. A band shorter than the usual
    /// spacing leaves many islands: check [`Weights::islands`].
    ///
    /// # Complexity
    /// O(n log n + links), run in parallel.
    ///
    /// # Errors
    /// [`DiagnosticsError::BadParameter`] for a negative or non-finite
    /// distance; [`DiagnosticsError::NonFinite`] for a non-finite coordinate.
    pub fn distance_band(
        points: &[[f64; 2]],
        distance: f64,
        transform: Transform,
    ) -> Result<Weights, DiagnosticsError> {
        check_points(points)?;
        if !(distance.is_finite() && distance >= 0.0) {
            return Err(DiagnosticsError::BadParameter {
                name: "band distance",
                value: distance.to_string(),
                problem: "the band must be a finite distance ≥ 0 in the units' CRS".into(),
            });
        }
        Ok(Weights::from_point_queries(
            points,
            transform,
            |index, i| {
                let mut row = index.within(points[i], distance);
                row.retain(|&j| j as usize != i);
                row
            },
        ))
    }

    /// Builds from one neighbour query per point over an R*-tree of the
    /// points, run in parallel; `query` must return indices other than i.
    fn from_point_queries(
        points: &[[f64; 2]],
        transform: Transform,
        query: impl Fn(&NeighbourIndex, usize) -> Vec<u32> + Sync,
    ) -> Weights {
        let index = NeighbourIndex::new(points);
        let rows = (0..points.len())
            .into_par_iter()
            .map(|i| query(&index, i))
            .collect();
        Weights::from_rows(rows, transform)
    }

    /// Builds from valid rows (indices below n, no self links).
    fn from_rows(mut rows: Vec<Vec<u32>>, transform: Transform) -> Weights {
        let n = rows.len();
        let mut offsets = Vec::with_capacity(n + 1);
        offsets.push(0usize);
        let mut neighbours = Vec::with_capacity(rows.iter().map(Vec::len).sum());
        for row in &mut rows {
            row.sort_unstable();
            row.dedup();
            neighbours.extend_from_slice(row);
            offsets.push(neighbours.len());
        }
        let mut weights = Weights {
            offsets,
            neighbours,
            row_weight: Vec::new(),
            transform,
        };
        weights.row_weight = weights.row_weights_for(transform);
        weights
    }

    fn row_weights_for(&self, transform: Transform) -> Vec<f64> {
        (0..self.n())
            .map(|i| match (transform, self.degree(i)) {
                (_, 0) => 0.0,
                (Transform::Binary, _) => 1.0,
                (Transform::Row, d) => 1.0 / d as f64,
            })
            .collect()
    }

    /// The same links under another transform.
    pub fn with_transform(mut self, transform: Transform) -> Weights {
        self.row_weight = self.row_weights_for(transform);
        self.transform = transform;
        self
    }

    /// Number of units.
    pub fn n(&self) -> usize {
        self.offsets.len() - 1
    }

    /// Number of directed links (non-zero weights).
    pub fn links(&self) -> usize {
        self.neighbours.len()
    }

    /// The transform in force.
    pub fn transform(&self) -> Transform {
        self.transform
    }

    /// The neighbours of unit i, ascending.
    pub fn neighbours(&self, i: usize) -> &[u32] {
        &self.neighbours[self.offsets[i]..self.offsets[i + 1]]
    }

    /// Number of neighbours of unit i.
    pub fn degree(&self, i: usize) -> usize {
        self.offsets[i + 1] - self.offsets[i]
    }

    /// The weight of each link of unit i (0 for an island).
    pub fn row_weight(&self, i: usize) -> f64 {
        self.row_weight[i]
    }

    /// `w_ij`: the row weight when j is a neighbour of i, else 0.
    pub fn weight(&self, i: usize, j: usize) -> f64 {
        if self.neighbours(i).binary_search(&(j as u32)).is_ok() {
            self.row_weight[i]
        } else {
            0.0
        }
    }

    /// Number of units without neighbours (zero rows).
    pub fn islands(&self) -> usize {
        (0..self.n()).filter(|&i| self.degree(i) == 0).count()
    }

    /// The 0-based indices of the units without neighbours.
    pub fn island_indices(&self) -> Vec<usize> {
        (0..self.n()).filter(|&i| self.degree(i) == 0).collect()
    }

    /// True when j is a neighbour of i exactly when i is a neighbour of j.
    pub fn is_symmetric(&self) -> bool {
        (0..self.n()).all(|i| {
            self.neighbours(i).iter().all(|&j| {
                self.neighbours(j as usize)
                    .binary_search(&(i as u32))
                    .is_ok()
            })
        })
    }

    /// The undirected pairs `(i, j)`, `i < j`, linked in at least one
    /// direction, ascending: the form in which two sources of contiguity are
    /// compared.
    pub fn pairs(&self) -> Vec<(u32, u32)> {
        let mut pairs: Vec<(u32, u32)> = (0..self.n())
            .flat_map(|i| {
                self.neighbours(i)
                    .iter()
                    .map(move |&j| ((i as u32).min(j), (i as u32).max(j)))
            })
            .collect();
        pairs.sort_unstable();
        pairs.dedup();
        pairs
    }

    /// Calls `visit(i, j, w_ij, w_ji)` for every link i → j, with `w_ji = 0`
    /// when j does not link back.
    pub(crate) fn for_each_link(&self, mut visit: impl FnMut(usize, usize, f64, f64)) {
        for i in 0..self.n() {
            let w_ij = self.row_weight[i];
            for &j in self.neighbours(i) {
                let j = j as usize;
                let w_ji = if self.neighbours(j).binary_search(&(i as u32)).is_ok() {
                    self.row_weight[j]
                } else {
                    0.0
                };
                visit(i, j, w_ij, w_ji);
            }
        }
    }

    /// S0, S1 and S2 (see [`WeightSums`]). O(links · log(max degree)).
    pub fn sums(&self) -> WeightSums {
        let n = self.n();
        let mut s0 = 0.0;
        let mut s1_twice = 0.0;
        let mut row_sum = vec![0.0; n];
        let mut column_sum = vec![0.0; n];
        self.for_each_link(|i, j, w_ij, w_ji| {
            s0 += w_ij;
            row_sum[i] += w_ij;
            column_sum[j] += w_ij;
            // Ordered pair (i, j) contributes (w_ij + w_ji)²; when j does not
            // link back, the pair (j, i) is never visited, so count it here.
            s1_twice += if w_ji != 0.0 {
                (w_ij + w_ji).powi(2)
            } else {
                2.0 * w_ij * w_ij
            };
        });
        let s2 = row_sum
            .iter()
            .zip(&column_sum)
            .map(|(r, c)| (r + c).powi(2))
            .sum();
        WeightSums {
            s0,
            s1: s1_twice / 2.0,
            s2,
        }
    }

    /// The spatial lag `Wz`: `(Wz)_i = Σ_j w_ij z_j`. O(links).
    ///
    /// # Panics
    /// When `values` is shorter than the number of units.
    pub fn lag(&self, values: &[f64]) -> Vec<f64> {
        (0..self.n())
            .map(|i| {
                let sum: f64 = self.neighbours(i).iter().map(|&j| values[j as usize]).sum();
                self.row_weight[i] * sum
            })
            .collect()
    }

    /// `zᵀWz = Σ_i z_i (Wz)_i`, without allocating. O(links).
    pub(crate) fn quadratic_form(&self, values: &[f64]) -> f64 {
        let mut total = 0.0;
        for i in 0..self.n() {
            let sum: f64 = self.neighbours(i).iter().map(|&j| values[j as usize]).sum();
            total += values[i] * self.row_weight[i] * sum;
        }
        total
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// The path 1–2–3–4 of REFERENCES §5.1 example A (0-based here).
    fn path4(transform: Transform) -> Weights {
        Weights::from_pairs(4, &[(0, 1), (1, 2), (2, 3)], transform).unwrap()
    }

    #[test]
    fn weight_sums_of_example_a() {
        // REFERENCES §5.1 example A [COMP own + esda 2.9.0]: binary S0, S1,
        // S2 = 6, 12, 40; row-standardised 4, 5.5, 17.
        let sums = path4(Transform::Binary).sums();
        assert_eq!((sums.s0, sums.s1, sums.s2), (6.0, 12.0, 40.0));
        let sums = path4(Transform::Row).sums();
        assert_relative_eq!(sums.s0, 4.0, epsilon = 1e-15);
        assert_relative_eq!(sums.s1, 5.5, epsilon = 1e-15);
        assert_relative_eq!(sums.s2, 17.0, epsilon = 1e-14);
    }

    #[test]
    fn pairs_in_any_order_or_direction_build_identical_weights() {
        // Common practice, no source: contiguity from two sources must agree.
        let once = Weights::from_pairs(5, &[(0, 1), (1, 2), (3, 4)], Transform::Row).unwrap();
        let both = Weights::from_pairs(
            5,
            &[(4, 3), (2, 1), (1, 0), (0, 1), (3, 4), (1, 2), (1, 2)],
            Transform::Row,
        )
        .unwrap();
        assert_eq!(once, both);
        assert_eq!(once.pairs(), vec![(0, 1), (1, 2), (3, 4)]);
        assert!(once.is_symmetric());
    }

    #[test]
    fn bad_pairs_are_all_reported() {
        let error = Weights::from_pairs(3, &[(0, 0), (1, 5), (0, 1)], Transform::Row).unwrap_err();
        let DiagnosticsError::BadPairs { problems } = error else {
            panic!("{error:?}")
        };
        assert_eq!(problems.len(), 2, "{problems:?}");
    }

    #[test]
    fn islands_keep_zero_rows() {
        // REFERENCES §7 (common practice): zero rows stay zero under row
        // standardisation, so S0 < n.
        let w = Weights::from_pairs(4, &[(0, 1), (1, 2)], Transform::Row).unwrap();
        assert_eq!(w.islands(), 1);
        assert_eq!(w.island_indices(), vec![3]);
        assert_eq!(w.row_weight(3), 0.0);
        assert_relative_eq!(w.sums().s0, 3.0, epsilon = 1e-15);
        assert_eq!(w.lag(&[1.0, 2.0, 3.0, 4.0])[3], 0.0);
    }

    #[test]
    fn k_nearest_is_asymmetric_and_breaks_ties_by_index() {
        // Hand example (common practice, no source): on a line at 0, 1, 2, 10
        // the nearest of 10 is 2 (distance 8), but the nearest of 2 is 1.
        let points = [[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [10.0, 0.0]];
        let w = Weights::k_nearest(&points, 1, Transform::Binary).unwrap();
        assert_eq!(w.neighbours(3), &[2]);
        assert_eq!(w.neighbours(2), &[1]);
        // Unit 1 has two neighbours at distance 1: the lower index wins.
        assert_eq!(w.neighbours(1), &[0]);
        assert!(!w.is_symmetric());
        assert_eq!(w.islands(), 0);
        let error = Weights::k_nearest(&points, 4, Transform::Row).unwrap_err();
        assert!(error.is_usage(), "{error}");
    }

    #[test]
    fn distance_band_includes_the_band_edge_and_excludes_self() {
        let points = [[0.0, 0.0], [3.0, 4.0], [100.0, 0.0]];
        let w = Weights::distance_band(&points, 5.0, Transform::Binary).unwrap();
        assert_eq!(w.neighbours(0), &[1]);
        assert_eq!(w.neighbours(1), &[0]);
        assert_eq!(w.islands(), 1);
        assert!(Weights::distance_band(&points, -1.0, Transform::Row).is_err());
        assert!(
            Weights::distance_band(&[[f64::NAN, 0.0], [0.0, 0.0]], 1.0, Transform::Row).is_err()
        );
    }

    #[test]
    fn asymmetric_sums_count_one_way_links_twice_in_s1() {
        // S1 = ½ Σ_ij (w_ij + w_ji)² by brute force over a dense matrix
        // (Cliff & Ord 1981 definition), on an asymmetric kNN graph.
        let points: Vec<[f64; 2]> = (0..12)
            .map(|i| [((i * 7) % 12) as f64, ((i * i) % 5) as f64 * 1.3])
            .collect();
        let w = Weights::k_nearest(&points, 2, Transform::Row).unwrap();
        let n = w.n();
        let dense = |i: usize, j: usize| w.weight(i, j);
        let mut s0 = 0.0;
        let mut s1 = 0.0;
        let mut s2 = 0.0;
        for i in 0..n {
            let mut row = 0.0;
            let mut column = 0.0;
            for j in 0..n {
                s0 += dense(i, j);
                s1 += 0.5 * (dense(i, j) + dense(j, i)).powi(2);
                row += dense(i, j);
                column += dense(j, i);
            }
            s2 += (row + column).powi(2);
        }
        let sums = w.sums();
        assert_relative_eq!(sums.s0, s0, epsilon = 1e-12);
        assert_relative_eq!(sums.s1, s1, epsilon = 1e-12);
        assert_relative_eq!(sums.s2, s2, epsilon = 1e-12);
    }
}
