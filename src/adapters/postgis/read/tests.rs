//! Tests of `read`.

use super::*;

#[test]
fn declared_types_are_read_from_format_type() {
    assert_eq!(declared_type("geometry(MultiPolygon,3035)"), "MULTIPOLYGON");
    assert_eq!(declared_type("geometry(Point)"), "POINT");
    assert_eq!(declared_type("geometry"), "GEOMETRY");
    assert_eq!(declared_srid("geography(Point,4326)"), Some(4326));
    assert_eq!(declared_srid("geography"), None);
}
