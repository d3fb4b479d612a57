//! One pass over pairs of units by distance lag, shared by the semivariogram
//! and the correlogram: per lag, the number of pairs, their distances, the
//! squared differences and the cross products of the centred values.
//!
//! # Lags
//! Lag k is the distance interval `(b_k, b_{k+1}]` with `b_k = k·width` and
//! the last edge at the cutoff; each unordered pair counts once. Defaults
//! (one published convention, that of gstat: Pebesma, E. J. (2004).
//! Multivariable geostatistics in S: the gstat package. *Computers &
//! Geosciences* 30: 683–691): cutoff = bounding-box diagonal / 3, 15 lags of
//! width cutoff/15. Pairs at distance 0 (coincident
//! points) fall in no lag and are counted apart. Distances are Euclidean in
//! the units of the points' CRS.
//!
//! # Exact up to `exact_limit` units (default 100,000)
//! Every pair within the cutoff is visited. Units are sorted into square grid
//! cells of side = cutoff, so a unit is compared only with the units of its own
//! and the neighbouring cells (never with a unit beyond the neighbouring
//! cells, which is always beyond the cutoff). O(n log n + pairs examined).
//! With the default cutoff most pairs are examined anyway (for 100,000
//! uniformly scattered units, 44 % of all pairs lie within it), which took
//! about 15 s on this project's 2 shared cores (`examples/bench_diagnostics.rs`).
//! Memory: one counter per unit and lag in each of 4 work groups per thread
//! (for S2 of the correlogram), about 48 MB at 100,000 units, 15 lags and 2
//! threads.
//!
//! # A seeded pair sample beyond it
//! `sample_pairs` draws (default 10,000,000), with replacement: a unit i
//! uniform over all units, then a unit j uniform over the other units of the
//! 3 × 3 block of grid cells around i's cell (which holds every unit within
//! the cutoff of i). A pair {i, j} is drawn with probability
//! `P = (1/n)(1/(C_i − 1) + 1/(C_j − 1))`, C the number of units in the block,
//! and each drawn pair is weighted by `1/(draws · P)` (Horvitz, D. G. &
//! Thompson, D. J. (1952). A generalization of sampling without replacement
//! from a finite universe. *JASA* 47: 663–685): the weighted counts estimate
//! the all-pairs counts without bias, and γ, mean distances and correlogram
//! values are ratio estimates. Short cutoffs therefore keep their pairs even
//! at millions of units. Draws come in blocks of 65,536, block b from stream
//! b of the seed, so the sample depends on the seed only, not on threads.
//!
//! Work is split into fixed chunks summed in chunk order, so sums do not
//! depend on the number of threads either.

use rayon::prelude::*;
use serde::Serialize;

use super::draws::IndexStream;
use super::{check_finite, check_length, check_points, check_units, Caveat, DiagnosticsError};

/// Largest number of lags accepted.
pub const MAX_LAGS: usize = 100;

/// Draws per block of the pair sample (one random stream per block).
const SAMPLE_BLOCK: u64 = 1 << 16;

/// Units per chunk of the exact pass.
const EXACT_CHUNK: usize = 512;

/// Lag options.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct LagParams {
    /// Largest distance considered; default: bounding-box diagonal / 3.
    pub cutoff: Option<f64>,
    /// Lag width; default: cutoff / `lags`.
    pub width: Option<f64>,
    /// Number of lags when `width` is not given (default 15).
    pub lags: usize,
    /// Largest number of units for the exact pass (default 100,000).
    pub exact_limit: usize,
    /// Pair draws beyond the exact limit (default 10,000,000).
    pub sample_pairs: u64,
    /// Seed of the pair sample; pass the run's seed.
    pub seed: u64,
}

impl Default for LagParams {
    fn default() -> Self {
        LagParams {
            cutoff: None,
            width: None,
            lags: 15,
            exact_limit: 100_000,
            sample_pairs: 10_000_000,
            seed: 0,
        }
    }
}

