//! Loading the demo scenario into PostGIS (`geofold demo --db`).

use std::pin::pin;

use futures_util::SinkExt;
use geozero::{CoordDimensions, ToWkb};

use super::{DemoUnit, DEMO_SRID};
use crate::adapters::postgis::copy::CopyEncoder;
use crate::adapters::postgis::{database_error, quote_ident, Session};
use crate::error::Error;

/// Replaces `schema.table` with the demo units, in one transaction.
///
/// # Errors
/// Database errors.
pub fn load_demo(
    session: &Session,
    schema: &str,
    table: &str,
    units: &[DemoUnit],
) -> Result<(), Error> {
    let qualified = format!("{}.{}", quote_ident(schema), quote_ident(table));
    let action = format!("loading the demo into {schema}.{table}");
    session.runtime.block_on(async {
        let client = &session.client;
        client
            .batch_execute(&format!(
                "BEGIN;
                 CREATE SCHEMA IF NOT EXISTS {s};
                 DROP TABLE IF EXISTS {qualified} CASCADE;
                 CREATE TABLE {qualified} (
                     id integer PRIMARY KEY,
                     name text NOT NULL,
                     farmland_share double precision,
                     rainfall_mm double precision,
                     elevation_m double precision,
                     nitrate_mg_l double precision,
                     geom geometry(MultiPolygon, {DEMO_SRID}) NOT NULL);
                 COMMENT ON TABLE {qualified} IS 'geofold demo: invented sub-catchments of an invented basin';",
                s = quote_ident(schema)
            ))
            .await
            .map_err(|e| database_error(&action, &e))?;
        let sink = client
            .copy_in(&format!(
                "COPY {qualified} (id, name, farmland_share, rainfall_mm, elevation_m, nitrate_mg_l, geom) FROM STDIN (FORMAT binary)"
            ))
            .await
            .map_err(|e| database_error(&action, &e))?;
        let mut sink = pin!(sink);
        let mut encoder = CopyEncoder::new();
        for unit in units {
            let wkb = geo_types::Geometry::MultiPolygon(unit.geometry.clone())
                .to_ewkb(CoordDimensions::xy(), Some(DEMO_SRID))
                .map_err(|e| Error::Internal(format!("encoding demo geometry: {e}")))?;
            encoder.row(7);
            encoder.int4(unit.id as i32);
            encoder.text(&unit.name);
            encoder.float8(unit.farmland_share);
            encoder.float8_opt(unit.rainfall_mm);
            encoder.float8(unit.elevation_m);
            encoder.float8(unit.nitrate_mg_l);
            encoder.raw(&wkb);
        }
        sink.send(encoder.finish()).await.map_err(|e| database_error(&action, &e))?;
        sink.as_mut().finish().await.map_err(|e| database_error(&action, &e))?;
        client
            .batch_execute(&format!("CREATE INDEX ON {qualified} USING gist (geom); ANALYZE {qualified}; COMMIT;"))
            .await
            .map_err(|e| database_error(&action, &e))?;
        Ok(())
    })
}
