//! Fold schemes: how units are split into held-out folds.
//!
//! A scheme produces, for each repetition, a [`FoldSet`]: every unit's test
//! fold (each unit is held out exactly once per repetition), the units
//! excluded from each fold's training set (none for plain k-fold), and the
//! fold regions as finished geometry for maps. Every scheme is a pure function
//! of the units (in id order), its options and a seed, so the same rows and
//! options give the same folds on any machine and for any row order of the
//! source. Randomness comes only from [`FoldRng`], a ChaCha8 stream whose draws
//! are turned into indices by a documented rule, never from the thread RNG or
//! hash-map order.
//!
//! An exclusion buffer (`exclusion-radius`) applies to every scheme:
//! [`exclude_within`] removes from each fold's training set the units within
//! the radius of any of its test units (Le Rest et al. 2014; Roberts et al. 2017).
//!
//! Schemes, one file (or directory) each, registered in [`SCHEMES`]:
//! - [`grid`]: square or hexagonal spatial blocks, dealt to folds at random
//!   (balanced by unit count) or in a fixed pattern.
//! - [`random`]: plain k-fold over units, the non-spatial comparison.
//! - [`kmeans`]: k-means clusters of the units' points (Brenning 2012).
//! - [`group`]: the groups of a column (e.g. a district code), kept whole.
//! - [`loo`]: leave-one-out, spatial with an exclusion radius (Le Rest et al. 2014).
//! - [`nndm`]: nearest-neighbour distance matching leave-one-out (Milà et al. 2022).
//! - [`knndm`]: its k-fold form (Linnenbrink et al. 2024).
//!
//! Shared pieces: [`deal`] (clusters or groups dealt to folds, balancing
//! units) and [`regions`] (hulls, unions and discs drawn for the folds).

pub mod deal;
pub mod grid;
pub mod group;
pub mod kmeans;
pub mod knndm;
pub mod loo;
pub mod nndm;
pub mod random;
pub mod regions;

use geo_types::{Geometry, MultiPolygon};
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};
use serde::de::DeserializeOwned;

use crate::core::neighbours::NeighbourIndex;
use crate::core::options::{parse_options, Options};
use crate::core::units::Groups;
use crate::error::Error;

/// What a scheme sees of the units.
pub struct SchemeInput<'a> {
    /// Representative point of each unit, in id order, in the distance CRS.
    pub points: &'a [[f64; 2]],
    /// The neighbour index over `points`.
    pub index: &'a NeighbourIndex,
    /// Each unit's group, when the run read a group column.
    pub groups: Option<&'a Groups>,
    /// Where the model will be used (prediction locations), in the distance
    /// CRS, when the run names them.
    pub prediction_points: Option<&'a [[f64; 2]]>,
    /// Each unit's geometry in the distance CRS, in id order, kept only when
    /// the scheme asks for it ([`Requirements::geometries`]).
    pub geometries: Option<&'a [Geometry<f64>]>,
    /// The run's exclusion radius (CRS units), which [`exclude_within`]
    /// applies after `assign`; schemes read it only to draw their regions.
    pub exclusion_radius: Option<f64>,
}

/// What a scheme needs beyond the units' points, checked before any data
/// are read (a missing group column or prediction table is a usage error).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Requirements {
    /// A group column (`--group-column`).
    pub groups: bool,
    /// The units' geometries (kept in memory only when this is set).
    pub geometries: bool,
    /// Prediction locations (`--prediction-table` / `--prediction-layer`).
    pub prediction_points: bool,
}

/// The folds of one repetition.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldSet {
    /// Number of folds.
    pub k: u32,
    /// Test fold (0-based) of each unit, in id order.
    pub fold_of: Vec<u32>,
    /// Per fold, the units (ascending) excluded from its training set although
    /// they are not in its test fold. Empty when no fold excludes anything.
    pub excluded: Vec<Vec<u32>>,
    /// The fold regions, for maps.
    pub regions: Vec<Region>,
    /// Facts about the split worth reporting (e.g. occupied blocks), by name.
    pub facts: serde_json::Map<String, serde_json::Value>,
    /// Plain-words warnings about the split (e.g. blocks so small the split is
    /// close to random), each stating its rule.
    pub warnings: Vec<String>,
    /// Per unit (id order), the distance from the unit to the nearest unit of
    /// its fold's training set: the test-to-training nearest-neighbour
    /// distances during cross-validation. Filled (after any exclusion buffer)
    /// when the run has prediction locations to compare them with.
    pub cv_distances: Option<Vec<f64>>,
}

