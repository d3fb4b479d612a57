//! WKB for the region polygons geofold makes itself (blocks and other fold
//! regions), and the length unit of a CRS's WKT.
//!
//! OGC Simple Features WKB (little-endian, byte order byte 1), with the
//! PostGIS EWKB SRID flag `0x20000000` when an SRID is given. Source
//! geometries are never re-encoded here: they travel as the bytes the source
//! gave.

use geo_types::{LineString, MultiPolygon};

/// WKB of a multipolygon (every ring of every polygon, holes included); EWKB
/// with `srid` when given.
pub fn multipolygon(geometry: &MultiPolygon<f64>, srid: Option<i32>) -> Vec<u8> {
    let points: usize = geometry
        .0
        .iter()
        .map(|p| p.exterior().0.len() + p.interiors().iter().map(|r| r.0.len()).sum::<usize>())
        .sum();
    let mut out = Vec::with_capacity(13 + geometry.0.len() * 13 + points * 16);
    out.push(1u8);
    match srid {
        Some(srid) => {
            out.extend_from_slice(&(6u32 | 0x2000_0000).to_le_bytes());
            out.extend_from_slice(&srid.to_le_bytes());
        }
        None => out.extend_from_slice(&6u32.to_le_bytes()),
    }
    out.extend_from_slice(&(geometry.0.len() as u32).to_le_bytes());
    for polygon in &geometry.0 {
        out.push(1u8);
        out.extend_from_slice(&3u32.to_le_bytes());
        let rings: Vec<&LineString<f64>> = std::iter::once(polygon.exterior())
            .chain(polygon.interiors())
            .collect();
        out.extend_from_slice(&(rings.len() as u32).to_le_bytes());
        for ring in rings {
            out.extend_from_slice(&(ring.0.len() as u32).to_le_bytes());
            for c in &ring.0 {
                out.extend_from_slice(&c.x.to_le_bytes());
                out.extend_from_slice(&c.y.to_le_bytes());
            }
        }
    }
    out
}

/// The name of the last unit a WKT names (`UNIT["metre",1]` in WKT1,
/// `LENGTHUNIT["metre",1]` in WKT2): for a projected CRS its length unit.
pub fn wkt_length_unit(wkt: &str) -> Option<String> {
    wkt_unit(wkt).map(|(name, _)| name)
}

/// The last unit a WKT names with its conversion factor (`UNIT["US survey
/// foot",0.304800609601219]` → the name and 0.304800609601219: metres per
/// unit for a length, radians per unit for an angle); the factor is None
/// when it is missing or not a positive number.
pub fn wkt_unit(wkt: &str) -> Option<(String, Option<f64>)> {
    let at = wkt.rfind("UNIT[\"")?;
    let rest = &wkt[at + 6..];
    let end = rest.find('"')?;
    let name = &rest[..end];
    if name.is_empty() {
        return None;
    }
    let after = rest[end + 1..].trim_start();
    let factor = after.strip_prefix(',').and_then(|tail| {
        let tail = tail.trim_start();
        let stop = tail.find([',', ']']).unwrap_or(tail.len());
        tail[..stop]
            .trim()
            .parse::<f64>()
            .ok()
            .filter(|f| f.is_finite() && *f > 0.0)
    });
    Some((name.to_string(), factor))
}

#[cfg(test)]
mod tests {
    use super::*;
    use geo_types::{polygon, Geometry};
    use geozero::ToGeo;

    #[test]
    fn decodes_back_with_geozero_holes_and_all() {
        let shape = MultiPolygon::new(vec![
            polygon!(
                exterior: [(x: 0.0, y: 0.0), (x: 4.0, y: 0.0), (x: 4.0, y: 4.0), (x: 0.0, y: 0.0)],
                interiors: [[(x: 1.0, y: 1.0), (x: 2.0, y: 1.0), (x: 2.0, y: 2.0), (x: 1.0, y: 1.0)]],
            ),
            polygon![(x: 10.0, y: 0.0), (x: 11.0, y: 0.0), (x: 11.0, y: 1.0), (x: 10.0, y: 0.0)],
        ]);
        let decoded = geozero::wkb::Wkb(multipolygon(&shape, None))
            .to_geo()
            .unwrap();
        assert_eq!(decoded, Geometry::MultiPolygon(shape.clone()));
        let decoded = geozero::wkb::Ewkb(multipolygon(&shape, Some(3035)))
            .to_geo()
            .unwrap();
        assert_eq!(decoded, Geometry::MultiPolygon(shape));
    }

    #[test]
    fn length_units_are_read_from_wkt1_and_wkt2() {
        assert_eq!(
            wkt_length_unit(crate::demo::DEMO_SRS_WKT).as_deref(),
            Some("metre")
        );
        assert_eq!(
            wkt_length_unit("PROJCRS[\"x\",CS[Cartesian,2],LENGTHUNIT[\"US survey foot\",0.3048]]")
                .as_deref(),
            Some("US survey foot")
        );
        assert_eq!(wkt_length_unit("undefined"), None);
    }
}
