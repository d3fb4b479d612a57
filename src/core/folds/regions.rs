//! The outlines schemes draw for their folds: convex hulls of points, unions
//! of unit geometries, and discs around leave-one-out units.
//!
//! # Rules
//! - **Hull.** The convex hull of a set of points (geo's `ConvexHull`,
//!   Andrew's monotone chain). Fewer than three points, or points on one
//!   line, have a hull of no area: no region is drawn for them, and the
//!   scheme counts them in its facts.
//! - **Union.** The union of the polygonal parts (polygons, multipolygons,
//!   rectangles, triangles) of the unit geometries, each first oriented with
//!   counter-clockwise exterior rings (shapefile-born layers have clockwise
//!   ones) and then merged by geo's `unary_union`. A set with no polygonal
//!   geometry (point units) falls back to the hull of the units' points.
//! - **Disc.** A regular polygon of [`DISC_VERTICES`] vertices *around* the
//!   circle of radius `r` (vertices at `r / cos(π / N)`, the first on the +x
//!   axis), so every point within `r` of the centre lies inside it; its area
//!   exceeds the circle's by `N·tan(π/N)/π − 1` = 1.3 % for N = 32.

use geo::orient::{Direction, Orient};
use geo::{Area, ConvexHull};
use geo_types::{Coord, Geometry, LineString, MultiPoint, MultiPolygon, Point, Polygon};

/// Vertices of a disc outline.
pub const DISC_VERTICES: usize = 32;

/// The convex hull of `points`, or None when it has no area.
pub fn hull(points: impl IntoIterator<Item = [f64; 2]>) -> Option<MultiPolygon<f64>> {
    let cloud: MultiPoint<f64> = points
        .into_iter()
        .map(|[x, y]| Point::new(x, y))
        .collect::<Vec<_>>()
        .into();
    if cloud.0.len() < 3 {
        return None;
    }
    let polygon = cloud.convex_hull();
    (polygon.unsigned_area() > 0.0).then(|| MultiPolygon::new(vec![polygon]))
}

/// The union of the polygonal parts of `geometries` (see the module doc), or
/// None when none of them is polygonal.
pub fn union<'a>(
    geometries: impl IntoIterator<Item = &'a Geometry<f64>>,
) -> Option<MultiPolygon<f64>> {
    let mut polygons: Vec<Polygon<f64>> = Vec::new();
    for geometry in geometries {
        collect_polygons(geometry, &mut polygons);
    }
    if polygons.is_empty() {
        return None;
    }
    let oriented: Vec<Polygon<f64>> = polygons
        .into_iter()
        .map(|p| p.orient(Direction::Default))
        .collect();
    let merged = geo::unary_union(&oriented);
    (!merged.0.is_empty()).then_some(merged)
}

fn collect_polygons(geometry: &Geometry<f64>, out: &mut Vec<Polygon<f64>>) {
    match geometry {
        Geometry::Polygon(p) => out.push(p.clone()),
        Geometry::MultiPolygon(m) => out.extend(m.0.iter().cloned()),
        Geometry::Rect(r) => out.push(r.to_polygon()),
        Geometry::Triangle(t) => out.push(t.to_polygon()),
        Geometry::GeometryCollection(c) => {
            for part in &c.0 {
                collect_polygons(part, out);
            }
        }
        _ => {}
    }
}

/// The disc outline of the module doc around `centre`.
pub fn disc(centre: [f64; 2], radius: f64) -> MultiPolygon<f64> {
    let n = DISC_VERTICES;
    let outer = radius / (std::f64::consts::PI / n as f64).cos();
    let mut ring: Vec<Coord<f64>> = (0..n)
        .map(|i| {
            let angle = 2.0 * std::f64::consts::PI * i as f64 / n as f64;
            Coord {
                x: centre[0] + outer * angle.cos(),
                y: centre[1] + outer * angle.sin(),
            }
        })
        .collect();
    ring.push(ring[0]);
    MultiPolygon::new(vec![Polygon::new(LineString::new(ring), vec![])])
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use geo::Contains;
    use geo_types::polygon;

    #[test]
    fn hulls_of_degenerate_sets_are_none() {
        assert!(hull([[0.0, 0.0], [1.0, 1.0]]).is_none());
        assert!(hull([[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]]).is_none());
        let square = hull([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0], [0.5, 0.5]]).unwrap();
        // Area of the unit square: common practice, no source.
        assert_relative_eq!(square.unsigned_area(), 1.0, epsilon = 1e-12);
    }

    #[test]
    fn unions_merge_touching_squares_of_either_orientation() {
        let left = Geometry::Polygon(polygon![
            (x: 0.0, y: 0.0), (x: 0.0, y: 1.0), (x: 1.0, y: 1.0), (x: 1.0, y: 0.0)
        ]);
        let right = Geometry::Polygon(polygon![
            (x: 1.0, y: 0.0), (x: 2.0, y: 0.0), (x: 2.0, y: 1.0), (x: 1.0, y: 1.0)
        ]);
        let merged = union([&left, &right]).unwrap();
        assert_eq!(merged.0.len(), 1);
        assert_relative_eq!(merged.unsigned_area(), 2.0, epsilon = 1e-12);
        let point = Geometry::Point(Point::new(0.0, 0.0));
        assert!(union([&point]).is_none());
    }

    #[test]
    fn discs_contain_the_circle() {
        let shape = disc([10.0, 20.0], 5.0);
        for i in 0..360 {
            let angle = (i as f64).to_radians();
            let p = Point::new(10.0 + 4.9999 * angle.cos(), 20.0 + 4.9999 * angle.sin());
            assert!(shape.contains(&p), "{i}°");
        }
        // Area of the circumscribed 32-gon: N r² tan(π/N) (common practice, no source).
        let expected = 32.0 * 25.0 * (std::f64::consts::PI / 32.0).tan();
        assert_relative_eq!(shape.unsigned_area(), expected, max_relative = 1e-12);
        assert_eq!(shape.0[0].exterior().0.len(), DISC_VERTICES + 1);
    }
}