impl FoldSet {
    /// A fold set with no exclusions, regions, facts or warnings.
    pub fn plain(k: u32, fold_of: Vec<u32>) -> FoldSet {
        FoldSet {
            k,
            fold_of,
            excluded: Vec::new(),
            regions: Vec::new(),
            facts: serde_json::Map::new(),
            warnings: Vec::new(),
            cv_distances: None,
        }
    }

    /// Number of units in each fold's test set.
    pub fn fold_sizes(&self) -> Vec<usize> {
        let mut sizes = vec![0usize; self.k as usize];
        for &fold in &self.fold_of {
            sizes[fold as usize] += 1;
        }
        sizes
    }

    /// The units excluded from fold `fold`'s training set.
    pub fn excluded_from(&self, fold: u32) -> &[u32] {
        self.excluded
            .get(fold as usize)
            .map(Vec::as_slice)
            .unwrap_or(&[])
    }

    /// True when some fold excludes units from its training set.
    pub fn has_exclusions(&self) -> bool {
        self.excluded.iter().any(|units| !units.is_empty())
    }

    /// The test units of every fold, each list ascending.
    pub fn test_units(&self) -> Vec<Vec<u32>> {
        let mut units = vec![Vec::new(); self.k as usize];
        for (unit, &fold) in self.fold_of.iter().enumerate() {
            units[fold as usize].push(unit as u32);
        }
        units
    }
}

/// A region of a fold drawn on maps: a block, a cluster hull, a group's
/// outline, an exclusion disc.
#[derive(Debug, Clone, PartialEq)]
pub struct Region {
    /// The fold (0-based) whose test units it holds.
    pub fold: u32,
    /// What it is (`block`, …), as stored in `fold_regions.kind`.
    pub kind: &'static str,
    /// A label unique within the fold set (e.g. `block 3,-1`).
    pub label: String,
    /// Units inside it.
    pub units: u32,
    /// Its outline, in the distance CRS.
    pub geometry: MultiPolygon<f64>,
}

/// A fold scheme with its options.
pub trait FoldScheme: Send + Sync {
    /// The scheme's name as stored in `runs.scheme`.
    fn name(&self) -> &'static str;
    /// Its options as stored in `runs.parameters` (option names as given).
    fn parameters(&self) -> serde_json::Value;
    /// True when the scheme needs distances in a metric CRS.
    fn needs_distances(&self) -> bool;
    /// True when repetitions draw different folds from the seed.
    fn randomised(&self) -> bool;
    /// One line in plain words, with lengths written by `length` (which knows
    /// the CRS's unit), e.g. `square blocks of 4 km from (0, 0), dealt to 5 folds`.
    fn describe(&self, length: &dyn Fn(f64) -> String) -> String;
    /// Assigns the folds of one repetition.
    ///
    /// # Errors
    /// [`Error::Folds`] when the units cannot be split as asked.
    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error>;
    /// What the scheme needs beyond the units' points (nothing by default).
    fn requirements(&self) -> Requirements {
        Requirements::default()
    }
}

/// A scheme in the registry.
pub struct SchemeEntry {
    /// The name users pass to `--scheme`.
    pub name: &'static str,
    /// One line for `--help`.
    pub about: &'static str,
    /// The option names it takes (long option names, without `--`).
    pub options: &'static [&'static str],
    /// Builds it from its options.
    pub build: fn(&Options) -> Result<Box<dyn FoldScheme>, Error>,
}

/// Every scheme geofold offers. Adding a scheme is its file and one line here.
pub const SCHEMES: &[SchemeEntry] = &[
    grid::ENTRY,
    random::ENTRY,
    kmeans::ENTRY,
    group::ENTRY,
    loo::ENTRY,
    nndm::ENTRY,
    knndm::ENTRY,
];

