//! Leave-one-out: every unit tested alone; spatial with an exclusion radius.
//!
//! Le Rest, K., Pinaud, D., Monestiez, P., Chadoeuf, J. & Bretagnolle, V.
//! (2014). Spatial leave-one-out cross-validation for variable selection in
//! the presence of spatial autocorrelation. *Global Ecology and
//! Biogeography* 23(7): 811–820. doi:10.1111/geb.12161. From the abstract:
//! each left-out point is kept "spatially independent from the others" by a
//! threshold distance (the range of residual autocorrelation). The full text
//! could not be read; the rules below are geofold's.
//!
//! # Rules
//! - **Folds.** Unit `i` (in id order) is fold `i + 1`, its only test unit.
//! - **Training.** Every other unit, except, with `--exclusion-radius R`,
//!   those whose representative point lies at distance ≤ R from unit `i`'s
//!   (the exclusion buffer of every scheme, [`super::exclude_within`]). Without
//!   a radius this is plain leave-one-out.
//! - **Regions.** With a radius, the disc of radius R around each unit
//!   ([`super::regions::disc`]: a 32-vertex polygon around the circle), kind
//!   `disc`, labelled by its fold; its `units` is the number of units within
//!   R including the unit itself. Without a radius there is nothing to draw.
//!
//! Models fit all n folds from one factorisation of all units, downdated per
//! fold (see `models/linear.rs`), so the cost grows with n times the units
//! within R, not with n².

use serde::{Deserialize, Serialize};

use super::regions::disc;
use super::{scheme_params, FoldRng, FoldScheme, FoldSet, Region, SchemeEntry, SchemeInput};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "loo",
    about: "leave-one-out; spatial with --exclusion-radius (Le Rest et al. 2014)",
    options: &[],
    build,
};

/// Options of leave-one-out: none of its own.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct LooParams {}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let _: LooParams = scheme_params("loo", ENTRY.options, options)?;
    Ok(Box::new(Loo))
}

/// The leave-one-out scheme.
#[derive(Debug, Clone, Copy)]
pub struct Loo;

impl FoldScheme for Loo {
    fn name(&self) -> &'static str {
        "loo"
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({})
    }

    fn needs_distances(&self) -> bool {
        false
    }

    fn randomised(&self) -> bool {
        false
    }

    fn describe(&self, _length: &dyn Fn(f64) -> String) -> String {
        "leave-one-out: each unit held out alone".to_string()
    }

    fn assign(&self, input: &SchemeInput<'_>, _rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let n = input.points.len();
        if n < 2 {
            return Err(Error::Folds(format!(
                "leave-one-out needs at least 2 units, got {n}"
            )));
        }
        let k = u32::try_from(n)
            .map_err(|_| Error::Folds(format!("{n} units are more than leave-one-out numbers")))?;
        let mut set = FoldSet::plain(k, (0..k).collect());
        if let Some(radius) = input.exclusion_radius {
            set.regions = input
                .points
                .iter()
                .enumerate()
                .map(|(unit, &point)| {
                    let mut inside = 0u32;
                    input.index.for_each_within(point, radius, |_| inside += 1);
                    Region {
                        fold: unit as u32,
                        kind: "disc",
                        label: format!("disc {}", unit + 1),
                        units: inside,
                        geometry: disc(point, radius),
                    }
                })
                .collect();
        }
        set.facts.insert("units".into(), n.into());
        Ok(set)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::Points;

    #[test]
    fn every_unit_is_its_own_fold_and_discs_count_their_units() {
        let points = Points::new((0..10).map(|i| [i as f64, 0.0]).collect());
        let mut input = points.input();
        let set = Loo.assign(&input, &mut FoldRng::new(1, 0)).unwrap();
        assert_eq!(set.k, 10);
        assert_eq!(set.fold_of, (0..10).collect::<Vec<u32>>());
        assert!(set.regions.is_empty());
        input.exclusion_radius = Some(1.0);
        let set = Loo.assign(&input, &mut FoldRng::new(1, 0)).unwrap();
        // Units 0 and 9 have one neighbour within 1, the others two (hand count).
        let counts: Vec<u32> = set.regions.iter().map(|r| r.units).collect();
        assert_eq!(counts, vec![2, 3, 3, 3, 3, 3, 3, 3, 3, 2]);
        let single = Points::new(vec![[0.0, 0.0]]);
        assert!(Loo
            .assign(&single.input(), &mut FoldRng::new(1, 0))
            .is_err());
        let mut options = Options::new();
        options.insert("folds".into(), 5.into());
        assert!(build(&options).is_err());
    }
}
