//! Tests of `blob`.

use super::*;
use geo_types::polygon;

fn point_wkb(x: f64, y: f64) -> Vec<u8> {
    let mut out = vec![1u8];
    out.extend_from_slice(&1u32.to_le_bytes());
    out.extend_from_slice(&x.to_le_bytes());
    out.extend_from_slice(&y.to_le_bytes());
    out
}

#[test]
fn header_layout_follows_the_spec_table() {
    // Built by hand from the GeoPackage 1.3 "GeoPackageBinaryHeader" table:
    // 'G' 'P', version 0, flags 0b0000_0011 (envelope code 1, little-endian),
    // srs_id 32631 LE, envelope minx, maxx, miny, maxy.
    let mut blob = vec![0x47, 0x50, 0x00, 0x03];
    blob.extend_from_slice(&32631i32.to_le_bytes());
    for value in [1.0f64, 2.0, 3.0, 4.0] {
        blob.extend_from_slice(&value.to_le_bytes());
    }
    blob.extend_from_slice(&point_wkb(1.5, 3.5));
    let header = check(&blob).unwrap();
    assert_eq!(header.srs_id, 32631);
    assert!(!header.empty);
    assert_eq!(header.envelope, Some([1.0, 2.0, 3.0, 4.0]));
    assert_eq!(header.wkb_offset, 40);
    assert_eq!(
        encode(32631, Some([1.0, 2.0, 3.0, 4.0]), &point_wkb(1.5, 3.5)),
        blob
    );
}

#[test]
fn big_endian_header_and_no_envelope() {
    // flags 0: big-endian srs_id, no envelope (spec table as above).
    let mut blob = vec![b'G', b'P', 0, 0];
    blob.extend_from_slice(&4326i32.to_be_bytes());
    blob.extend_from_slice(&point_wkb(10.0, -20.0));
    let header = check(&blob).unwrap();
    assert_eq!(header.srs_id, 4326);
    assert_eq!(header.wkb_offset, 8);
    assert_eq!(envelope(&blob).unwrap(), Some([10.0, 10.0, -20.0, -20.0]));
}

#[test]
fn empty_geometries_are_encoded_as_gdal_writes_them() {
    // GDAL 3.6.2 `ogr2ogr -f GPKG` of `POLYGON EMPTY` in EPSG:32631 (read back
    // with sqlite3 hex()): flags 0x11 (empty, little-endian, no envelope).
    let gdal = "47500011777F0000010300000000000000";
    let empty_polygon = [1u8, 3, 0, 0, 0, 0, 0, 0, 0];
    let ours: String = encode_wkb(32631, &empty_polygon)
        .unwrap()
        .iter()
        .map(|byte| format!("{byte:02X}"))
        .collect();
    assert_eq!(ours, gdal);
    let header = check(&encode(32631, None, &empty_polygon)).unwrap();
    assert!(header.empty);
}

#[test]
fn bad_headers_are_named() {
    assert_eq!(parse_header(b"GP"), Err(BlobError::TooShort(2)));
    assert_eq!(
        parse_header(b"XY\0\x01\0\0\0\0"),
        Err(BlobError::BadMagic([b'X', b'Y']))
    );
    assert_eq!(
        parse_header(b"GP\x01\x01\0\0\0\0"),
        Err(BlobError::Version(1))
    );
    assert_eq!(parse_header(b"GP\0\x21\0\0\0\0"), Err(BlobError::Extended));
    // Envelope code 5 (flags 0b0000_1011) is invalid.
    assert_eq!(
        parse_header(b"GP\0\x0b\0\0\0\0"),
        Err(BlobError::EnvelopeCode(5))
    );
    assert!(matches!(
        parse_header(b"GP\0\x03\0\0\0\0\0\0"),
        Err(BlobError::TruncatedEnvelope { needed: 40, .. })
    ));
}

#[test]
fn truncated_and_trailing_wkb_are_caught() {
    let wkb = point_wkb(1.0, 2.0);
    assert!(matches!(
        walk_wkb(&wkb[..wkb.len() - 3], None),
        Err(WkbError::Truncated { .. })
    ));
    let mut longer = wkb.clone();
    longer.push(0);
    assert_eq!(
        walk_wkb(&longer, None),
        Err(WkbError::Trailing { extra: 1 })
    );
    // A linestring claiming 2^32-1 points in a 13-byte body.
    let mut huge = vec![1u8];
    huge.extend_from_slice(&2u32.to_le_bytes());
    huge.extend_from_slice(&u32::MAX.to_le_bytes());
    huge.extend_from_slice(&[0, 0, 0, 0]);
    assert!(matches!(
        walk_wkb(&huge, None),
        Err(WkbError::Truncated { .. })
    ));
    // CircularString (8) is not read.
    let mut curve = vec![1u8];
    curve.extend_from_slice(&8u32.to_le_bytes());
    assert!(matches!(
        walk_wkb(&curve, None),
        Err(WkbError::UnsupportedType { code: 8, .. })
    ));
}

#[test]
fn envelopes_come_from_wkb_written_by_geozero() {
    use geozero::{CoordDimensions, ToWkb};
    let polygon = geo_types::Geometry::Polygon(polygon![
        (x: 5.0, y: 1.0), (x: 9.0, y: 1.0), (x: 9.0, y: 7.0), (x: 5.0, y: 1.0)
    ]);
    let wkb = polygon.to_wkb(CoordDimensions::xy()).unwrap();
    let blob = encode_wkb(3035, &wkb).unwrap();
    assert_eq!(envelope(&blob).unwrap(), Some([5.0, 9.0, 1.0, 7.0]));
    // geozero reads the body back (its GpkgWkb reader reads our header too).
    use geozero::ToGeo;
    let back = geozero::wkb::GpkgWkb(blob.clone()).to_geo().unwrap();
    assert_eq!(back, polygon);
    // An empty multipolygon gets the empty flag and no envelope.
    let empty = geo_types::Geometry::MultiPolygon(geo_types::MultiPolygon::<f64>::new(vec![]));
    let blob = encode_wkb(3035, &empty.to_wkb(CoordDimensions::xy()).unwrap()).unwrap();
    let header = parse_header(&blob).unwrap();
    assert!(header.empty && header.envelope.is_none());
}
