//! Reading prediction locations from a layer of the source GeoPackage
//! (`--prediction-layer`).
//!
//! # Rules
//! - The layer must be a registered feature layer of the same file (exit 66
//!   otherwise, listing the file's feature layers).
//! - Its SRS id must be the units' layer's: there is no PostGIS here to
//!   transform, so another SRS is bad input (exit 65) and the message names
//!   the `ogr2ogr -t_srs` step that fixes it.
//! - Each geometry blob is checked (GeoPackageBinary header, WKB walk, SRS id
//!   of the blob), decoded and reduced to its representative point by the
//!   rule the units follow ([`representative_point`]). NULL and empty
//!   geometries are skipped and counted; a bad blob is reported with its
//!   rowid; a layer with no usable row is bad input.

use std::path::Path;

use geozero::ToGeo;
use rusqlite::types::ValueRef;
use rusqlite::OptionalExtension;

use super::read::choose_layer;
use super::{blob, check_geopackage, file_error, open_file, quote, sqlite_error};
use crate::adapters::{Locations, SourceInfo};
use crate::core::geometry::representative_point;
use crate::error::{Error, FileProblem};

/// Reads the locations of `layer` of the GeoPackage at `path`.
///
/// # Errors
/// As [`crate::adapters::Source::read_locations`].
pub fn read(path: &Path, source: &SourceInfo, layer: &str) -> Result<Locations, Error> {
    let conn = open_file(path, false)?;
    check_geopackage(&conn, path)?;
    let layer = choose_layer(&conn, path, Some(layer))?;
    let display = format!("{}:{layer}", path.display());
    let (column, srs_id): (String, i64) = conn
        .query_row(
            "SELECT column_name, srs_id FROM gpkg_geometry_columns WHERE table_name = ?1",
            [&layer],
            |row| Ok((row.get(0)?, row.get(1)?)),
        )
        .optional()
        .map_err(|e| sqlite_error(path, "reading gpkg_geometry_columns", &e))?
        .ok_or_else(|| {
            file_error(
                path,
                format!("prediction layer {layer} has no row in gpkg_geometry_columns, so it has no geometry column"),
                FileProblem::BadContent,
            )
        })?;
    if srs_id != i64::from(source.source_srid) {
        return Err(Error::input(
            &display,
            Some(&column),
            None,
            format!(
                "the prediction locations have SRS id {srs_id} but the units ({}) have {}; distances need one CRS: \
                 reproject the layer first, for example ogr2ogr -t_srs EPSG:{} -nln {layer}_same_crs -update {} {} \
                 {layer}",
                source.table,
                source.source_srid,
                source.source_srid,
                path.display(),
                path.display()
            ),
        ));
    }
    let sql = format!("SELECT rowid, {} FROM {}", quote(&column), quote(&layer));
    let error = |e: rusqlite::Error| sqlite_error(path, &format!("reading layer {layer}"), &e);
    let mut statement = conn.prepare(&sql).map_err(error)?;
    let mut rows = statement.query([]).map_err(error)?;
    let mut points = Vec::new();
    let mut skipped = 0u64;
    let mut count = 0u64;
    while let Some(row) = rows.next().map_err(error)? {
        count += 1;
        let rowid: i64 = row.get(0).map_err(error)?;
        let bad = |problem: String| {
            Error::input(
                &display,
                Some(&column),
                Some(format!("rowid {rowid}")),
                problem,
            )
        };
        let bytes = match row.get_ref(1).map_err(error)? {
            ValueRef::Null => {
                skipped += 1;
                continue;
            }
            ValueRef::Blob(bytes) => bytes,
            _ => return Err(bad("geometry is not a GeoPackageBinary BLOB".into())),
        };
        let header = blob::check(bytes).map_err(|e| bad(e.to_string()))?;
        if i64::from(header.srs_id) != srs_id {
            return Err(bad(format!(
                "geometry carries SRS id {} but the layer's SRS id is {srs_id} (GeoPackage Requirement 33)",
                header.srs_id
            )));
        }
        if header.empty {
            skipped += 1;
            continue;
        }
        let geometry = geozero::wkb::Wkb(&bytes[header.wkb_offset..])
            .to_geo()
            .map_err(|e| bad(format!("geometry cannot be decoded: {e}")))?;
        match representative_point(&geometry) {
            Some(point) => points.push(point),
            None => skipped += 1,
        }
    }
    if points.is_empty() {
        return Err(Error::input(
            &display,
            Some(&column),
            None,
            format!(
                "no usable prediction location: {count} rows, all with a NULL or empty geometry"
            ),
        ));
    }
    Ok(Locations {
        count: points.len(),
        table: display,
        points,
        skipped,
    })
}
