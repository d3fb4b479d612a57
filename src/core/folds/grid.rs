//! Spatial block cross-validation on a square grid.
//!
//! Roberts, D. R. et al. (2017). Cross-validation strategies for data with
//! temporal, spatial, hierarchical, or phylogenetic structure. *Ecography*
//! 40(8): 913–929. doi:10.1111/ecog.02881. Blocks hold nearby units together so
//! a held-out unit's neighbours are held out with it; the block side should be
//! at least the range of residual spatial autocorrelation.
//!
//! # Rules
//! - **Cells.** Square cells of side `block-size` (CRS units, metres for a
//!   projected CRS) anchored at `grid-origin`: a unit whose representative point
//!   is `(x, y)` is in cell `(floor((x - x0) / s), floor((y - y0) / s))`, so cells
//!   are half-open, closed on their west and south edges. The default origin is
//!   `(0, 0)` of the CRS, so the grid does not move when units are added.
//! - **Dealing.** Occupied blocks, sorted by (col, row), are shuffled with the
//!   repetition's seeded stream; then, in shuffled order, each block goes to the
//!   fold with the fewest units so far (ties to the lowest fold number). This
//!   greedy rule guarantees every fold a block and keeps the largest and the
//!   smallest fold within one block's size of each other.
//! - **Warnings.** The split is called *close to random* when the median
//!   occupied block holds at most 2 units (neighbours then rarely share a
//!   block), and *uneven* when there are fewer than 2 occupied blocks per fold
//!   or the largest fold holds more than 1.5 times the units of the smallest
//!   (common practice, no source: REFERENCES §7 "number of blocks ≥ 2k").
//!
//! # Complexity
//! O(n log b + b·k) for n units, b occupied blocks and k folds.

use std::collections::BTreeMap;

use geo_types::MultiPolygon;
use serde::{Deserialize, Serialize};

use super::{
    count_summary, scheme_params, FoldRng, FoldScheme, FoldSet, Region, SchemeEntry, SchemeInput,
};
use crate::core::geometry::cell_polygon;
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "grid",
    about: "square spatial blocks of --block-size, dealt to folds",
    options: &["block-size", "grid-origin", "folds"],
    build,
};

/// Largest `|(x - x0) / block-size|` accepted, so that cell indices are exact
/// integers in a double (2⁵²).
const MAX_CELL_INDEX: f64 = 4_503_599_627_370_496.0;

/// Options of the grid scheme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GridParams {
    /// Side of a block, in CRS units (metres for a projected CRS).
    pub block_size: f64,
    /// Grid origin `(x0, y0)` in CRS units.
    #[serde(default, deserialize_with = "crate::core::options::pair")]
    pub grid_origin: [f64; 2],
    /// Number of folds, at least 2.
    #[serde(default = "default_folds")]
    pub folds: u32,
}

/// The default number of folds of every k-fold scheme.
pub fn default_folds() -> u32 {
    5
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    if !options.contains_key("block-size") {
        return Err(Error::Usage(
            "--scheme grid needs --block-size (the side of a block in CRS units, metres for a projected CRS)"
                .into(),
        ));
    }
    let params: GridParams = scheme_params("grid", ENTRY.options, options)?;
    check(&params)?;
    Ok(Box::new(Grid { params }))
}

/// Checks the options alone, before any data are read.
fn check(params: &GridParams) -> Result<(), Error> {
    let size = params.block_size;
    if !(size.is_finite() && size > 0.0) {
        return Err(Error::Usage(format!(
            "--block-size must be a positive number, got {size}"
        )));
    }
    if !(1e-6..=1e12).contains(&size) {
        return Err(Error::Usage(format!(
            "--block-size {size} is outside 1e-6 to 1e12 CRS units; give the side of a block in the CRS's unit \
             (metres for a projected CRS), e.g. --block-size 4000"
        )));
    }
    let [x0, y0] = params.grid_origin;
    if !(x0.is_finite() && y0.is_finite() && x0.abs() <= 1e12 && y0.abs() <= 1e12) {
        return Err(Error::Usage(format!(
            "--grid-origin must be two finite numbers within ±1e12 CRS units, got {x0},{y0}"
        )));
    }
    super::random::check_folds(params.folds)
}

/// The grid scheme.
#[derive(Debug, Clone)]
pub struct Grid {
    /// Its options.
    pub params: GridParams,
}

impl Grid {
    /// The grid scheme with these options.
    ///
    /// # Errors
    /// As [`ENTRY`]'s build: a block size or origin out of range, too few folds.
    pub fn new(params: GridParams) -> Result<Grid, Error> {
        check(&params)?;
        Ok(Grid { params })
    }
}

/// The cell of a point.
pub fn cell_of(point: [f64; 2], params: &GridParams) -> (i64, i64) {
    let col = ((point[0] - params.grid_origin[0]) / params.block_size).floor() as i64;
    let row = ((point[1] - params.grid_origin[1]) / params.block_size).floor() as i64;
    (col, row)
}

