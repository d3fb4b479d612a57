//! Nearest-neighbour distance matching leave-one-out (NNDM LOO).
//!
//! Milà, C., Mateu, J., Pebesma, E. & Meyer, H. (2022). Nearest neighbour
//! distance matching Leave-One-Out Cross-Validation for map validation.
//! *Methods in Ecology and Evolution* 13(6): 1304–1316.
//! doi:10.1111/2041-210X.13851.
//!
//! # What could be verified
//! Only the abstract could be read: NNDM LOO is a leave-one-out variant "in
//! which the nearest neighbour distance distribution function between the
//! test and training data during the CV process is matched to the nearest
//! neighbour distance distribution function between the target prediction
//! and training points". The paper's algorithm (its update rule, its
//! treatment of ties and of the minimum training size) could not be reached;
//! the rule below is a reconstruction (geofold's REFERENCES.md §6.4, from
//! memory of the paper) and geofold's own where marked.
//!
//! # Definitions
//! - `Ĝ_ij(r)`: the share of prediction locations whose nearest unit is
//!   within `r` (prediction distances).
//! - `d*_i`: the distance from unit `i` to the nearest unit of its training
//!   set (all other units not excluded from `i`'s fold); `Ĝ*_j(r)`: the share
//!   of units with `d*_i ≤ r`. Without exclusions this is plain leave-one-out.
//! - `φ` (`match-range`): matching is needed only for `r ≤ φ`. **Default**:
//!   the largest prediction distance. Beyond it `Ĝ_ij = 1`, so `Ĝ*_j` can
//!   never exceed it and matching further is vacuous; the default therefore
//!   matches the whole distribution. A smaller φ (e.g. the range of a
//!   variogram of the target) excludes less.
//!
//! # Rule
//! Start from plain leave-one-out. While some `r ≤ φ` has
//! `Ĝ*_j(r) > Ĝ_ij(r)` (the CV distances are too short), take the unit with
//! the smallest `d*_i ≤ φ` at which `Ĝ*_j(d*_i) > Ĝ_ij(d*_i)` (ties to the
//! lowest id) and exclude from its training set its nearest training units,
//! all those at distance `d*_i` together (geofold's rule for ties), so that
//! `d*_i` grows to the next distance. A unit whose training set would fall
//! below `⌈min-training-share · (n − 1)⌉` units (and at least 1) keeps its
//! exclusions and is skipped from then on (geofold's rule; default share 0.5).
//! It stops when no `r ≤ φ` violates the inequality or no unit can be
//! changed; a violation left is reported as a warning. More than
//! [`MAX_EXCLUSIONS`] exclusions in all stop the run (use kNNDM).
//!
//! Exclusions only lengthen distances, so once `Ĝ*_j(r) ≤ Ĝ_ij(r)` holds at
//! some `r` it holds for good: one pass over the units in order of `d*`
//! applies the rule exactly, in O(n log n + e log n) for e exclusions.
//! With the prediction locations equal to the units, `Ĝ_ij = 1` for every
//! `r ≥ 0` and the result is plain leave-one-out.
//!
//! # Regions
//! Around each unit with exclusions, the disc out to its farthest excluded
//! unit (`disc`, [`super::regions::disc`]).

use std::collections::BTreeSet;
use std::ops::Bound;

use serde::{Deserialize, Serialize};

use super::regions::disc;
use super::{
    scheme_params, FoldRng, FoldScheme, FoldSet, Region, Requirements, SchemeEntry, SchemeInput,
};
use crate::core::matching::{loo_distances, prediction_distances};
use crate::core::neighbours::{Neighbour, NeighbourIndex};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "nndm",
    about: "nearest-neighbour distance matching leave-one-out (Milà et al. 2022); needs prediction locations",
    options: &["match-range", "min-training-share"],
    build,
};

/// Most exclusions NNDM records in all: beyond, matching leave-one-out at
/// this size is not practical (the exclusions grow with n² when the
/// prediction locations lie far from the data) and the run is refused.
pub const MAX_EXCLUSIONS: usize = 100_000_000;

/// Options of NNDM.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct NndmParams {
    /// φ, CRS units; None for the largest prediction distance.
    #[serde(default)]
    pub match_range: Option<f64>,
    /// Smallest share of the other units a training set keeps, 0 to 1.
    #[serde(default = "default_share")]
    pub min_training_share: f64,
}

