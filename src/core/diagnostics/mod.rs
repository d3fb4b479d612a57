//! Spatial diagnostics: how strongly a target or a model's residuals are
//! spatially autocorrelated, over which distances, and what that means for the
//! block size and exclusion radius of a spatial cross-validation.
//!
//! Everything here is pure: points, polygons and values in, figures out. The
//! figures describe predictive skill and spatial structure, not causes, and do
//! not replace domain judgment, local rules or licensed practice.
//!
//! - [`weights`]: sparse spatial weights (neighbour lists with weights) from
//!   neighbour pairs, k nearest neighbours or a distance band.
//! - [`contiguity`]: queen and rook neighbour pairs of polygons (DE-9IM, as
//!   PostGIS `ST_Touches` and `ST_Relate(a, b, 'F***1****')`).
//! - [`moran`]: global Moran's I with its moments under normality, under
//!   randomisation and for regression residuals.
//! - [`permutation`]: the seeded permutation test of Moran's I.
//! - [`pairs`]: the one pass over point pairs by distance lag that the
//!   semivariogram and the correlogram share (exact, or a seeded pair sample).
//! - [`semivariogram`]: the Matheron estimator over distance lags.
//! - [`variogram_fit`]: spherical and exponential models fitted by weighted
//!   least squares, and their ranges.
//! - [`correlogram`]: Moran's I by distance class.
//! - [`advice`]: block size and exclusion radius from the fitted range, with
//!   the figures and caveats they rest on.
//! - [`held_out`]: Moran's I of a run's held-out residuals, stored with
//!   every run.
//! - [`fold_distances`]: how far test units are from their training
//!   units, per fold, stored with every run.
//! - [`draws`]: the seeded index draws behind permutations and pair samples.

pub mod advice;
pub mod contiguity;
pub mod correlogram;
pub mod draws;
pub mod fold_distances;
pub mod held_out;
pub mod moran;
pub mod pairs;
pub mod permutation;
pub mod semivariogram;
pub mod variogram_fit;
pub mod weights;

use std::fmt;

use serde::Serialize;

/// Why a diagnostic cannot be computed. Every variant says what is wrong and
/// with which figures; problems in input lists are all reported, not only the
/// first.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DiagnosticsError {
    /// Fewer units than the statistic needs.
    #[error("{what} needs at least {needed} units, got {found}")]
    TooFewUnits {
        /// The statistic or step.
        what: &'static str,
        /// The minimum.
        needed: usize,
        /// The number given.
        found: usize,
    },
    /// Two inputs that must describe the same units differ in length.
    #[error("{what}: expected {expected} entries (one per unit), got {found}")]
    LengthMismatch {
        /// Which input.
        what: &'static str,
        /// The number of units.
        expected: usize,
        /// The length given.
        found: usize,
    },
    /// NaN or infinite values; `indices` lists the 0-based positions (up to 20).
    #[error("{what}: {count} non-finite value(s), at positions {indices:?}")]
    NonFinite {
        /// Which input.
        what: &'static str,
        /// How many are non-finite.
        count: usize,
        /// The first (up to 20) positions.
        indices: Vec<usize>,
    },
    /// All values are equal, so Moran's I and the correlogram are undefined.
    #[error("{what}: all {n} values are equal ({value}); spatial autocorrelation is undefined")]
    ConstantValues {
        /// Which input.
        what: &'static str,
        /// Number of units.
        n: usize,
        /// The common value.
        value: f64,
    },
    /// An option is out of its range.
    #[error("{name} = {value}: {problem}")]
    BadParameter {
        /// The option.
        name: &'static str,
        /// Its value as given.
        value: String,
        /// What is wrong and what is allowed.
        problem: String,
    },
    /// Neighbour pairs that cannot be used (self pairs, indices out of range).
    #[error("bad neighbour pairs: {}", .problems.join("; "))]
    BadPairs {
        /// One entry per problem (up to 20, then a count).
        problems: Vec<String>,
    },
    /// Geometries that cannot be used for contiguity.
    #[error("bad geometry for contiguity: {}", .problems.join("; "))]
    BadGeometry {
        /// One entry per problem, naming the unit's 0-based position.
        problems: Vec<String>,
    },
    /// The weights hold no link at all, so S0 = 0.
    #[error(
        "the spatial weights link no unit to any other ({n} units, all without neighbours): {hint}"
    )]
    NoLinks {
        /// Number of units.
        n: usize,
        /// What to change.
        hint: &'static str,
    },
    /// The regression design cannot be used.
    #[error("regression design: {0}")]
    Design(String),
    /// Too few non-empty lags to fit a variogram model.
    #[error("variogram fit needs at least {needed} lags with pairs, got {found}")]
    TooFewLags {
        /// The minimum (one per model parameter).
        needed: usize,
        /// Non-empty lags available.
        found: usize,
    },
}

