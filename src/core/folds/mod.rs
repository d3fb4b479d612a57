//! Fold schemes: how units are split into held-out folds.
//!
//! Every scheme is a pure function of the dataset (in id order), its parameters
//! and a seed, so the same rows and options give the same folds on any machine
//! and for any row order of the source. Randomness comes only from
//! [`FoldRng`], a ChaCha8 stream whose draws are turned into indices by a
//! documented rule, never from the thread RNG or hash-map order.
//!
//! - [`grid`]: square spatial blocks dealt to folds, balanced by unit count.
//! - [`random`]: plain k-fold over units, the non-spatial comparison.

pub mod grid;
pub mod random;

use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};
use serde::Serialize;

use crate::core::units::Dataset;
use crate::error::Error;

/// Which scheme to use and its parameters.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "scheme", rename_all = "lowercase")]
pub enum SchemeSpec {
    /// Square blocks over the representative points.
    Grid(grid::GridParams),
    /// Plain k-fold over units.
    Random(random::RandomParams),
}

impl SchemeSpec {
    /// The scheme's name as stored in `runs.scheme`.
    pub fn name(&self) -> &'static str {
        match self {
            SchemeSpec::Grid(_) => "grid",
            SchemeSpec::Random(_) => "random",
        }
    }

    /// Number of folds.
    pub fn folds(&self) -> u32 {
        match self {
            SchemeSpec::Grid(params) => params.folds,
            SchemeSpec::Random(params) => params.folds,
        }
    }

    /// Assigns folds for one repetition.
    ///
    /// # Errors
    /// [`Error::Folds`] when the units cannot be split as asked (fewer blocks or
    /// units than folds, a non-positive block size).
    pub fn assign(&self, dataset: &Dataset, rng: &mut FoldRng) -> Result<FoldAssignment, Error> {
        match self {
            SchemeSpec::Grid(params) => grid::assign(dataset, params, rng),
            SchemeSpec::Random(params) => random::assign(dataset, params, rng),
        }
    }
}

/// The folds of one repetition.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldAssignment {
    /// Number of folds.
    pub k: u32,
    /// Fold (0-based) of each unit, in dataset order.
    pub fold_of: Vec<u32>,
    /// The blocks, for block schemes; each lists its fold.
    pub blocks: Vec<Block>,
}

impl FoldAssignment {
    /// Number of units in each fold.
    pub fn fold_sizes(&self) -> Vec<usize> {
        let mut sizes = vec![0usize; self.k as usize];
        for &fold in &self.fold_of {
            sizes[fold as usize] += 1;
        }
        sizes
    }
}

/// One grid block with the fold it was dealt to.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Block {
    /// Column index: `floor((x - origin_x) / size)`.
    pub col: i64,
    /// Row index: `floor((y - origin_y) / size)`.
    pub row: i64,
    /// Fold (0-based).
    pub fold: u32,
    /// Units whose representative point falls in the block.
    pub n_units: usize,
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

    /// Fisher–Yates shuffle (Durstenfeld's form: swap item `i` with a uniform
    /// index in `0..=i`, for `i` from the end down to 1).
    pub fn shuffle<T>(&mut self, items: &mut [T]) {
        for i in (1..items.len()).rev() {
            let j = self.index_below(i + 1);
            items.swap(i, j);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let draw = |seed, repetition| {
            let mut rng = FoldRng::new(seed, repetition);
            (0..8).map(|_| rng.index_below(1000)).collect::<Vec<_>>()
        };
        assert_eq!(draw(7, 0), draw(7, 0));
        assert_ne!(draw(7, 0), draw(7, 1));
        assert_ne!(draw(7, 0), draw(8, 0));
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
    fn index_below_is_roughly_uniform() {
        // Chi-square over 10 cells, 100 000 draws; 27.88 is the 0.999 quantile
        // of chi-square with 9 degrees of freedom (standard statistical tables).
        let mut rng = FoldRng::new(42, 3);
        let mut counts = [0f64; 10];
        for _ in 0..100_000 {
            counts[rng.index_below(10)] += 1.0;
        }
        let chi2: f64 = counts
            .iter()
            .map(|c| (c - 10_000.0).powi(2) / 10_000.0)
            .sum();
        assert!(chi2 < 27.88, "chi2 = {chi2}");
    }
}