/// Builds the scheme `name` from the options given for it.
///
/// # Errors
/// [`Error::Usage`] for an unknown scheme, an option it does not take, or a
/// bad option value.
pub fn build_scheme(name: &str, options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let entry = SCHEMES.iter().find(|s| s.name == name).ok_or_else(|| {
        let names: Vec<&str> = SCHEMES.iter().map(|s| s.name).collect();
        Error::Usage(format!(
            "unknown --scheme {name:?}; geofold offers {}",
            names.join(", ")
        ))
    })?;
    (entry.build)(options)
}

/// Parses a scheme's options into its parameter struct, refusing options the
/// scheme does not take (see [`parse_options`]).
///
/// # Errors
/// [`Error::Usage`] naming the option.
pub fn scheme_params<T: DeserializeOwned>(
    scheme: &str,
    accepted: &[&str],
    options: &Options,
) -> Result<T, Error> {
    parse_options(&format!("--scheme {scheme}"), accepted, options)
}

/// Adds an exclusion buffer to a fold set: for each fold, every unit of
/// another fold whose point lies at distance ≤ `radius` from the point of any
/// of the fold's test units is excluded from the fold's training set
/// (Le Rest, K., Pinaud, D., Monestiez, P., Chadoeuf, J. & Bretagnolle, V.
/// (2014), Spatial leave-one-out cross-validation for variable selection in
/// the presence of spatial autocorrelation, *Global Ecology and Biogeography*
/// 23(7): 811–820; Roberts et al. (2017), *Ecography* 40(8): 913–929).
/// Exclusions already present are kept. Distances are Euclidean in the
/// distance CRS; a unit at exactly `radius` is excluded.
///
/// # Complexity
/// O(n·m) for n units with on average m units within the radius.
pub fn exclude_within(set: &mut FoldSet, input: &SchemeInput<'_>, radius: f64) {
    let k = set.k as usize;
    // Collect (fold, unit) pairs, then sort and deduplicate per fold: memory is
    // proportional to the exclusions, not to folds × units.
    let mut pairs: Vec<(u32, u32)> = Vec::new();
    for (unit, &point) in input.points.iter().enumerate() {
        let fold = set.fold_of[unit];
        input.index.for_each_within(point, radius, |other| {
            if set.fold_of[other as usize] != fold {
                pairs.push((fold, other));
            }
        });
    }
    pairs.sort_unstable();
    pairs.dedup();
    let mut excluded = std::mem::take(&mut set.excluded);
    excluded.resize(k, Vec::new());
    for (fold, unit) in pairs {
        excluded[fold as usize].push(unit);
    }
    for units in &mut excluded {
        units.sort_unstable();
        units.dedup();
    }
    set.excluded = excluded;
}

/// The random stream of one repetition.
///
/// Repetition `r` (0-based) of a run with seed `s` uses `ChaCha8Rng::seed_from_u64(s)`
/// with stream number `r`; each index below `n` is drawn by rejection sampling on
/// 64-bit outputs (`x % n` of the first `x` below the largest multiple of `n`).
pub struct FoldRng {
    rng: ChaCha8Rng,
}

impl FoldRng {
    /// The stream for repetition `repetition` of a run seeded with `seed`.
    pub fn new(seed: u64, repetition: u32) -> FoldRng {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(u64::from(repetition));
        FoldRng { rng }
    }

    /// A uniform index in `0..n`. `n` must be positive.
    pub fn index_below(&mut self, n: usize) -> usize {
        let n = n as u64;
        let zone = u64::MAX - (u64::MAX % n);
        loop {
            let draw = self.rng.next_u64();
            if draw < zone {
                return (draw % n) as usize;
            }
        }
    }