impl DiagnosticsError {
    /// True when the error comes from an option the user chose (a usage error),
    /// false when it comes from the data.
    pub fn is_usage(&self) -> bool {
        matches!(self, DiagnosticsError::BadParameter { .. })
    }
}

/// A warning that a figure is less reliable than it looks. Caveats travel with
/// the figures they qualify; [`fmt::Display`] gives the plain-words form.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "caveat", rename_all = "snake_case")]
pub enum Caveat {
    /// Fewer units than the normal approximation is usually trusted for.
    FewUnits {
        /// Number of units.
        n: usize,
        /// The threshold (common practice: 30–50).
        minimum: usize,
    },
    /// Units without neighbours (zero rows of the weights).
    Islands {
        /// How many.
        count: usize,
        /// Of how many units.
        n: usize,
    },
    /// More than half the units have no neighbour (typically a distance band
    /// shorter than the usual spacing).
    MostlyIslands {
        /// How many units have no neighbour.
        count: usize,
        /// Of how many units.
        n: usize,
    },
    /// The lag cutoff is beyond the largest possible distance between units.
    CutoffBeyondExtent {
        /// The cutoff (distance units).
        cutoff: f64,
        /// The bounding-box diagonal, an upper bound of every distance.
        diagonal: f64,
    },
    /// The semivariogram rests on a random sample of pairs, not all pairs.
    SampledPairs {
        /// Pairs drawn.
        drawn: u64,
        /// Unordered pairs in the data, n(n−1)/2.
        population: u64,
    },
    /// Lags with fewer pairs than the rule of thumb (common practice: 30–50).
    FewPairs {
        /// 0-based lag numbers.
        lags: Vec<usize>,
        /// The threshold.
        minimum: u64,
    },
    /// The fitted model follows the sample semivariogram poorly.
    PoorFit {
        /// Model name.
        model: String,
        /// Weighted R² of the fit.
        r_squared: f64,
        /// The threshold below which a fit is called poor.
        minimum: f64,
    },
    /// The fitted range is more than half the largest distance in the data.
    RangeBeyondHalfExtent {
        /// The range (distance units).
        range: f64,
        /// Half the bounding-box diagonal.
        half_diagonal: f64,
    },
    /// The fitted range is beyond the largest lag examined: the model
    /// extrapolates.
    RangeBeyondCutoff {
        /// The range.
        range: f64,
        /// The cutoff.
        cutoff: f64,
    },
    /// The range search stopped at its upper bound: no sill within reach.
    NoSill {
        /// The bound reached.
        range: f64,
    },
    /// The fit is (almost) all nugget: no spatial structure at the lags
    /// examined.
    NoSpatialStructure {
        /// Nugget / (nugget + partial sill).
        nugget_share: f64,
    },
    /// Blocks of the recommended size give fewer blocks than twice the folds.
    FewBlocks {
        /// Blocks of that size over the bounding box.
        blocks: u64,
        /// Folds planned.
        folds: u32,
    },
}