/// The bounding box of the points.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Extent {
    /// Lower-left corner.
    pub min: [f64; 2],
    /// Upper-right corner.
    pub max: [f64; 2],
    /// Length of the diagonal: an upper bound of every pair distance.
    pub diagonal: f64,
}

/// How the pairs were visited.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "mode", rename_all = "lowercase")]
pub enum PairMode {
    /// Every pair within the cutoff.
    Exact,
    /// A seeded, weighted sample of pairs (see the module doc).
    Sampled {
        /// Draws made.
        drawn: u64,
        /// Unordered pairs in the data, n(n−1)/2.
        population: u64,
        /// The seed.
        seed: u64,
    },
}

/// The sums of one lag.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairBin {
    /// Lower edge (excluded).
    pub lower: f64,
    /// Upper edge (included).
    pub upper: f64,
    /// Pairs visited in the lag (all of them when exact, the draws landing
    /// here when sampled).
    pub pairs: u64,
    /// Estimated pairs in the lag over all pairs (= `pairs` when exact).
    pub estimated_pairs: f64,
    /// Σ d over the lag's pairs (estimated when sampled).
    pub sum_distance: f64,
    /// Σ (z_i − z_j)² (estimated when sampled).
    pub sum_squared_difference: f64,
    /// Σ z_i z_j of the centred values (estimated when sampled).
    pub sum_cross_product: f64,
    /// Σ_i d_ik², d_ik the number of units in lag k of unit i (exact only;
    /// gives S2 of the lag's binary weights for the correlogram).
    pub sum_degree_squared: Option<f64>,
}

/// All lags of one pass.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairSummary {
    /// Number of units.
    pub n: usize,
    /// Bounding box of the points.
    pub extent: Extent,
    /// Cutoff used.
    pub cutoff: f64,
    /// Lag width used.
    pub width: f64,
    /// One entry per lag.
    pub bins: Vec<PairBin>,
    /// Exact or sampled.
    pub mode: PairMode,
    /// Pairs at distance 0 (estimated when sampled), in no lag.
    pub coincident_pairs: f64,
    /// Σ z² of the centred values.
    pub sum_squares: f64,
    /// Sample kurtosis `n Σz⁴/(Σz²)²` (NaN for constant values).
    pub kurtosis: f64,
    /// Warnings: cutoff beyond the extent, sampled pairs.
    pub caveats: Vec<Caveat>,
}