impl FoldScheme for Grid {
    fn name(&self) -> &'static str {
        "grid"
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::to_value(&self.params).unwrap_or_default()
    }

    fn needs_distances(&self) -> bool {
        true
    }

    fn randomised(&self) -> bool {
        true
    }

    fn describe(&self, length: &dyn Fn(f64) -> String) -> String {
        let [x0, y0] = self.params.grid_origin;
        format!(
            "square blocks of {} from origin ({x0}, {y0}), dealt to {} folds",
            length(self.params.block_size),
            self.params.folds
        )
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let params = &self.params;
        let k = params.folds;
        let mut cells = Vec::with_capacity(input.points.len());
        for point in input.points {
            let scaled = [
                (point[0] - params.grid_origin[0]) / params.block_size,
                (point[1] - params.grid_origin[1]) / params.block_size,
            ];
            if scaled
                .iter()
                .any(|v| !v.is_finite() || v.abs() > MAX_CELL_INDEX)
            {
                return Err(Error::Usage(format!(
                    "--block-size {} is too small for coordinates like ({}, {}): cell numbers would overflow; \
                     give the block side in the CRS's unit",
                    params.block_size, point[0], point[1]
                )));
            }
            cells.push(cell_of(*point, params));
        }
        let mut counts: BTreeMap<(i64, i64), usize> = BTreeMap::new();
        for &cell in &cells {
            *counts.entry(cell).or_insert(0) += 1;
        }
        if counts.len() < k as usize {
            return Err(Error::Folds(format!(
                "blocks of side {} hold the {} units in only {} occupied blocks, fewer than the {k} folds; \
                 use a smaller --block-size or fewer --folds",
                params.block_size,
                input.points.len(),
                counts.len()
            )));
        }
        let mut blocks: Vec<((i64, i64), usize, u32)> =
            counts.into_iter().map(|(cell, n)| (cell, n, 0)).collect();
        rng.shuffle(&mut blocks);
        let mut load = vec![0usize; k as usize];
        for block in &mut blocks {
            let mut fold = 0;
            for (candidate, &units) in load.iter().enumerate() {
                if units < load[fold] {
                    fold = candidate;
                }
            }
            block.2 = fold as u32;
            load[fold] += block.1;
        }
        blocks.sort_by_key(|block| block.0);
        let mut fold_of = Vec::with_capacity(cells.len());
        for cell in &cells {
            let index = blocks
                .binary_search_by_key(cell, |block| block.0)
                .map_err(|_| Error::Internal("a unit fell outside every block".into()))?;
            fold_of.push(blocks[index].2);
        }
        let regions = blocks
            .iter()
            .map(|&((col, row), units, fold)| Region {
                fold,
                kind: "block",
                label: format!("block {col},{row}"),
                units: units as u32,
                geometry: MultiPolygon::new(vec![cell_polygon(
                    params.grid_origin,
                    params.block_size,
                    col,
                    row,
                )]),
            })
            .collect();
        let per_block: Vec<usize> = blocks.iter().map(|block| block.1).collect();
        let mut set = FoldSet::plain(k, fold_of);
        set.regions = regions;
        set.warnings = block_warnings(&per_block, &set.fold_sizes(), k);
        set.facts
            .insert("occupied_blocks".into(), blocks.len().into());
        set.facts
            .insert("units_per_block".into(), count_summary(&per_block));
        Ok(set)
    }
}

