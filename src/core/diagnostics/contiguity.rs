//! Queen and rook contiguity of polygons, in Rust, with the same DE-9IM
//! predicates as the PostGIS path so both give the same neighbour pairs.
//!
//! - **Queen:** the boundaries intersect and the interiors do not, i.e. the
//!   polygons *touch* (DE-9IM `FT*******`, `F**T*****` or `F***T****`), as
//!   PostGIS `ST_Touches(a, b)`. Sharing a single vertex is enough.
//! - **Rook:** the interiors do not intersect and the boundaries share a line
//!   of positive length (DE-9IM `F***1****`), as PostGIS
//!   `ST_Relate(a, b, 'F***1****')`.
//!
//! Overlapping polygons are neighbours under neither rule, in both paths.
//! The DE-9IM model is that of the OGC Simple Features specification
//! (Clementini, E., Di Felice, P. & van Oosterom, P. (1993). A small set of
//! formal topological relationships suitable for end-user interaction. *SSD
//! '93*, LNCS 692: 277–295).
//!
//! Candidate pairs come from an R*-tree over bounding boxes (touching boxes
//! count), and each candidate pair is related with geo's
//! [`Relate`] on prepared geometries (each polygon's topology graph is built
//! once). Check the Rust pairs against PostGIS with
//! [`Weights::pairs`](super::weights::Weights::pairs).

use geo::coordinate_position::CoordPos;
use geo::dimensions::Dimensions;
use geo::{BoundingRect, PreparedGeometry, Relate, Validation};
use geo_types::Geometry;
use rstar::primitives::{GeomWithData, Rectangle};
use rstar::{RTree, RTreeObject, AABB};
use serde::Serialize;

use super::DiagnosticsError;

/// Which contiguity rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Contiguity {
    /// Boundaries touch (a shared vertex is enough): `ST_Touches`.
    Queen,
    /// Boundaries share an edge of positive length: `ST_Relate(a, b, 'F***1****')`.
    Rook,
}

impl Contiguity {
    /// `queen` or `rook`.
    pub fn name(self) -> &'static str {
        match self {
            Contiguity::Queen => "queen",
            Contiguity::Rook => "rook",
        }
    }
}

/// The neighbour pairs `(i, j)`, `i < j`, ascending, of the polygons under
/// `rule`; feed them to [`Weights::from_pairs`](super::weights::Weights::from_pairs).
///
/// # Complexity
/// O(n log n) for the R*-tree, then one DE-9IM relate per pair of touching
/// bounding boxes, each about O((a + b) log(a + b)) in the vertex counts.
///
/// # Errors
/// [`DiagnosticsError::BadGeometry`], listing every unit (by 0-based
/// position) whose geometry is not a non-empty, valid polygon or
/// multipolygon (OGC validity, geo's [`Validation`]); invalid polygons have
/// no well-defined contiguity. Repair them first (e.g. `ST_MakeValid`).
pub fn contiguity_pairs(
    geometries: &[Geometry<f64>],
    rule: Contiguity,
) -> Result<Vec<(u32, u32)>, DiagnosticsError> {
    let mut problems = Vec::new();
    let mut boxes = Vec::with_capacity(geometries.len());
    for (i, geometry) in geometries.iter().enumerate() {
        let problem = match geometry {
            Geometry::Polygon(_) | Geometry::MultiPolygon(_) => match geometry.bounding_rect() {
                None => Some("empty geometry".to_string()),
                Some(rect) => match geometry.check_validation() {
                    Ok(()) => {
                        boxes.push(GeomWithData::new(
                            Rectangle::from_corners(
                                rect.min().x_y().into(),
                                rect.max().x_y().into(),
                            ),
                            i as u32,
                        ));
                        None
                    }
                    Err(error) => Some(format!("invalid polygon: {error}")),
                },
            },
            _ => Some("not a polygon or multipolygon".to_string()),
        };
        if let Some(problem) = problem {
            problems.push(format!("unit at position {i}: {problem}"));
        }
    }
    if !problems.is_empty() {
        let total = problems.len();
        problems.truncate(20);
        if total > 20 {
            problems.push(format!("and {} more", total - 20));
        }
        return Err(DiagnosticsError::BadGeometry { problems });
    }
    let prepared: Vec<PreparedGeometry<'_, &Geometry<f64>>> =
        geometries.iter().map(PreparedGeometry::from).collect();
    let tree = RTree::bulk_load(boxes.clone());
    let mut pairs = Vec::new();
    for entry in &boxes {
        let i = entry.data;
        let envelope: AABB<[f64; 2]> = entry.geom().envelope();
        let mut candidates: Vec<u32> = tree
            .locate_in_envelope_intersecting(&envelope)
            .map(|other| other.data)
            .filter(|&j| j > i)
            .collect();
        candidates.sort_unstable();
        for j in candidates {
            let matrix = prepared[i as usize].relate(&prepared[j as usize]);
            let interiors_disjoint =
                matrix.get(CoordPos::Inside, CoordPos::Inside) == Dimensions::Empty;
            let neighbours = interiors_disjoint
                && match rule {
                    Contiguity::Queen => matrix.is_touches(),
                    Contiguity::Rook => {
                        matrix.get(CoordPos::OnBoundary, CoordPos::OnBoundary)
                            == Dimensions::OneDimensional
                    }
                };
            if neighbours {
                pairs.push((i, j));
            }
        }
    }
    pairs.sort_unstable();
    Ok(pairs)
}

