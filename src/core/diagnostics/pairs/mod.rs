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

mod passes;
use passes::*;

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
