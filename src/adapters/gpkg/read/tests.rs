//! Tests of `read`.

use super::*;

fn srs(srs_id: i32, organization: &str, code: i32, definition: &str) -> Srs {
    Srs {
        srs_id,
        name: String::new(),
        organization: organization.into(),
        organization_id: code,
        definition: definition.into(),
    }
}

#[test]
fn longitude_latitude_systems_are_recognised() {
    // GeoPackage clause 1.1.2.1.2: srs_id 0 is "undefined geographic", -1 "undefined Cartesian".
    assert_eq!(
        crs_kind(&srs(0, "NONE", 0, "undefined")),
        CrsKind::Undefined
    );
    assert_eq!(
        crs_kind(&srs(-1, "NONE", -1, "undefined")),
        CrsKind::Undefined
    );
    // WKT1 and WKT2 geographic definitions, whatever the code.
    assert_eq!(
        crs_kind(&srs(
            100_001,
            "local",
            1,
            "GEOGCS[\"WGS 84\",DATUM[\"WGS_1984\"]]"
        )),
        CrsKind::Geographic
    );
    assert_eq!(
        crs_kind(&srs(100_002, "local", 2, " geogcrs[\"x\"]")),
        CrsKind::Geographic
    );
    // EPSG:4258 (ETRS89) with an undefined definition is still degrees.
    assert_eq!(
        crs_kind(&srs(4258, "epsg", 4258, "undefined")),
        CrsKind::Geographic
    );
    assert_eq!(
        crs_kind(&srs(32631, "EPSG", 32631, crate::demo::DEMO_SRS_WKT)),
        CrsKind::Projected
    );
}