    /// A uniform number in `[0, 1)`: the top 53 bits of a 64-bit draw, scaled
    /// by 2⁻⁵³ (the usual conversion; common practice, no source).
    pub fn unit_interval(&mut self) -> f64 {
        (self.rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Fisher–Yates shuffle (Durstenfeld's form: swap item `i` with a uniform
    /// index in `0..=i`, for `i` from the end down to 1).
    pub fn shuffle<T>(&mut self, items: &mut [T]) {
        for i in (1..items.len()).rev() {
            let j = self.index_below(i + 1);
            items.swap(i, j);
        }
    }
}

/// The warning for unequal folds: when the largest fold holds more than 1.5
/// times the units of the smallest (common practice, no source), a sentence
/// saying so, followed by `advice`.
pub fn unequal_folds(sizes: &[usize], advice: &str) -> Option<String> {
    let smallest = sizes.iter().copied().min().unwrap_or(0);
    let largest = sizes.iter().copied().max().unwrap_or(0);
    (smallest > 0 && largest as f64 > 1.5 * smallest as f64).then(|| {
        format!(
            "folds are unequal: the largest holds {largest} units, the smallest {smallest} (warned above 1.5 times){advice}"
        )
    })
}

/// Median, smallest and largest of counts (e.g. units per block), for reports.
pub fn count_summary(counts: &[usize]) -> serde_json::Value {
    let mut sorted = counts.to_vec();
    sorted.sort_unstable();
    let median = match sorted.len() {
        0 => 0.0,
        n if n % 2 == 1 => sorted[n / 2] as f64,
        n => (sorted[n / 2 - 1] + sorted[n / 2]) as f64 / 2.0,
    };
    serde_json::json!({
        "median": median,
        "min": sorted.first().copied().unwrap_or(0),
        "max": sorted.last().copied().unwrap_or(0),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let draw = |seed, repetition| {
            let mut rng = FoldRng::new(seed, repetition);
            (0..5).map(|_| rng.index_below(1000)).collect::<Vec<_>>()
        };
        assert_eq!(draw(1, 0), draw(1, 0));
        assert_ne!(draw(1, 0), draw(1, 1));
        assert_ne!(draw(1, 0), draw(2, 0));
    }

    #[test]
    fn shuffle_is_a_permutation() {
        let mut rng = FoldRng::new(1, 0);
        let mut items: Vec<u32> = (0..100).collect();
        rng.shuffle(&mut items);
        let mut sorted = items.clone();
        sorted.sort();
        assert_eq!(sorted, (0..100).collect::<Vec<_>>());
        assert_ne!(items, sorted);
    }

    #[test]
    fn draws_are_uniform() {
        // Chi-square goodness of fit on 10 cells, 100,000 draws: the 0.999
        // quantile of chi-square with 9 degrees of freedom is 27.88 (standard
        // statistical tables, e.g. NIST/SEMATECH e-Handbook of Statistical
        // Methods, table 1.3.6.7.4).
        let mut rng = FoldRng::new(42, 0);
        let mut cells = [0u32; 10];
        for _ in 0..100_000 {
            cells[rng.index_below(10)] += 1;
        }
        let expected = 10_000.0;
        let chi2: f64 = cells
            .iter()
            .map(|&c| (f64::from(c) - expected).powi(2) / expected)
            .sum();
        assert!(chi2 < 27.88, "chi-square {chi2}, cells {cells:?}");
        let mut rng = FoldRng::new(42, 1);
        let mean = (0..100_000).map(|_| rng.unit_interval()).sum::<f64>() / 100_000.0;
        // Mean of U(0,1) is 1/2, SD of the mean sqrt(1/12/1e5) = 0.00091.
        assert!((mean - 0.5).abs() < 0.004, "{mean}");
    }

    #[test]
    fn a_buffer_excludes_exactly_the_units_within_the_radius_of_a_test_unit() {
        // Six points on a line 1 apart; folds 0,0,1,1,2,2. With radius 1 fold 0
        // (points 0 and 1) excludes point 2; fold 1 excludes points 1 and 4;
        // fold 2 excludes point 3. Hand computation.
        let points =
            crate::core::testing::Points::new((0..6).map(|i| [f64::from(i), 0.0]).collect());
        let input = points.input();
        let mut set = FoldSet::plain(3, vec![0, 0, 1, 1, 2, 2]);
        exclude_within(&mut set, &input, 1.0);
        assert_eq!(set.excluded, vec![vec![2], vec![1, 4], vec![3]]);
        assert!(set.has_exclusions());
        let mut none = FoldSet::plain(3, vec![0, 0, 1, 1, 2, 2]);
        exclude_within(&mut none, &input, 0.5);
        assert!(!none.has_exclusions());
    }
}