/// Runs the pass over pairs of `points` with `values` (one per point).
///
/// # Errors
/// [`DiagnosticsError::LengthMismatch`], [`DiagnosticsError::NonFinite`],
/// [`DiagnosticsError::TooFewUnits`] (fewer than 2 units, or all points at
/// one location), [`DiagnosticsError::BadParameter`] for a cutoff or width
/// that is not a positive finite distance, a lag count outside 1..=100, or a
/// sample of 0 pairs.
pub fn summarise_pairs(
    points: &[[f64; 2]],
    values: &[f64],
    params: &LagParams,
) -> Result<PairSummary, DiagnosticsError> {
    check_length("values", points.len(), values.len())?;
    check_points(points)?;
    check_finite("values", values)?;
    let n = points.len();
    check_units("a semivariogram", 2, n)?;
    let extent = extent(points);
    if extent.diagonal == 0.0 {
        return Err(DiagnosticsError::TooFewUnits {
            what: "a semivariogram (distinct locations)",
            needed: 2,
            found: 1,
        });
    }
    let edges = lag_edges(params, extent.diagonal)?;
    let cutoff = edges[edges.len() - 1];
    let width = edges[1];
    let mut caveats = Vec::new();
    if cutoff > extent.diagonal {
        caveats.push(Caveat::CutoffBeyondExtent {
            cutoff,
            diagonal: extent.diagonal,
        });
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    let z: Vec<f64> = values.iter().map(|v| v - mean).collect();
    let sum_squares: f64 = z.iter().map(|v| v * v).sum();
    let kurtosis = super::moran::kurtosis(&z);
    let grid = Grid::new(points, &z, &extent, cutoff);
    let population = (n as u64) * (n as u64 - 1) / 2;
    let (sums, degrees, mode) = if n <= params.exact_limit {
        let (sums, degrees) = exact_pass(&grid, &edges);
        (sums, Some(degrees), PairMode::Exact)
    } else {
        if params.sample_pairs == 0 {
            return Err(DiagnosticsError::BadParameter {
                name: "sample pairs",
                value: "0".into(),
                problem: format!(
                    "{n} units exceed the exact limit of {}; at least 1 pair must be drawn",
                    params.exact_limit
                ),
            });
        }
        caveats.push(Caveat::SampledPairs {
            drawn: params.sample_pairs,
            population,
        });
        let sums = sampled_pass(&grid, &edges, params.sample_pairs, params.seed);
        (
            sums,
            None,
            PairMode::Sampled {
                drawn: params.sample_pairs,
                population,
                seed: params.seed,
            },
        )
    };
    let bins = (0..edges.len() - 1)
        .map(|k| PairBin {
            lower: edges[k],
            upper: edges[k + 1],
            pairs: sums.count[k],
            estimated_pairs: sums.weight[k],
            sum_distance: sums.distance[k],
            sum_squared_difference: sums.squared_difference[k],
            sum_cross_product: sums.cross_product[k],
            sum_degree_squared: degrees.as_ref().map(|d| d[k]),
        })
        .collect();
    Ok(PairSummary {
        n,
        extent,
        cutoff,
        width,
        bins,
        mode,
        coincident_pairs: sums.coincident,
        sum_squares,
        kurtosis,
        caveats,
    })
}

/// The bounding box of finite points (at least one).
pub(crate) fn extent(points: &[[f64; 2]]) -> Extent {
    let mut min = [f64::INFINITY; 2];
    let mut max = [f64::NEG_INFINITY; 2];
    for p in points {
        for a in 0..2 {
            min[a] = min[a].min(p[a]);
            max[a] = max[a].max(p[a]);
        }
    }
    Extent {
        min,
        max,
        diagonal: (max[0] - min[0]).hypot(max[1] - min[1]),
    }
}

/// Lag edges `0, w, 2w, …, cutoff`.
fn lag_edges(params: &LagParams, diagonal: f64) -> Result<Vec<f64>, DiagnosticsError> {
    let positive = |name: &'static str, value: f64| {
        if value.is_finite() && value > 0.0 {
            Ok(value)
        } else {
            Err(DiagnosticsError::BadParameter {
                name,
                value: value.to_string(),
                problem: "must be a positive, finite distance in the units' CRS".into(),
            })
        }
    };
    let cutoff = positive("lag cutoff", params.cutoff.unwrap_or(diagonal / 3.0))?;
    let (width, lags) = match params.width {
        Some(width) => {
            let width = positive("lag width", width)?;
            // Tolerate rounding in cutoff/width (e.g. 15.000000000000002).
            let lags = ((cutoff / width) * (1.0 - 1e-12)).ceil();
            (width, lags)
        }
        None => (cutoff / params.lags as f64, params.lags as f64),
    };
    if !(1.0..=MAX_LAGS as f64).contains(&lags) {
        return Err(DiagnosticsError::BadParameter {
            name: "number of lags",
            value: lags.to_string(),
            problem: format!(
                "between 1 and {MAX_LAGS} lags are allowed (cutoff {cutoff}, width {width})"
            ),
        });
    }
    let lags = lags as usize;
    let mut edges: Vec<f64> = (0..lags).map(|k| k as f64 * width).collect();
    edges.push(cutoff);
    Ok(edges)
}

