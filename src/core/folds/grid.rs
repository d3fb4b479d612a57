//! Spatial block cross-validation on a square grid.
//!
//! Roberts, D. R. et al. (2017). Cross-validation strategies for data with
//! temporal, spatial, hierarchical, or phylogenetic structure. *Ecography*
//! 40(8): 913–929. doi:10.1111/ecog.02881. Blocks hold nearby units together so
//! a held-out unit's neighbours are held out with it; the block side should be
//! at least the range of residual spatial autocorrelation.
//!
//! # Rules
//! - **Cells.** Square cells of side `block_size` (CRS units, metres for a
//!   projected CRS) anchored at `origin`: a unit whose representative point is
//!   `(x, y)` is in cell `(floor((x - x0) / s), floor((y - y0) / s))`, so cells are
//!   half-open, closed on their west and south edges. The default origin is
//!   `(0, 0)` of the CRS, so the grid does not move when units are added.
//! - **Dealing.** Occupied blocks, sorted by (col, row), are shuffled with the
//!   repetition's seeded stream; then, in shuffled order, each block goes to the
//!   fold with the fewest units so far (ties to the lowest fold number). This
//!   greedy rule guarantees every fold a block and keeps the largest and the
//!   smallest fold within one block's size of each other.
//!
//! # Complexity
//! O(n log b) for n units and b occupied blocks.

use std::collections::BTreeMap;

use serde::Serialize;

use super::{Block, FoldAssignment, FoldRng};
use crate::core::units::Dataset;
use crate::error::Error;

/// Parameters of the grid scheme.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GridParams {
    /// Side of a block, in CRS units (metres for a projected CRS).
    pub block_size: f64,
    /// Grid origin `(x0, y0)`.
    pub origin: [f64; 2],
    /// Number of folds, at least 2.
    pub folds: u32,
}

/// The cell of a point.
pub fn cell_of(point: [f64; 2], params: &GridParams) -> (i64, i64) {
    let col = ((point[0] - params.origin[0]) / params.block_size).floor() as i64;
    let row = ((point[1] - params.origin[1]) / params.block_size).floor() as i64;
    (col, row)
}

/// Deals blocks to folds.
///
/// # Errors
/// A block size that is not a positive finite number; fewer than 2 folds; fewer
/// occupied blocks than folds.
pub fn assign(
    dataset: &Dataset,
    params: &GridParams,
    rng: &mut FoldRng,
) -> Result<FoldAssignment, Error> {
    let k = params.folds;
    if !(params.block_size.is_finite() && params.block_size > 0.0) {
        return Err(Error::Folds(format!(
            "--block-size must be a positive number, got {}",
            params.block_size
        )));
    }
    if k < 2 {
        return Err(Error::Folds(format!("--folds must be at least 2, got {k}")));
    }
    let cells: Vec<(i64, i64)> = dataset
        .points
        .iter()
        .map(|&point| cell_of(point, params))
        .collect();
    let mut counts: BTreeMap<(i64, i64), usize> = BTreeMap::new();
    for &cell in &cells {
        *counts.entry(cell).or_insert(0) += 1;
    }
    if counts.len() < k as usize {
        return Err(Error::Folds(format!(
            "blocks of side {} hold the {} units in only {} occupied blocks, fewer than the {k} folds; use a smaller --block-size or fewer --folds",
            params.block_size,
            dataset.len(),
            counts.len()
        )));
    }
    let mut blocks: Vec<Block> = counts
        .into_iter()
        .map(|((col, row), n_units)| Block {
            col,
            row,
            fold: 0,
            n_units,
        })
        .collect();
    rng.shuffle(&mut blocks);
    let mut load = vec![0usize; k as usize];
    for block in &mut blocks {
        let (fold, _) = load
            .iter()
            .enumerate()
            .min_by_key(|&(fold, &units)| (units, fold))
            .unwrap_or((0, &0));
        block.fold = fold as u32;
        load[fold] += block.n_units;
    }
    blocks.sort_by_key(|block| (block.col, block.row));
    let fold_of = cells
        .iter()
        .map(|cell| {
            let index = blocks
                .binary_search_by_key(cell, |block| (block.col, block.row))
                .map_err(|_| Error::Internal("unit outside every block".into()))?;
            Ok(blocks[index].fold)
        })
        .collect::<Result<Vec<u32>, Error>>()?;
    Ok(FoldAssignment { k, fold_of, blocks })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::points_dataset;

    fn params(block_size: f64, folds: u32) -> GridParams {
        GridParams {
            block_size,
            origin: [0.0, 0.0],
            folds,
        }
    }

    fn lattice(n: usize, spacing: f64) -> Vec<[f64; 2]> {
        (0..n * n)
            .map(|i| {
                [
                    (i % n) as f64 * spacing + 0.5,
                    (i / n) as f64 * spacing + 0.5,
                ]
            })
            .collect()
    }

    #[test]
    fn cells_are_half_open() {
        let p = params(10.0, 2);
        assert_eq!(cell_of([0.0, 0.0], &p), (0, 0));
        assert_eq!(cell_of([9.999, 9.999], &p), (0, 0));
        assert_eq!(cell_of([10.0, 0.0], &p), (1, 0));
        assert_eq!(cell_of([-0.001, 0.0], &p), (-1, 0));
    }

    #[test]
    fn units_of_a_block_share_a_fold_and_folds_are_balanced() {
        let dataset = points_dataset(&lattice(30, 1.0));
        let p = params(4.0, 5);
        let assignment = assign(&dataset, &p, &mut FoldRng::new(11, 0)).unwrap();
        for (i, point) in dataset.points.iter().enumerate() {
            let cell = cell_of(*point, &p);
            let block = assignment
                .blocks
                .iter()
                .find(|b| (b.col, b.row) == cell)
                .unwrap();
            assert_eq!(assignment.fold_of[i], block.fold);
        }
        let sizes = assignment.fold_sizes();
        let largest_block = assignment.blocks.iter().map(|b| b.n_units).max().unwrap();
        assert!(sizes.iter().all(|&s| s > 0));
        assert!(
            sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= largest_block,
            "{sizes:?}"
        );
    }

    #[test]
    fn one_block_cannot_make_folds() {
        // A block larger than the extent puts every unit in one block, which must be
        // an error for k > 1 (Roberts et al. 2017 degenerate case; common practice).
        let dataset = points_dataset(&lattice(5, 1.0));
        let error = assign(&dataset, &params(1000.0, 2), &mut FoldRng::new(1, 0)).unwrap_err();
        assert!(
            error.to_string().contains("only 1 occupied blocks"),
            "{error}"
        );
    }

    #[test]
    fn tiny_blocks_give_one_unit_per_block() {
        let dataset = points_dataset(&lattice(10, 1.0));
        let assignment = assign(&dataset, &params(0.5, 10), &mut FoldRng::new(3, 0)).unwrap();
        assert_eq!(assignment.blocks.len(), 100);
        assert!(assignment.fold_sizes().iter().all(|&s| s == 10));
    }

    #[test]
    fn seeds_change_the_deal_but_not_reproducibility() {
        let dataset = points_dataset(&lattice(20, 1.0));
        let p = params(3.0, 4);
        let a = assign(&dataset, &p, &mut FoldRng::new(9, 0)).unwrap();
        let b = assign(&dataset, &p, &mut FoldRng::new(9, 0)).unwrap();
        let c = assign(&dataset, &p, &mut FoldRng::new(9, 1)).unwrap();
        assert_eq!(a, b);
        assert_ne!(a.fold_of, c.fold_of);
    }
}