fn default_share() -> f64 {
    0.5
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let params: NndmParams = scheme_params("nndm", ENTRY.options, options)?;
    Ok(Box::new(Nndm::new(params)?))
}

/// The NNDM scheme.
#[derive(Debug, Clone)]
pub struct Nndm {
    params: NndmParams,
}

impl Nndm {
    /// The scheme with these options.
    ///
    /// # Errors
    /// [`Error::Usage`] for a match range that is not a positive number or a
    /// share outside 0 to 1.
    pub fn new(params: NndmParams) -> Result<Nndm, Error> {
        if let Some(range) = params.match_range {
            if !(range.is_finite() && range > 0.0 && range <= 1e12) {
                return Err(Error::Usage(format!(
                    "--match-range must be a positive distance in CRS units up to 1e12, got {range}"
                )));
            }
        }
        let share = params.min_training_share;
        if !(0.0..=1.0).contains(&share) {
            return Err(Error::Usage(format!(
                "--min-training-share must be between 0 and 1, got {share}"
            )));
        }
        Ok(Nndm { params })
    }
}

/// A unit's neighbours, nearest first, fetched in growing batches.
struct Cursor {
    neighbours: Vec<Neighbour>,
    requested: usize,
    excluded: usize,
}

impl FoldScheme for Nndm {
    fn name(&self) -> &'static str {
        "nndm"
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::to_value(&self.params).unwrap_or_default()
    }

    fn needs_distances(&self) -> bool {
        true
    }

    fn randomised(&self) -> bool {
        false
    }

    fn describe(&self, length: &dyn Fn(f64) -> String) -> String {
        let range = match self.params.match_range {
            Some(range) => format!("up to {}", length(range)),
            None => "over the whole range of prediction distances".to_string(),
        };
        format!(
            "leave-one-out with nearest-neighbour distance matching {range}; each training set keeps at least {}% of \
             the other units",
            100.0 * self.params.min_training_share
        )
    }

    fn requirements(&self) -> Requirements {
        Requirements {
            prediction_points: true,
            ..Requirements::default()
        }
    }

    fn assign(&self, input: &SchemeInput<'_>, _rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let prediction = input.prediction_points.ok_or_else(|| {
            Error::Usage(
                "--scheme nndm needs prediction locations: --prediction-table (PostGIS) or --prediction-layer \
                 (GeoPackage)"
                    .into(),
            )
        })?;
        let n = input.points.len();
        if n < 3 {
            return Err(Error::Folds(format!(
                "NNDM needs at least 3 units, got {n}"
            )));
        }
        let k = u32::try_from(n).map_err(|_| Error::Folds(format!("{n} units are too many")))?;
        let mut target = prediction_distances(prediction, input.index);
        target.sort_by(f64::total_cmp);
        let m = target.len();
        if m == 0 {
            return Err(Error::Folds(
                "there are no prediction locations to match".into(),
            ));
        }
        let range = self
            .params
            .match_range
            .unwrap_or_else(|| target.last().copied().unwrap_or(0.0));
        let floor = ((self.params.min_training_share * (n - 1) as f64).ceil() as usize).max(1);
        let most_excluded = (n - 1).saturating_sub(floor);
        let start = loo_distances(input.points, input.index);
        let mut order: BTreeSet<(u64, u32)> = start
            .iter()
            .enumerate()
            .map(|(i, d)| (d.to_bits(), i as u32))
            .collect();
        let mut cursors: Vec<Option<Cursor>> = (0..n).map(|_| None).collect();
        let mut frozen = vec![false; n];
        let mut before = 0usize;
        let mut lower: Bound<(u64, u32)> = Bound::Unbounded;
        let mut violation_left = false;
        let mut total = 0usize;
        while let Some(&(bits, _)) = order.range((lower, Bound::Unbounded)).next() {
            let d = f64::from_bits(bits);
            if d > range {
                break;
            }
            let members: Vec<u32> = order
                .range((bits, 0)..=(bits, u32::MAX))
                .map(|e| e.1)
                .collect();
            let mut group = members.len();
            let covered = target.partition_point(|&x| x <= d) as u128;
            let violates =
                |group: usize| ((before + group) as u128) * (m as u128) > covered * (n as u128);
            for &unit in &members {
                if !violates(group) {
                    break;
                }
                if frozen[unit as usize] {
                    continue;
                }
                let cursor = cursors[unit as usize].get_or_insert_with(|| Cursor {
                    neighbours: Vec::new(),
                    requested: 0,
                    excluded: 0,
                });
                let before_advance = cursor.excluded;
                match advance(input.index, input.points, unit, cursor, most_excluded) {
                    Some(next) => {
                        total += cursor.excluded - before_advance;
                        if total > MAX_EXCLUSIONS {
                            return Err(Error::Folds(format!(
                                "NNDM would exclude more than {MAX_EXCLUSIONS} training units in all ({n} units): the \
                                 prediction locations lie far from the data; use --scheme knndm, a smaller --match-range \
                                 or a larger --min-training-share"
                            )));
                        }
                        order.remove(&(bits, unit));
                        order.insert((next.to_bits(), unit));
                        group -= 1;
                    }
                    None => frozen[unit as usize] = true,
                }
            }
            if violates(group) {
                violation_left = true;
            }
            before += group;
            lower = Bound::Excluded((bits, u32::MAX));
        }
        let mut excluded: Vec<Vec<u32>> = vec![Vec::new(); n];
        let mut regions = Vec::new();
        for (unit, cursor) in cursors.iter().enumerate() {
            let Some(cursor) = cursor else { continue };
            if cursor.excluded == 0 {
                continue;
            }
            let mut units: Vec<u32> = cursor.neighbours[..cursor.excluded]
                .iter()
                .map(|n| n.index)
                .collect();
            units.sort_unstable();
            let reach = cursor.neighbours[cursor.excluded - 1].distance;
            regions.push(Region {
                fold: unit as u32,
                kind: "disc",
                label: format!("disc {}", unit + 1),
                units: cursor.excluded as u32 + 1,
                geometry: disc(input.points[unit], reach),
            });
            excluded[unit] = units;
        }
        let with = excluded.iter().filter(|units| !units.is_empty()).count();
        let stopped = frozen.iter().filter(|&&f| f).count();
        let mut set = FoldSet::plain(k, (0..k).collect());
        set.excluded = excluded;
        set.regions = regions;
        set.facts
            .insert("match_range".into(), serde_json::json!(range));
        set.facts
            .insert("units_with_exclusions".into(), with.into());
        set.facts.insert("exclusions".into(), total.into());
        set.facts
            .insert("units_at_training_minimum".into(), stopped.into());
        set.facts.insert("matched".into(), (!violation_left).into());
        if violation_left {
            set.warnings.push(format!(
                "the distances could not be matched up to the match range: {stopped} units reached the training \
                 minimum (--min-training-share {}), so cross-validation still tests closer to the training data \
                 than the prediction locations are; the scores may be optimistic for those places",
                self.params.min_training_share
            ));
        }
        Ok(set)
    }
}