/// Index of the lag `(edges[k], edges[k+1]]` holding `d`, for `0 < d ≤ cutoff`.
#[inline]
fn lag_of(d: f64, edges: &[f64], inverse_width: f64) -> usize {
    let last = edges.len() - 2;
    // Truncation, not `ceil` (a libm call on baseline x86-64); the loops
    // below settle the edges exactly.
    let mut k = ((d * inverse_width) as usize).min(last);
    while k > 0 && d <= edges[k] {
        k -= 1;
    }
    while k < last && d > edges[k + 1] {
        k += 1;
    }
    k
}

/// The sums of one lag in the exact pass, kept together for locality.
#[derive(Debug, Clone, Copy, Default)]
struct ExactBin {
    count: u64,
    distance: f64,
    squared_difference: f64,
    cross_product: f64,
}

/// Per-lag sums (weighted when sampled).
#[derive(Debug, Clone)]
struct Sums {
    count: Vec<u64>,
    weight: Vec<f64>,
    distance: Vec<f64>,
    squared_difference: Vec<f64>,
    cross_product: Vec<f64>,
    coincident: f64,
}

impl Sums {
    fn new(lags: usize) -> Sums {
        Sums {
            count: vec![0; lags],
            weight: vec![0.0; lags],
            distance: vec![0.0; lags],
            squared_difference: vec![0.0; lags],
            cross_product: vec![0.0; lags],
            coincident: 0.0,
        }
    }

    #[inline]
    fn add(&mut self, k: usize, d: f64, zi: f64, zj: f64, weight: f64) {
        self.count[k] += 1;
        self.weight[k] += weight;
        self.distance[k] += weight * d;
        self.squared_difference[k] += weight * (zi - zj) * (zi - zj);
        self.cross_product[k] += weight * zi * zj;
    }

    fn merge(&mut self, other: &Sums) {
        for k in 0..self.count.len() {
            self.count[k] += other.count[k];
            self.weight[k] += other.weight[k];
            self.distance[k] += other.distance[k];
            self.squared_difference[k] += other.squared_difference[k];
            self.cross_product[k] += other.cross_product[k];
        }
        self.coincident += other.coincident;
    }
}

/// Units sorted into square cells of side = cutoff, by (column, row), ties by
/// index; coordinates and centred values copied in that order.
struct Grid {
    x: Vec<f64>,
    y: Vec<f64>,
    z: Vec<f64>,
    /// The cell of each sorted unit (position in `cells`).
    cell_of: Vec<u32>,
    /// Occupied cells, ascending (column, row), with their unit ranges.
    cells: Vec<Cell>,
}

#[derive(Debug, Clone, Copy)]
struct Cell {
    key: (i64, i64),
    start: usize,
    end: usize,
}

impl Grid {
    fn new(points: &[[f64; 2]], z: &[f64], extent: &Extent, side: f64) -> Grid {
        let key = |p: &[f64; 2]| {
            (
                ((p[0] - extent.min[0]) / side).floor() as i64,
                ((p[1] - extent.min[1]) / side).floor() as i64,
            )
        };
        let mut order: Vec<(i64, i64, u32)> = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let (c, r) = key(p);
                (c, r, i as u32)
            })
            .collect();
        order.par_sort_unstable();
        let mut cells: Vec<Cell> = Vec::new();
        let mut cell_of = Vec::with_capacity(order.len());
        for (position, &(c, r, _)) in order.iter().enumerate() {
            match cells.last_mut() {
                Some(cell) if cell.key == (c, r) => cell.end = position + 1,
                _ => cells.push(Cell {
                    key: (c, r),
                    start: position,
                    end: position + 1,
                }),
            }
            cell_of.push((cells.len() - 1) as u32);
        }
        Grid {
            x: order.iter().map(|o| points[o.2 as usize][0]).collect(),
            y: order.iter().map(|o| points[o.2 as usize][1]).collect(),
            z: order.iter().map(|o| z[o.2 as usize]).collect(),
            cell_of,
            cells,
        }
    }

    /// The unit range of the cells `(column, rows)` (contiguous when sorted).
    fn column_range(&self, column: i64, rows: (i64, i64)) -> (usize, usize) {
        let first = self.cells.partition_point(|c| c.key < (column, rows.0));
        let last = self.cells.partition_point(|c| c.key <= (column, rows.1));
        if first >= last {
            (0, 0)
        } else {
            (self.cells[first].start, self.cells[last - 1].end)
        }
    }
}

