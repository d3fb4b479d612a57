//! Plain (non-spatial) k-fold: the comparison that shows how optimistic
//! ignoring space is.
//!
//! # Rule
//! Units in id order are shuffled with the repetition's [`FoldRng`]; the unit at
//! shuffled position `p` goes to fold `p mod k`. Fold sizes differ by at most one.

use serde::{Deserialize, Serialize};

use super::grid::default_folds;
use super::{scheme_params, FoldRng, FoldScheme, FoldSet, SchemeEntry, SchemeInput};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "random",
    about: "plain random k-fold over units (ignores space)",
    options: &["folds"],
    build,
};

/// The largest number of folds a k-fold scheme takes.
pub const MAX_FOLDS: u32 = 1000;

/// Options of the random scheme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RandomParams {
    /// Number of folds, at least 2.
    #[serde(default = "default_folds")]
    pub folds: u32,
}

/// Checks a number of folds: 2 to [`MAX_FOLDS`].
///
/// # Errors
/// [`Error::Usage`] outside that range.
pub fn check_folds(folds: u32) -> Result<(), Error> {
    if !(2..=MAX_FOLDS).contains(&folds) {
        return Err(Error::Usage(format!(
            "--folds must be between 2 and {MAX_FOLDS}, got {folds}"
        )));
    }
    Ok(())
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let params: RandomParams = scheme_params("random", ENTRY.options, options)?;
    Ok(Box::new(Random::new(params.folds)?))
}

/// The random scheme.
#[derive(Debug, Clone)]
pub struct Random {
    params: RandomParams,
}

impl Random {
    /// Random k-fold with `folds` folds.
    ///
    /// # Errors
    /// Folds outside 2 to [`MAX_FOLDS`].
    pub fn new(folds: u32) -> Result<Random, Error> {
        check_folds(folds)?;
        Ok(Random {
            params: RandomParams { folds },
        })
    }
}

impl FoldScheme for Random {
    fn name(&self) -> &'static str {
        "random"
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::to_value(&self.params).unwrap_or_default()
    }

    fn needs_distances(&self) -> bool {
        false
    }

    fn randomised(&self) -> bool {
        true
    }

    fn describe(&self, _length: &dyn Fn(f64) -> String) -> String {
        format!("units dealt at random to {} folds", self.params.folds)
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let k = self.params.folds;
        let n = input.points.len();
        if n < k as usize {
            return Err(Error::Folds(format!("{n} units cannot fill {k} folds")));
        }
        let mut order: Vec<usize> = (0..n).collect();
        rng.shuffle(&mut order);
        let mut fold_of = vec![0u32; n];
        for (position, &unit) in order.iter().enumerate() {
            fold_of[unit] = (position % k as usize) as u32;
        }
        Ok(FoldSet::plain(k, fold_of))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::Points;

    #[test]
    fn sizes_differ_by_at_most_one() {
        let points = Points::new((0..103).map(|i| [i as f64, 0.0]).collect());
        let set = Random::new(10)
            .unwrap()
            .assign(&points.input(), &mut FoldRng::new(5, 0))
            .unwrap();
        let sizes = set.fold_sizes();
        assert_eq!(sizes.iter().sum::<usize>(), 103);
        assert!(
            sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1,
            "{sizes:?}"
        );
        assert!(set.regions.is_empty());
    }

    #[test]
    fn too_few_units_or_folds_is_an_error() {
        let points = Points::new(vec![[0.0, 0.0], [1.0, 1.0]]);
        assert!(Random::new(3)
            .unwrap()
            .assign(&points.input(), &mut FoldRng::new(1, 0))
            .is_err());
        assert!(Random::new(1).is_err());
        assert!(Random::new(MAX_FOLDS + 1).is_err());
    }
}
