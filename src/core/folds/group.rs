//! Group folds: every unit of a group (e.g. a district code) in one fold.
//!
//! Roberts, D. R. et al. (2017). Cross-validation strategies for data with
//! temporal, spatial, hierarchical, or phylogenetic structure. *Ecography*
//! 40(8): 913–929 (blocking by a grouping known in advance; from the abstract
//! and memory). The dealing rule is geofold's own.
//!
//! # Rules
//! - **Groups.** The distinct values of the group column (`--group-column`,
//!   integer or text; compared as text, sorted bytewise). A row whose group is
//!   NULL is skipped and counted under "no group".
//! - **Folds.** The groups are dealt to the folds by [`deal_balanced`]:
//!   largest group first, each to the fold with the fewest units, then moves
//!   and swaps that even the folds out; groups of equal size in a seeded
//!   order. With as many folds as groups, each fold is one group. The largest
//!   fold exceeds the smallest by at most the largest group. Fewer groups than
//!   folds is an error.
//! - **Regions.** The union of the group's unit geometries (`group`); for
//!   units that are points (or lines), the convex hull of their points
//!   (`group hull`); none when that hull has no area.
//! - **Warnings.** Folds are called *unequal* when the largest holds more
//!   than 1.5 times the units of the smallest.
//!
//! The geometries are kept in memory for this scheme only, to draw the
//! unions: for polygon units that is the size of the layer's coordinates.

use serde::{Deserialize, Serialize};

use super::deal::{deal_balanced, loads};
use super::grid::default_folds;
use super::random::check_folds;
use super::regions::{hull, union};
use super::{
    count_summary, scheme_params, unequal_folds, FoldRng, FoldScheme, FoldSet, Region,
    Requirements, SchemeEntry, SchemeInput,
};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: SchemeEntry = SchemeEntry {
    name: "group",
    about: "the groups of --group-column (e.g. a district code) kept whole, dealt to folds",
    options: &["folds"],
    build,
};

/// Options of the group scheme.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct GroupParams {
    /// Number of folds, 2 to 1000, at most the number of groups.
    #[serde(default = "default_folds")]
    pub folds: u32,
}

fn build(options: &Options) -> Result<Box<dyn FoldScheme>, Error> {
    let params: GroupParams = scheme_params("group", ENTRY.options, options)?;
    check_folds(params.folds)?;
    Ok(Box::new(Group { params }))
}

/// The group scheme.
#[derive(Debug, Clone)]
pub struct Group {
    params: GroupParams,
}

impl Group {
    /// The scheme with `folds` folds.
    ///
    /// # Errors
    /// Folds outside 2 to 1000.
    pub fn new(folds: u32) -> Result<Group, Error> {
        check_folds(folds)?;
        Ok(Group {
            params: GroupParams { folds },
        })
    }
}