/// Every pair within the cutoff, each unordered pair once.
fn exact_pass(grid: &Grid, edges: &[f64]) -> (Sums, Vec<f64>) {
    let n = grid.x.len();
    let lags = edges.len() - 1;
    let cutoff = edges[lags];
    let inverse_width = 1.0 / edges[1];
    let reject_above = cutoff * cutoff * (1.0 + 1e-9);
    // Per cell: the later units of its own column within one row, and the
    // three cells of the next column.
    let ranges: Vec<[(usize, usize); 2]> = grid
        .cells
        .iter()
        .map(|cell| {
            let (column, row) = cell.key;
            let own = grid.column_range(column, (row, row + 1));
            let next = grid.column_range(column + 1, (row - 1, row + 1));
            [own, next]
        })
        .collect();
    let chunks = n.div_ceil(EXACT_CHUNK);
    let groups = chunks.min(4 * rayon::current_num_threads()).max(1);
    let per_group = chunks.div_ceil(groups);
    let results: Vec<(Vec<Sums>, Vec<u32>)> = (0..groups)
        .into_par_iter()
        .map(|g| {
            let mut degrees = vec![0u32; n * lags];
            let mut chunk_sums = Vec::new();
            for chunk in g * per_group..((g + 1) * per_group).min(chunks) {
                let mut bins = vec![ExactBin::default(); lags];
                let mut coincident = 0u64;
                for i in chunk * EXACT_CHUNK..((chunk + 1) * EXACT_CHUNK).min(n) {
                    let [own, next] = ranges[grid.cell_of[i] as usize];
                    let (xi, yi, zi) = (grid.x[i], grid.y[i], grid.z[i]);
                    let mut degree_i = [0u32; MAX_LAGS];
                    for (start, end) in [(i + 1, own.1), next] {
                        let candidates = grid.x[start..end]
                            .iter()
                            .zip(&grid.y[start..end])
                            .zip(&grid.z[start..end])
                            .zip(degrees[start * lags..end * lags].chunks_exact_mut(lags));
                        for (((&xj, &yj), &zj), degree_j) in candidates {
                            let dx = xj - xi;
                            let dy = yj - yi;
                            let d2 = dx * dx + dy * dy;
                            // Cheap rejection on d², then the exact test on d.
                            if d2 > reject_above {
                                continue;
                            }
                            let d = d2.sqrt();
                            if d > cutoff {
                                continue;
                            }
                            if d == 0.0 {
                                coincident += 1;
                                continue;
                            }
                            let k = lag_of(d, edges, inverse_width);
                            let bin = &mut bins[k];
                            bin.count += 1;
                            bin.distance += d;
                            bin.squared_difference += (zi - zj) * (zi - zj);
                            bin.cross_product += zi * zj;
                            degree_i[k] += 1;
                            degree_j[k] += 1;
                        }
                    }
                    for (total, own) in degrees[i * lags..(i + 1) * lags].iter_mut().zip(degree_i) {
                        *total += own;
                    }
                }
                let mut sums = Sums::new(lags);
                for (k, bin) in bins.iter().enumerate() {
                    sums.count[k] = bin.count;
                    sums.weight[k] = bin.count as f64;
                    sums.distance[k] = bin.distance;
                    sums.squared_difference[k] = bin.squared_difference;
                    sums.cross_product[k] = bin.cross_product;
                }
                sums.coincident = coincident as f64;
                chunk_sums.push(sums);
            }
            (chunk_sums, degrees)
        })
        .collect();
    let mut total = Sums::new(lags);
    let mut degrees = vec![0u32; n * lags];
    for (chunk_sums, group_degrees) in &results {
        for sums in chunk_sums {
            total.merge(sums);
        }
        for (total_degree, degree) in degrees.iter_mut().zip(group_degrees) {
            *total_degree += degree;
        }
    }
    let mut degree_squared = vec![0.0; lags];
    for unit in degrees.chunks_exact(lags) {
        for (k, &d) in unit.iter().enumerate() {
            degree_squared[k] += f64::from(d) * f64::from(d);
        }
    }
    (total, degree_squared)
}