/// The fixture loaders shared with the integration tests.
#[cfg(test)]
#[path = "../../../tests/fixtures/loaders.rs"]
pub(crate) mod fixture;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::diagnostics::weights::{Transform, Weights};
    use geo_types::{polygon, MultiPolygon, Point};

    #[test]
    fn columbus_queen_and_rook_match_the_reference_counts() {
        // REFERENCES §2.1 [COMP libpysal 4.14.1 / shapely 2.2.0, GEOS 3.14.1]:
        // queen 236 directed links (118 pairs), mean 4.8163, min 2, max 10;
        // rook 200 (100 pairs), min 2, max 9; no islands.
        let units = fixture::columbus();
        assert_eq!(units.len(), 49);
        assert!(units
            .iter()
            .enumerate()
            .all(|(i, u)| u.polyid as usize == i + 1));
        let polygons: Vec<_> = units.into_iter().map(|u| u.polygon).collect();
        let queen = contiguity_pairs(&polygons, Contiguity::Queen).unwrap();
        let rook = contiguity_pairs(&polygons, Contiguity::Rook).unwrap();
        assert_eq!(queen.len(), 118);
        assert_eq!(rook.len(), 100);
        for (pairs, links, min, max) in [(&queen, 236, 2, 10), (&rook, 200, 2, 9)] {
            let w = Weights::from_pairs(49, pairs, Transform::Binary).unwrap();
            assert_eq!(w.links(), links);
            assert_eq!(w.islands(), 0);
            let degrees: Vec<usize> = (0..49).map(|i| w.degree(i)).collect();
            assert_eq!(*degrees.iter().min().unwrap(), min);
            assert_eq!(*degrees.iter().max().unwrap(), max);
        }
        // REFERENCES §2.1: queen minus rook, 0-based.
        let expected: Vec<(u32, u32)> = vec![
            (4, 15),
            (6, 11),
            (7, 12),
            (8, 19),
            (8, 24),
            (9, 21),
            (10, 14),
            (14, 25),
            (23, 28),
            (24, 27),
            (24, 29),
            (25, 28),
            (27, 36),
            (28, 37),
            (30, 38),
            (34, 39),
            (34, 42),
            (37, 43),
        ];
        let difference: Vec<(u32, u32)> = queen
            .iter()
            .filter(|pair| !rook.contains(pair))
            .copied()
            .collect();
        assert_eq!(difference, expected);
        assert!(rook.iter().all(|pair| queen.contains(pair)));
    }

    #[test]
    fn corner_touch_is_queen_only_and_overlap_is_neither() {
        // DE-9IM by hand (common practice, no source): unit squares sharing
        // an edge, sharing a corner, and overlapping.
        let square = |x: f64, y: f64| {
            Geometry::Polygon(polygon![
                (x: x, y: y), (x: x + 1.0, y: y), (x: x + 1.0, y: y + 1.0), (x: x, y: y + 1.0)
            ])
        };
        let geometries = vec![
            square(0.0, 0.0),
            square(1.0, 0.0), // shares an edge with 0
            square(2.0, 1.0), // shares a corner with 1
            square(2.5, 1.5), // overlaps 2
            Geometry::MultiPolygon(MultiPolygon(vec![polygon![
                (x: 10.0, y: 10.0), (x: 11.0, y: 10.0), (x: 11.0, y: 11.0)
            ]])),
        ];
        let queen = contiguity_pairs(&geometries, Contiguity::Queen).unwrap();
        let rook = contiguity_pairs(&geometries, Contiguity::Rook).unwrap();
        assert_eq!(queen, vec![(0, 1), (1, 2)]);
        assert_eq!(rook, vec![(0, 1)]);
    }

    #[test]
    fn non_polygons_and_invalid_polygons_are_all_reported() {
        let bowtie = Geometry::Polygon(polygon![
            (x: 0.0, y: 0.0), (x: 1.0, y: 1.0), (x: 1.0, y: 0.0), (x: 0.0, y: 1.0)
        ]);
        let geometries = vec![
            Geometry::Point(Point::new(0.0, 0.0)),
            bowtie,
            Geometry::MultiPolygon(MultiPolygon(vec![])),
        ];
        let error = contiguity_pairs(&geometries, Contiguity::Queen).unwrap_err();
        let DiagnosticsError::BadGeometry { problems } = error else {
            panic!("{error:?}")
        };
        assert_eq!(problems.len(), 3, "{problems:?}");
        assert!(problems[0].contains("position 0"), "{problems:?}");
        assert!(problems[1].contains("invalid"), "{problems:?}");
        assert!(problems[2].contains("empty"), "{problems:?}");
    }
}
