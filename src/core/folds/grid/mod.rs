//! Spatial block cross-validation on a grid of squares or hexagons.
//!
//! Roberts, D. R. et al. (2017). Cross-validation strategies for data with
//! temporal, spatial, hierarchical, or phylogenetic structure. *Ecography*
//! 40(8): 913–929. doi:10.1111/ecog.02881. Blocks hold nearby units together so
//! a held-out unit's neighbours are held out with it; the block side should be
//! at least the range of residual spatial autocorrelation. The abstract could
//! be read; the paper's options for assigning blocks to folds (random,
//! systematic, balanced) are recalled from memory, and the rules below are
//! geofold's own.
//!
//! # Rules
//! - **Cells** ([`cells`]). `block-shape square` (the default): squares of side
//!   `block-size` (CRS units, metres for a projected CRS) anchored at
//!   `grid-origin`, half-open, closed on their west and south edges.
//!   `block-shape hex`: flat-topped hexagons (two sides parallel to the x
//!   axis) `block-size` between opposite sides, one centred on
//!   `grid-origin`; a unit is in the hexagon whose centre is nearest to its
//!   representative point. The default origin is `(0, 0)` of the CRS, so the
//!   grid does not move when units are added.
//! - **Dealing, `deal random`** (the default). Occupied blocks, sorted by
//!   (col, row), are shuffled with the repetition's seeded stream; then, in
//!   shuffled order, each block goes to the fold with the fewest units so far
//!   (ties to the lowest fold number). This greedy rule guarantees every fold
//!   a block and keeps the largest and the smallest fold within one block's
//!   size of each other.
//! - **Dealing, `deal systematic`**. A fixed pattern over block columns and
//!   rows ([`cells`]): squares go to fold `(col + m·row) mod k` (`m = 1` for
//!   `k ≤ 3`, else 2), hexagons to `(q − r) mod k` in axial coordinates, so
//!   blocks sharing an edge never share a fold. Hexagons need `k ≥ 3`. The
//!   pattern draws nothing at random: every repetition is the same. Fold sizes
//!   follow where the units are; a fold with no occupied block is an error.
//! - **Size.** A block larger than the study area (the bounding box of the
//!   representative points, in both directions) is refused: it cannot keep
//!   test units apart from training units.
//! - **Warnings.** The split is called *close to random* when the median
//!   occupied block holds at most 2 units (neighbours then rarely share a
//!   block), and *uneven* when there are fewer than 2 occupied blocks per fold
//!   or the largest fold holds more than 1.5 times the units of the smallest
//!   (common practice, no source: REFERENCES §7 "number of blocks ≥ 2k").
//!
//! # Complexity
//! O(n log b + b·k) for n units, b occupied blocks and k folds.

pub mod cells;

use std::collections::BTreeMap;

use geo_types::MultiPolygon;
use serde::{Deserialize, Serialize};

use super::{
    count_summary, scheme_params, FoldRng, FoldScheme, FoldSet, Region, SchemeEntry, SchemeInput,
};
use crate::core::options::Options;
use crate::error::Error;
use cells::{Cells, Shape};

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "grid",
    about: "square or hexagonal spatial blocks of --block-size, dealt to folds",
    options: &["block-size", "grid-origin", "folds", "block-shape", "deal"],
    build,
};

/// Largest `|(x - x0) / block-size|` accepted, so that cell indices are exact
/// integers in a double (2⁵²).
const MAX_CELL_INDEX: f64 = 4_503_599_627_370_496.0;

/// The shape of the blocks, as given to `--block-shape`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum BlockShape {
    /// Squares.
    #[default]
    Square,
    /// Flat-topped hexagons.
    Hex,
}

/// How blocks are dealt to folds, as given to `--deal`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Deal {
    /// Seeded shuffle, then each block to the fold with the fewest units.
    #[default]
    Random,
    /// The fixed pattern of [`cells`].
    Systematic,
}

/// Options of the grid scheme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GridParams {
    /// Side of a square block, or the distance between opposite sides of a
    /// hexagon, in CRS units (metres for a projected CRS).
    pub block_size: f64,
    /// Grid origin `(x0, y0)` in CRS units: a square's corner or a hexagon's centre.
    #[serde(default, deserialize_with = "crate::core::options::pair")]
    pub grid_origin: [f64; 2],
    /// Number of folds, at least 2.
    #[serde(default = "default_folds")]
    pub folds: u32,
    /// Square or hexagonal blocks.
    #[serde(default)]
    pub block_shape: BlockShape,
    /// Random (balanced) or systematic dealing.
    #[serde(default)]
    pub deal: Deal,
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
    super::random::check_folds(params.folds)?;
    if params.block_shape == BlockShape::Hex && params.deal == Deal::Systematic && params.folds < 3
    {
        return Err(Error::Usage(
            "--deal systematic with --block-shape hex needs at least 3 folds: three hexagons meet at every \
             corner, so two folds cannot keep every pair of neighbouring hexagons apart; use --folds 3 or more, \
             or square blocks"
                .into(),
        ));
    }
    Ok(())
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

    /// The cells of this grid.
    pub fn cells(&self) -> Cells {
        Cells {
            shape: match self.params.block_shape {
                BlockShape::Square => Shape::Square,
                BlockShape::Hex => Shape::Hex,
            },
            size: self.params.block_size,
            origin: self.params.grid_origin,
        }
    }
}