/// The warnings of the module doc's rule, for any block scheme.
pub fn block_warnings(units_per_block: &[usize], fold_sizes: &[usize], k: u32) -> Vec<String> {
    let mut warnings = Vec::new();
    let median = count_summary(units_per_block)["median"]
        .as_f64()
        .unwrap_or(0.0);
    if median <= 2.0 {
        warnings.push(format!(
            "the blocks are so small that the split is close to random: the median block holds {median} units \
             (warned at 2 or fewer), so neighbours rarely share a block; use a larger --block-size"
        ));
    }
    let smallest = fold_sizes.iter().copied().min().unwrap_or(0);
    let largest = fold_sizes.iter().copied().max().unwrap_or(0);
    if units_per_block.len() < 2 * k as usize {
        warnings.push(format!(
            "only {} occupied blocks for {k} folds (warned below 2 per fold): folds may be very unequal; \
             use a smaller --block-size or fewer --folds",
            units_per_block.len()
        ));
    } else if smallest > 0 && largest as f64 > 1.5 * smallest as f64 {
        warnings.push(format!(
            "folds are unequal: the largest holds {largest} units, the smallest {smallest} (warned above 1.5 times)"
        ));
    }
    warnings
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::Points;

    fn grid(block_size: f64, folds: u32) -> Grid {
        Grid::new(GridParams {
            block_size,
            grid_origin: [0.0, 0.0],
            folds,
        })
        .unwrap()
    }

    fn lattice(n: usize, spacing: f64) -> Points {
        Points::new(
            (0..n * n)
                .map(|i| {
                    [
                        (i % n) as f64 * spacing + 0.5,
                        (i / n) as f64 * spacing + 0.5,
                    ]
                })
                .collect(),
        )
    }

    #[test]
    fn cells_are_half_open() {
        let p = grid(10.0, 2).params;
        assert_eq!(cell_of([0.0, 0.0], &p), (0, 0));
        assert_eq!(cell_of([9.999, 9.999], &p), (0, 0));
        assert_eq!(cell_of([10.0, 0.0], &p), (1, 0));
        assert_eq!(cell_of([-0.001, 0.0], &p), (-1, 0));
    }

    #[test]
    fn units_of_a_block_share_a_fold_and_folds_are_balanced() {
        let points = lattice(30, 1.0);
        let scheme = grid(4.0, 5);
        let set = scheme
            .assign(&points.input(), &mut FoldRng::new(11, 0))
            .unwrap();
        for (i, point) in points.points.iter().enumerate() {
            let (col, row) = cell_of(*point, &scheme.params);
            let region = set
                .regions
                .iter()
                .find(|r| r.label == format!("block {col},{row}"))
                .unwrap();
            assert_eq!(set.fold_of[i], region.fold);
        }
        let sizes = set.fold_sizes();
        let largest_block = set.regions.iter().map(|r| r.units as usize).max().unwrap();
        assert!(sizes.iter().all(|&s| s > 0));
        assert!(
            sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= largest_block,
            "{sizes:?}"
        );
        assert_eq!(set.regions.iter().map(|r| r.units).sum::<u32>(), 900);
        assert_eq!(set.facts["occupied_blocks"], 64);
        assert!(set.excluded.is_empty());
    }

    #[test]
    fn one_block_cannot_make_folds() {
        // A block larger than the extent puts every unit in one block, which must be
        // an error for k > 1 (Roberts et al. 2017 degenerate case; common practice).
        let points = lattice(5, 1.0);
        let error = grid(1000.0, 2)
            .assign(&points.input(), &mut FoldRng::new(1, 0))
            .unwrap_err();
        assert!(
            error.to_string().contains("only 1 occupied blocks"),
            "{error}"
        );
    }

    #[test]
    fn tiny_blocks_give_one_unit_per_block_and_a_warning() {
        let points = lattice(10, 1.0);
        let set = grid(0.5, 10)
            .assign(&points.input(), &mut FoldRng::new(3, 0))
            .unwrap();
        assert_eq!(set.regions.len(), 100);
        assert!(set.fold_sizes().iter().all(|&s| s == 10));
        assert!(
            set.warnings[0].contains("close to random"),
            "{:?}",
            set.warnings
        );
    }

    #[test]
    fn seeds_change_the_deal_but_not_reproducibility() {
        let points = lattice(20, 1.0);
        let scheme = grid(3.0, 4);
        let a = scheme
            .assign(&points.input(), &mut FoldRng::new(9, 0))
            .unwrap();
        let b = scheme
            .assign(&points.input(), &mut FoldRng::new(9, 0))
            .unwrap();
        let c = scheme
            .assign(&points.input(), &mut FoldRng::new(9, 1))
            .unwrap();
        assert_eq!(a, b);
        assert_ne!(a.fold_of, c.fold_of);
    }

    #[test]
    fn bad_sizes_and_origins_are_refused_before_reading() {
        for size in [0.0, -1.0, f64::NAN, f64::INFINITY, 1e300] {
            let error = Grid::new(GridParams {
                block_size: size,
                grid_origin: [0.0, 0.0],
                folds: 5,
            })
            .unwrap_err();
            assert_eq!(error.exit_code(), crate::error::exit::USAGE, "{size}");
        }
        let error = Grid::new(GridParams {
            block_size: 10.0,
            grid_origin: [f64::NAN, 0.0],
            folds: 5,
        })
        .unwrap_err();
        assert_eq!(error.exit_code(), crate::error::exit::USAGE);
        // Coordinates far beyond what the block size can number.
        let points = Points::new(vec![[1e11, 0.0], [0.0, 0.0]]);
        let error = grid(1e-5, 2)
            .assign(&points.input(), &mut FoldRng::new(1, 0))
            .unwrap_err();
        assert!(error.to_string().contains("overflow"), "{error}");
    }

    #[test]
    fn options_parse_from_the_map() {
        let mut options = Options::new();
        options.insert("block-size".into(), 4000.into());
        options.insert("grid-origin".into(), "-5000,0".into());
        let scheme = build(&options).unwrap();
        assert_eq!(
            scheme.parameters()["grid-origin"],
            serde_json::json!([-5000.0, 0.0])
        );
        assert_eq!(scheme.parameters()["folds"], 5);
        options.remove("block-size");
        let error = build(&options).err().unwrap();
        assert!(error.to_string().contains("needs --block-size"));
    }
}