impl fmt::Display for Caveat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Caveat::FewUnits { n, minimum } => write!(
                f,
                "only {n} units: the normal approximation of Moran's I is doubtful below about {minimum}; prefer the permutation p-value"
            ),
            Caveat::Islands { count, n } => write!(
                f,
                "{count} of {n} units have no neighbour; they count in n and in the variance of the values but form no pair"
            ),
            Caveat::MostlyIslands { count, n } => write!(
                f,
                "{count} of {n} units have no neighbour: the weights describe little of the data; use a longer distance band or k nearest neighbours"
            ),
            Caveat::CutoffBeyondExtent { cutoff, diagonal } => write!(
                f,
                "the lag cutoff {cutoff:.6} is beyond the data's extent (bounding-box diagonal {diagonal:.6}); lags past the diagonal are empty"
            ),
            Caveat::SampledPairs { drawn, population } => write!(
                f,
                "the semivariogram uses a seeded random sample of {drawn} of the {population} pairs"
            ),
            Caveat::FewPairs { lags, minimum } => write!(
                f,
                "lag(s) {} have fewer than {minimum} pairs; their values are unreliable",
                lags.iter()
                    .map(|l| (l + 1).to_string())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
            Caveat::PoorFit {
                model,
                r_squared,
                minimum,
            } => write!(
                f,
                "the {model} model fits poorly (weighted R² {r_squared:.3} < {minimum}); its range is uncertain"
            ),
            Caveat::RangeBeyondHalfExtent {
                range,
                half_diagonal,
            } => write!(
                f,
                "the range {range:.6} exceeds half the study area's diagonal ({half_diagonal:.6}); it rests on the longest, least reliable lags"
            ),
            Caveat::RangeBeyondCutoff { range, cutoff } => write!(
                f,
                "the range {range:.6} is beyond the largest lag examined ({cutoff:.6}); the model extrapolates"
            ),
            Caveat::NoSill { range } => write!(
                f,
                "the semivariogram reaches no sill within the search (range at its bound {range:.6}); autocorrelation may extend over the whole area"
            ),
            Caveat::NoSpatialStructure { nugget_share } => write!(
                f,
                "the fit is almost all nugget ({:.0}% of the sill): no spatial structure detected at the lags examined",
                nugget_share * 100.0
            ),
            Caveat::FewBlocks { blocks, folds } => write!(
                f,
                "blocks of this size give only {blocks} blocks over the bounding box, fewer than twice the {folds} folds; folds will be unbalanced or extrapolate"
            ),
        }
    }
}

/// Checks that there are at least `needed` units.
pub(crate) fn check_units(
    what: &'static str,
    needed: usize,
    found: usize,
) -> Result<(), DiagnosticsError> {
    if found >= needed {
        Ok(())
    } else {
        Err(DiagnosticsError::TooFewUnits {
            what,
            needed,
            found,
        })
    }
}

/// Checks that an input has one entry per unit.
pub(crate) fn check_length(
    what: &'static str,
    expected: usize,
    found: usize,
) -> Result<(), DiagnosticsError> {
    if expected == found {
        Ok(())
    } else {
        Err(DiagnosticsError::LengthMismatch {
            what,
            expected,
            found,
        })
    }
}

/// Runs `work` on a one-thread rayon pool: results must not depend on the
/// number of threads.
#[cfg(test)]
pub(crate) fn on_one_thread<T: Send>(work: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("a one-thread pool")
        .install(work)
}

/// Checks that every value is finite.
pub(crate) fn check_finite(what: &'static str, values: &[f64]) -> Result<(), DiagnosticsError> {
    let bad: Vec<usize> = values
        .iter()
        .enumerate()
        .filter(|(_, v)| !v.is_finite())
        .map(|(i, _)| i)
        .collect();
    if bad.is_empty() {
        return Ok(());
    }
    Err(DiagnosticsError::NonFinite {
        what,
        count: bad.len(),
        indices: bad.into_iter().take(20).collect(),
    })
}

/// Checks that every point has finite coordinates.
pub(crate) fn check_points(points: &[[f64; 2]]) -> Result<(), DiagnosticsError> {
    let bad: Vec<usize> = points
        .iter()
        .enumerate()
        .filter(|(_, p)| !(p[0].is_finite() && p[1].is_finite()))
        .map(|(i, _)| i)
        .collect();
    if bad.is_empty() {
        return Ok(());
    }
    Err(DiagnosticsError::NonFinite {
        what: "point coordinates",
        count: bad.len(),
        indices: bad.into_iter().take(20).collect(),
    })
}

/// Two-sided normal p-value `2·P(Z > |z|) = erfc(|z|/√2)`, from statrs'
/// complementary error function.
pub(crate) fn normal_two_sided(z: f64) -> f64 {
    statrs::function::erf::erfc(z.abs() / std::f64::consts::SQRT_2)
}
