//! Plain (non-spatial) k-fold: the comparison that shows how optimistic
//! ignoring space is.
//!
//! # Rule
//! Units in id order are shuffled with the repetition's [`FoldRng`]; the unit at
//! shuffled position `p` goes to fold `p mod k`. Fold sizes differ by at most one.

use serde::Serialize;

use super::{FoldAssignment, FoldRng};
use crate::core::units::Dataset;
use crate::error::Error;

/// Parameters of the random scheme.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RandomParams {
    /// Number of folds, at least 2.
    pub folds: u32,
}

/// Assigns units to folds at random.
///
/// # Errors
/// Fewer units than folds, or fewer than 2 folds.
pub fn assign(
    dataset: &Dataset,
    params: &RandomParams,
    rng: &mut FoldRng,
) -> Result<FoldAssignment, Error> {
    let k = params.folds;
    if k < 2 {
        return Err(Error::Folds(format!("--folds must be at least 2, got {k}")));
    }
    if dataset.len() < k as usize {
        return Err(Error::Folds(format!(
            "{} units cannot fill {k} folds",
            dataset.len()
        )));
    }
    let mut order: Vec<usize> = (0..dataset.len()).collect();
    rng.shuffle(&mut order);
    let mut fold_of = vec![0u32; dataset.len()];
    for (position, &unit) in order.iter().enumerate() {
        fold_of[unit] = (position % k as usize) as u32;
    }
    Ok(FoldAssignment {
        k,
        fold_of,
        blocks: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::points_dataset;

    #[test]
    fn sizes_differ_by_at_most_one() {
        let dataset = points_dataset(&(0..103).map(|i| [i as f64, 0.0]).collect::<Vec<_>>());
        let assignment = assign(
            &dataset,
            &RandomParams { folds: 10 },
            &mut FoldRng::new(5, 0),
        )
        .unwrap();
        let sizes = assignment.fold_sizes();
        assert_eq!(sizes.iter().sum::<usize>(), 103);
        assert!(
            sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1,
            "{sizes:?}"
        );
    }

    #[test]
    fn too_few_units_is_an_error() {
        let dataset = points_dataset(&[[0.0, 0.0], [1.0, 1.0]]);
        assert!(assign(
            &dataset,
            &RandomParams { folds: 3 },
            &mut FoldRng::new(1, 0)
        )
        .is_err());
    }
}
