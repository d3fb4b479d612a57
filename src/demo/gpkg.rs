//! Writing the demo scenario as a fresh GeoPackage (`geofold demo`).

use std::path::Path;

use rusqlite::params;

use super::{DemoUnit, DEMO_LAYER, DEMO_SRID, DEMO_SRS_WKT};
use crate::adapters::gpkg::container::NewFile;
use crate::adapters::gpkg::schema::{self, FeatureTable, Srs, TriggerSet};
use crate::adapters::gpkg::{blob, sqlite_error};
use crate::error::Error;

/// Writes the demo scenario as a fresh GeoPackage at `path` (replacing any
/// file there) with the layer `subcatchments`: `fid` key, `id`, `name`, the
/// three features and the target (`rainfall_mm` NULL where the invented
/// gauge has a gap), and `geom` MULTIPOLYGON in EPSG:32631, R-tree indexed.
///
/// # Errors
/// Exit 73 when the file cannot be created, 74 on I/O errors.
pub fn write_demo(path: &Path, units: &[DemoUnit]) -> Result<(), Error> {
    use geozero::{CoordDimensions, ToWkb};
    let (file, mut conn) = NewFile::create(path)?;
    let action = |e: rusqlite::Error| sqlite_error(path, "writing the demo layer", &e);
    let layer = FeatureTable {
        name: DEMO_LAYER.to_string(),
        key: "fid".into(),
        columns: "id INTEGER NOT NULL UNIQUE, name TEXT NOT NULL, farmland_share DOUBLE, rainfall_mm DOUBLE, \
                  elevation_m DOUBLE, nitrate_mg_l DOUBLE"
            .into(),
        geometry_type: "MULTIPOLYGON".into(),
        geometry_not_null: true,
        srs_id: DEMO_SRID,
        z: 0,
        m: 0,
        description: "geofold demo: invented sub-catchments of an invented basin".into(),
    };
    let tx = conn.transaction().map_err(action)?;
    schema::create_container(&tx).map_err(action)?;
    schema::ensure_srs(&tx, &Srs::epsg(DEMO_SRID, None, Some(DEMO_SRS_WKT))).map_err(action)?;
    schema::create_feature_table(&tx, &layer).map_err(action)?;
    {
        let mut insert = tx
            .prepare(
                "INSERT INTO subcatchments (fid, id, name, farmland_share, rainfall_mm, elevation_m, nitrate_mg_l, geom)
                 VALUES (?1, ?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )
            .map_err(action)?;
        for unit in units {
            let body = geo_types::Geometry::MultiPolygon(unit.geometry.clone())
                .to_wkb(CoordDimensions::xy())
                .map_err(|e| Error::Internal(format!("encoding demo geometry: {e}")))?;
            let geometry = blob::encode_wkb(DEMO_SRID, &body)
                .map_err(|e| Error::Internal(format!("encoding demo geometry: {e}")))?;
            insert
                .execute(params![
                    unit.id,
                    unit.name,
                    unit.farmland_share,
                    unit.rainfall_mm,
                    unit.elevation_m,
                    unit.nitrate_mg_l,
                    geometry
                ])
                .map_err(action)?;
        }
    }
    schema::index_feature_table(&tx, &layer, TriggerSet::V1_3).map_err(action)?;
    tx.commit().map_err(action)?;
    file.finish(conn)
}