impl FoldScheme for Group {
    fn name(&self) -> &'static str {
        "group"
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
        format!(
            "groups of the group column kept whole, dealt to {} folds balancing units",
            self.params.folds
        )
    }

    fn requirements(&self) -> Requirements {
        Requirements {
            groups: true,
            geometries: true,
            prediction_points: false,
        }
    }

    fn assign(&self, input: &SchemeInput<'_>, rng: &mut FoldRng) -> Result<FoldSet, Error> {
        let groups = input.groups.ok_or_else(|| {
            Error::Usage(
                "--scheme group needs --group-column COL (an integer or text column)".into(),
            )
        })?;
        let k = self.params.folds as usize;
        let g = groups.names.len();
        if g < k {
            return Err(Error::Folds(format!(
                "column {} has {g} groups among the units used, fewer than the {k} folds; use --folds {g} \
                 (one group per fold){}",
                groups.column,
                if g >= 2 { " or fewer" } else { ", and at least 2 groups are needed" }
            )));
        }
        let mut sizes = vec![0usize; g];
        for &code in &groups.codes {
            sizes[code as usize] += 1;
        }
        let fold_of_group = deal_balanced(&sizes, k, Some(rng));
        let fold_of: Vec<u32> = groups
            .codes
            .iter()
            .map(|&code| fold_of_group[code as usize])
            .collect();
        let mut members: Vec<Vec<usize>> = vec![Vec::new(); g];
        for (unit, &code) in groups.codes.iter().enumerate() {
            members[code as usize].push(unit);
        }
        let mut regions = Vec::with_capacity(g);
        let mut without_region = 0usize;
        for (code, units) in members.iter().enumerate() {
            let unioned = input
                .geometries
                .and_then(|geometries| union(units.iter().map(|&u| &geometries[u])));
            let (kind, geometry) = match unioned {
                Some(geometry) => ("group", Some(geometry)),
                None => ("group hull", hull(units.iter().map(|&u| input.points[u]))),
            };
            match geometry {
                Some(geometry) => regions.push(Region {
                    fold: fold_of_group[code],
                    kind,
                    label: groups.names[code].clone(),
                    units: units.len() as u32,
                    geometry,
                }),
                None => without_region += 1,
            }
        }
        let mut set = FoldSet::plain(k as u32, fold_of);
        set.regions = regions;
        set.facts.insert("groups".into(), g.into());
        set.facts
            .insert("units_per_group".into(), count_summary(&sizes));
        if without_region > 0 {
            set.facts
                .insert("groups_without_region".into(), without_region.into());
        }
        set.warnings.extend(unequal_folds(
            &loads(&sizes, &fold_of_group, k),
            "; the groups' sizes allow no better split by this rule",
        ));
        Ok(set)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::testing::Points;
    use crate::core::units::Groups;
    use geo_types::{polygon, Geometry};

    fn squares(n: usize) -> (Vec<[f64; 2]>, Vec<Geometry<f64>>) {
        let points: Vec<[f64; 2]> = (0..n).map(|i| [i as f64 + 0.5, 0.5]).collect();
        let shapes = (0..n)
            .map(|i| {
                let x = i as f64;
                Geometry::Polygon(polygon![
                    (x: x, y: 0.0), (x: x + 1.0, y: 0.0), (x: x + 1.0, y: 1.0), (x: x, y: 1.0)
                ])
            })
            .collect();
        (points, shapes)
    }

    #[test]
    fn groups_stay_whole_and_regions_are_their_unions() {
        use geo::Area;
        // 12 unit squares in a row; groups a (4 squares), b (4), c (2), d (2)
        // into 2 folds: a+c | b+d, 6 and 6 units (hand computation).
        let (points, shapes) = squares(12);
        let codes = vec![0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 3, 3];
        let groups = Groups {
            column: "district".into(),
            names: vec!["a".into(), "b".into(), "c".into(), "d".into()],
            codes: codes.clone(),
        };
        let points = Points::new(points);
        let input = SchemeInput {
            groups: Some(&groups),
            geometries: Some(&shapes),
            ..points.input()
        };
        let set = Group::new(2)
            .unwrap()
            .assign(&input, &mut FoldRng::new(3, 0))
            .unwrap();
        for (unit, &code) in codes.iter().enumerate() {
            let same: Vec<u32> = (0..12)
                .filter(|&u| codes[u] == code)
                .map(|u| set.fold_of[u])
                .collect();
            assert!(same.iter().all(|&f| f == set.fold_of[unit]));
        }
        assert_eq!(set.fold_sizes(), vec![6, 6]);
        let a = set.regions.iter().find(|r| r.label == "a").unwrap();
        assert_eq!(a.kind, "group");
        assert_eq!(a.geometry.0.len(), 1);
        assert!((a.geometry.unsigned_area() - 4.0).abs() < 1e-12);
        // Four groups cannot fill five folds.
        let error = Group::new(5)
            .unwrap()
            .assign(&input, &mut FoldRng::new(3, 0))
            .unwrap_err();
        assert!(error.to_string().contains("--folds 4"), "{error}");
        // Without geometries the region is the hull of the points, here none
        // (collinear points).
        let input = SchemeInput {
            geometries: None,
            ..input
        };
        let set = Group::new(4)
            .unwrap()
            .assign(&input, &mut FoldRng::new(3, 0))
            .unwrap();
        assert!(set.regions.is_empty());
        assert_eq!(set.facts["groups_without_region"], 4);
        let mut folds = set.fold_sizes();
        folds.sort();
        assert_eq!(folds, vec![2, 2, 4, 4]);
    }
}
