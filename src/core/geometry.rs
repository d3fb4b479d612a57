//! Representative points of unit geometries, and the geometry helpers the core needs.
//!
//! # Rule
//! A unit's representative point is its centroid (area-weighted for polygons,
//! as PostGIS `ST_Centroid`). Where a polygon's centroid does not lie in the
//! polygon's interior (C shapes, rings, multipolygons with far-apart parts), the
//! point is instead an interior point: geo's `InteriorPoint`, which follows the
//! JTS interior-point algorithm as PostGIS `ST_PointOnSurface` does, though the
//! two need not return the same point. Either way a
//! unit is always placed in a block that it actually touches. Points and other
//! geometries use their centroid. Empty geometries, and points with NaN
//! coordinates (the GeoPackage encoding of an empty point), have no
//! representative point.

use geo::{Centroid, Contains, InteriorPoint};
use geo_types::{Coord, Geometry, LineString, Polygon};

/// The representative point of a geometry, or `None` when it is empty.
pub fn representative_point(geometry: &Geometry<f64>) -> Option<[f64; 2]> {
    let centroid = geometry.centroid()?;
    if !(centroid.x().is_finite() && centroid.y().is_finite()) {
        return None;
    }
    let polygonal = matches!(geometry, Geometry::Polygon(_) | Geometry::MultiPolygon(_));
    if polygonal && !geometry.contains(&centroid) {
        let inside = geometry.interior_point()?;
        return Some([inside.x(), inside.y()]);
    }
    Some([centroid.x(), centroid.y()])
}

/// The square polygon of grid cell (`col`, `row`) of side `size` anchored at `origin`:
/// the cell covers `[x0 + col·size, x0 + (col+1)·size) × [y0 + row·size, y0 + (row+1)·size)`.
/// The ring is counter-clockwise and closed.
pub fn cell_polygon(origin: [f64; 2], size: f64, col: i64, row: i64) -> Polygon<f64> {
    let x0 = origin[0] + col as f64 * size;
    let y0 = origin[1] + row as f64 * size;
    let x1 = x0 + size;
    let y1 = y0 + size;
    let ring = LineString::new(vec![
        Coord { x: x0, y: y0 },
        Coord { x: x1, y: y0 },
        Coord { x: x1, y: y1 },
        Coord { x: x0, y: y1 },
        Coord { x: x0, y: y0 },
    ]);
    Polygon::new(ring, vec![])
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;
    use geo_types::{point, polygon, MultiPolygon};

    #[test]
    fn square_uses_centroid() {
        // Centroid of the unit square is (0.5, 0.5): common practice, no source.
        let square = Geometry::Polygon(
            polygon![(x: 0.0, y: 0.0), (x: 1.0, y: 0.0), (x: 1.0, y: 1.0), (x: 0.0, y: 1.0)],
        );
        let point = representative_point(&square).unwrap();
        assert_relative_eq!(point[0], 0.5, epsilon = 1e-12);
        assert_relative_eq!(point[1], 0.5, epsilon = 1e-12);
    }

    #[test]
    fn c_shape_falls_back_to_a_point_inside() {
        // A C shape whose centroid lies in the notch (the example of the PostGIS
        // ST_Centroid documentation); the result must lie inside the polygon.
        let shape = Geometry::Polygon(polygon![
            (x: 0.0, y: 0.0), (x: 10.0, y: 0.0), (x: 10.0, y: 2.0), (x: 2.0, y: 2.0),
            (x: 2.0, y: 8.0), (x: 10.0, y: 8.0), (x: 10.0, y: 10.0), (x: 0.0, y: 10.0)
        ]);
        let centroid = shape.centroid().unwrap();
        assert!(!shape.contains(&centroid));
        let point = representative_point(&shape).unwrap();
        assert!(shape.contains(&point!(x: point[0], y: point[1])));
    }

    #[test]
    fn empty_geometries_have_no_point() {
        let empty = Geometry::MultiPolygon(MultiPolygon::<f64>::new(vec![]));
        assert_eq!(representative_point(&empty), None);
        let nan_point = Geometry::Point(point!(x: f64::NAN, y: f64::NAN));
        assert_eq!(representative_point(&nan_point), None);
    }

    #[test]
    fn cells_are_anchored_at_the_origin() {
        let cell = cell_polygon([100.0, 200.0], 10.0, -1, 2);
        let first = cell.exterior().0[0];
        assert_eq!((first.x, first.y), (90.0, 220.0));
        assert_eq!(cell.exterior().0.len(), 5);
    }
}