/// Excludes the next tie group of `unit`'s nearest training units; returns
/// its new CV distance, or None when that would leave fewer training units
/// than allowed (or none at all).
fn advance(
    index: &NeighbourIndex,
    points: &[[f64; 2]],
    unit: u32,
    cursor: &mut Cursor,
    most_excluded: usize,
) -> Option<f64> {
    loop {
        let start = cursor.excluded;
        // The tie group at `start` and the first neighbour after it must both
        // be in the batch, unless the batch holds every other unit.
        let complete = cursor.neighbours.len() < cursor.requested;
        if start < cursor.neighbours.len() {
            let d = cursor.neighbours[start].distance;
            let end = start
                + cursor.neighbours[start..]
                    .iter()
                    .take_while(|n| n.distance == d)
                    .count();
            if end < cursor.neighbours.len() || complete {
                if end > most_excluded || end >= cursor.neighbours.len() {
                    return None;
                }
                cursor.excluded = end;
                return Some(cursor.neighbours[end].distance);
            }
        } else if complete {
            return None;
        }
        let want = (cursor.requested * 2).max(16).max(start + 2);
        cursor.neighbours = index.nearest(points[unit as usize], want, |j| j != unit);
        cursor.requested = want;
    }
}

#[cfg(test)]
mod tests;
