//! Small WKB writers for the polygons geofold creates itself (grid blocks).
//!
//! OGC Simple Features WKB (little-endian, byte 1), with the PostGIS EWKB SRID
//! flag `0x20000000` when an SRID is given. Source geometries are never
//! re-encoded here: they travel as the bytes the source gave.

/// WKB of a single-ring polygon; EWKB with `srid` when given.
pub fn polygon(ring: &[[f64; 2]], srid: Option<i32>) -> Vec<u8> {
    let mut out = Vec::with_capacity(13 + 4 + ring.len() * 16 + 4);
    out.push(1u8);
    match srid {
        Some(srid) => {
            out.extend_from_slice(&(3u32 | 0x2000_0000).to_le_bytes());
            out.extend_from_slice(&srid.to_le_bytes());
        }
        None => out.extend_from_slice(&3u32.to_le_bytes()),
    }
    out.extend_from_slice(&1u32.to_le_bytes());
    out.extend_from_slice(&(ring.len() as u32).to_le_bytes());
    for point in ring {
        out.extend_from_slice(&point[0].to_le_bytes());
        out.extend_from_slice(&point[1].to_le_bytes());
    }
    out
}

/// The closed ring of a polygon, as `[x, y]` pairs.
pub fn ring_of(polygon: &geo_types::Polygon<f64>) -> Vec<[f64; 2]> {
    polygon.exterior().0.iter().map(|c| [c.x, c.y]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use geozero::ToGeo;

    #[test]
    fn decodes_back_with_geozero() {
        let ring = [[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 0.0]];
        let geometry = geozero::wkb::Wkb(polygon(&ring, None)).to_geo().unwrap();
        let geo_types::Geometry::Polygon(p) = geometry else {
            panic!("not a polygon")
        };
        assert_eq!(ring_of(&p), ring.to_vec());
        let geometry = geozero::wkb::Ewkb(polygon(&ring, Some(3035)))
            .to_geo()
            .unwrap();
        assert!(matches!(geometry, geo_types::Geometry::Polygon(_)));
    }
}