/// The weighted pair sample (see the module doc).
fn sampled_pass(grid: &Grid, edges: &[f64], draws: u64, seed: u64) -> Sums {
    let n = grid.x.len();
    let lags = edges.len() - 1;
    let cutoff = edges[lags];
    let inverse_width = 1.0 / edges[1];
    // Per cell: the unit ranges of the three columns of its 3 × 3 block, and
    // the block's unit count.
    let blocks: Vec<([(usize, usize); 3], usize)> = grid
        .cells
        .iter()
        .map(|cell| {
            let (column, row) = cell.key;
            let ranges = [-1, 0, 1].map(|dc| grid.column_range(column + dc, (row - 1, row + 1)));
            let count = ranges.iter().map(|(s, e)| e - s).sum();
            (ranges, count)
        })
        .collect();
    let block_size = |i: usize| blocks[grid.cell_of[i] as usize].1;
    let n_blocks = draws.div_ceil(SAMPLE_BLOCK);
    let results: Vec<Sums> = (0..n_blocks)
        .into_par_iter()
        .map(|b| {
            let mut sums = Sums::new(lags);
            let mut stream = IndexStream::new(seed, b);
            let in_block = SAMPLE_BLOCK.min(draws - b * SAMPLE_BLOCK);
            for _ in 0..in_block {
                let i = stream.index_below(n as u32) as usize;
                let (ranges, count) = blocks[grid.cell_of[i] as usize];
                if count < 2 {
                    continue;
                }
                // Uniform over the block's units other than i: draw a rank
                // among count − 1 and step over i's own rank.
                let mut u = stream.index_below((count - 1) as u32) as usize;
                if u >= rank_in(&ranges, i) {
                    u += 1;
                }
                let j = at_rank(&ranges, u);
                let dx = grid.x[j] - grid.x[i];
                let dy = grid.y[j] - grid.y[i];
                let d = (dx * dx + dy * dy).sqrt();
                if d > cutoff {
                    continue;
                }
                let probability =
                    (1.0 / (count - 1) as f64 + 1.0 / (block_size(j) - 1) as f64) / n as f64;
                let weight = 1.0 / (draws as f64 * probability);
                if d == 0.0 {
                    sums.coincident += weight;
                    continue;
                }
                let k = lag_of(d, edges, inverse_width);
                sums.add(k, d, grid.z[i], grid.z[j], weight);
            }
            sums
        })
        .collect();
    let mut total = Sums::new(lags);
    for sums in &results {
        total.merge(sums);
    }
    total
}

/// The rank of position `i` among the units of the ranges, in order.
#[inline]
fn rank_in(ranges: &[(usize, usize); 3], i: usize) -> usize {
    let mut before = 0;
    for &(start, end) in ranges {
        if (start..end).contains(&i) {
            return before + i - start;
        }
        before += end - start;
    }
    before
}

/// The position of the unit of rank `u` among the units of the ranges.
#[inline]
fn at_rank(ranges: &[(usize, usize); 3], mut u: usize) -> usize {
    for &(start, end) in ranges {
        if u < end - start {
            return start + u;
        }
        u -= end - start;
    }
    // Unreachable for u below the ranges' total; the last unit otherwise.
    ranges[2].1.max(1) - 1
}