/// The square cell of a point (see [`cells`]).
pub fn cell_of(point: [f64; 2], params: &GridParams) -> (i64, i64) {
    Cells {
        shape: Shape::Square,
        size: params.block_size,
        origin: params.grid_origin,
    }
    .cell_of(point)
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
        self.params.deal == Deal::Random
    }

    fn describe(&self, length: &dyn Fn(f64) -> String) -> String {
        let [x0, y0] = self.params.grid_origin;
        let (shape, anchor) = match self.params.block_shape {
            BlockShape::Square => ("square blocks of", "from origin"),
            BlockShape::Hex => ("hexagonal blocks (flat-topped) of width", "centred on"),
        };
        let deal = match self.params.deal {
            Deal::Random => "dealt to",
            Deal::Systematic => "in a fixed pattern (neighbours never share a fold) over",
        };
        format!(
            "{shape} {} {anchor} ({x0}, {y0}), {deal} {} folds",
            length(self.params.block_size),
            self.params.folds
        )
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let params = &self.params;
        let k = params.folds;
        let grid = self.cells();
        check_extent(input.points, params.block_size)?;
        let mut cells = Vec::with_capacity(input.points.len());
        for point in input.points {
            let scaled = grid.scaled(*point);
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
            cells.push(grid.cell_of(*point));
        }
        let mut counts: BTreeMap<(i64, i64), usize> = BTreeMap::new();
        for &cell in &cells {
            *counts.entry(cell).or_insert(0) += 1;
        }
        if counts.len() < k as usize {
            return Err(Error::Folds(format!(
                "blocks of size {} hold the {} units in only {} occupied blocks, fewer than the {k} folds; \
                 use a smaller --block-size or fewer --folds",
                params.block_size,
                input.points.len(),
                counts.len()
            )));
        }
        let mut blocks: Vec<((i64, i64), usize, u32)> =
            counts.into_iter().map(|(cell, n)| (cell, n, 0)).collect();
        match params.deal {
            Deal::Random => {
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
            }
            Deal::Systematic => {
                for block in &mut blocks {
                    block.2 = grid.systematic_fold(block.0, k);
                }
                let mut used = vec![false; k as usize];
                for block in &blocks {
                    used[block.2 as usize] = true;
                }
                if let Some(empty) = used.iter().position(|u| !u) {
                    return Err(Error::Folds(format!(
                        "the systematic pattern leaves fold {} without an occupied block ({} occupied blocks for \
                         {k} folds); use a smaller --block-size, fewer --folds, or --deal random",
                        empty + 1,
                        blocks.len()
                    )));
                }
            }
        }
        let mut fold_of = Vec::with_capacity(cells.len());
        for cell in &cells {
            let index = blocks
                .binary_search_by_key(cell, |block| block.0)
                .map_err(|_| Error::Internal("a unit fell outside every block".into()))?;
            fold_of.push(blocks[index].2);
        }
        let kind = match params.block_shape {
            BlockShape::Square => "block",
            BlockShape::Hex => "hexagon",
        };
        let regions = blocks
            .iter()
            .map(|&((col, row), units, fold)| Region {
                fold,
                kind,
                label: format!("{kind} {col},{row}"),
                units: units as u32,
                geometry: MultiPolygon::new(vec![grid.polygon((col, row))]),
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

/// Refuses a block larger than the study area in both directions.
fn check_extent(points: &[[f64; 2]], size: f64) -> Result<(), Error> {
    let Some(first) = points.first() else {
        return Ok(());
    };
    let mut bounds = [first[0], first[1], first[0], first[1]];
    for p in points {
        bounds[0] = bounds[0].min(p[0]);
        bounds[1] = bounds[1].min(p[1]);
        bounds[2] = bounds[2].max(p[0]);
        bounds[3] = bounds[3].max(p[1]);
    }
    let (width, height) = (bounds[2] - bounds[0], bounds[3] - bounds[1]);
    if size > width && size > height {
        return Err(Error::Folds(format!(
            "--block-size {size} is larger than the study area: the units' points span {width} by {height} CRS \
             units, so blocks cannot keep test units apart from training units; use a block size well below the \
             extent (several blocks per fold), for example {}",
            (width.max(height) / 10.0).max(f64::MIN_POSITIVE)
        )));
    }
    Ok(())
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
mod tests;
