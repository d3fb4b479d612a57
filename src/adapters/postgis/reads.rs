//! Reading stored runs back out of a PostGIS results schema for `geofold
//! export`: the job's unit and region layers, SRS rows, and the read-only
//! snapshot (one `REPEATABLE READ READ ONLY` transaction gives every read the
//! same snapshot). The rows of the results tables are read by
//! [`ReadBack`](crate::adapters::readback::ReadBack) (`readback.rs`), which
//! `report` and `map` share.

use futures_util::{pin_mut, StreamExt};
use geozero::ToGeo;
use tokio_postgres::types::ToSql;
use uuid::Uuid;

use super::store::PostgisStore;
use super::{database_error, quote_ident, split_qualified};
use crate::adapters::gpkg::import::{RegionLayerRow, UnitLayerRow};
use crate::adapters::gpkg::schema::Srs;
use crate::error::Error;
use crate::results::rows::Owned;
use crate::results::ColumnType;

/// The SELECT expression that reads a column as an [`Owned`] value.
pub(super) fn read_expression(name: &str, ty: ColumnType) -> String {
    let c = quote_ident(name);
    match ty {
        ColumnType::RunId | ColumnType::Json => format!("{c}::text"),
        ColumnType::Int => format!("{c}::int8"),
        ColumnType::Timestamp => {
            format!("to_char({c} AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"')")
        }
        ColumnType::TextList => format!("array_to_json({c})::text"),
        ColumnType::Bool => format!("{c}::int4::int8"),
        ColumnType::Geometry => format!("ST_AsBinary({c})"),
        ColumnType::Text | ColumnType::BigInt | ColumnType::Float => c,
    }
}

/// Column `index` of `row`, read by [`read_expression`], as an [`Owned`] value.
pub(super) fn owned(
    row: &tokio_postgres::Row,
    index: usize,
    ty: ColumnType,
) -> Result<Owned, tokio_postgres::Error> {
    Ok(match ty {
        ColumnType::Int | ColumnType::BigInt | ColumnType::Bool => row
            .try_get::<_, Option<i64>>(index)?
            .map_or(Owned::Null, Owned::Int),
        ColumnType::Float => row
            .try_get::<_, Option<f64>>(index)?
            .map_or(Owned::Null, Owned::Float),
        ColumnType::Geometry => match row.try_get::<_, Option<Vec<u8>>>(index)? {
            Some(bytes) => match geozero::wkb::Wkb(bytes).to_geo() {
                Ok(geo_types::Geometry::MultiPolygon(shape)) => Owned::Geometry(shape),
                Ok(geo_types::Geometry::Polygon(polygon)) => {
                    Owned::Geometry(geo_types::MultiPolygon::new(vec![polygon]))
                }
                _ => Owned::Null,
            },
            None => Owned::Null,
        },
        _ => row
            .try_get::<_, Option<String>>(index)?
            .map_or(Owned::Null, Owned::Text),
    })
}

impl PostgisStore {
    /// Starts the read-only snapshot the reads below share.
    ///
    /// # Errors
    /// Database errors.
    pub fn begin_reading(&self) -> Result<(), Error> {
        let session = self.session();
        session
            .runtime
            .block_on(
                session
                    .client
                    .batch_execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY"),
            )
            .map_err(|e| database_error("starting the read transaction", &e))
    }

    /// Ends the read-only snapshot.
    pub fn end_reading(&self) {
        let session = self.session();
        if let Err(error) = session
            .runtime
            .block_on(session.client.batch_execute("ROLLBACK"))
        {
            tracing::warn!(%error, "could not end the read transaction");
        }
    }

    /// Streams a query's rows to `on_row`.
    pub(super) fn stream(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
        action: &str,
        mut on_row: impl FnMut(&tokio_postgres::Row) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let session = self.session();
        session.runtime.block_on(async {
            let rows = session
                .client
                .query_raw(sql, params.iter().map(|p| *p as &dyn ToSql))
                .await
                .map_err(|e| database_error(action, &e))?;
            pin_mut!(rows);
            while let Some(row) = rows.next().await {
                on_row(&row.map_err(|e| database_error(action, &e))?)?;
            }
            Ok(())
        })
    }

    /// The unit layer of a run: its per-unit errors joined to the source
    /// geometry (2D ISO WKB), in unit id order; `multi` promotes single
    /// geometries to multi ones (for a layer declared MULTI*, as the job's
    /// PostGIS view casts them), and rows of a column mixing SRIDs are
    /// transformed to `srid`, the layer's (as the view does).
    ///
    /// # Errors
    /// [`Error::NotFound`] when the source table or its columns are gone.
    #[allow(clippy::too_many_arguments)]
    pub fn unit_layer_rows(
        &self,
        run_id: Uuid,
        source_table: &str,
        id_column: &str,
        geometry_column: &str,
        integer_ids: bool,
        (multi, srid): (bool, i32),
        mut visit: impl FnMut(UnitLayerRow) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let (schema, table) = split_qualified(source_table);
        let source = match &schema {
            Some(schema) => format!("{}.{}", quote_ident(schema), quote_ident(&table)),
            None => quote_ident(&table),
        };
        let id = quote_ident(id_column);
        let (cast, unit_id) = if integer_ids {
            ("bigint", format!("s.{id}::int8"))
        } else {
            ("text", format!("s.{id}::text"))
        };
        let geometry = format!("s.{}::geometry", quote_ident(geometry_column));
        let geometry = if srid != 0 {
            format!(
                "CASE WHEN ST_SRID({geometry}) IN ({srid}, 0) THEN {geometry} \
                 ELSE ST_Transform({geometry}, {srid}) END"
            )
        } else {
            geometry
        };
        let geometry = if multi {
            format!("ST_Multi({geometry})")
        } else {
            geometry
        };
        let sql = format!(
            "SELECT {unit_id}, e.run_id::text, e.fold::int8, e.observed, e.predicted, e.residual, e.abs_error,
                    e.rmse, e.repetitions::int8, ST_AsBinary(ST_Force2D({geometry})), e.loss
             FROM {schema}.unit_errors e JOIN {source} s ON s.{id} = e.unit_id::{cast}
             WHERE e.run_id = $1 ORDER BY e.unit_id",
            schema = quote_ident(self.schema()),
        );
        let action =
            format!("reading the units of run {run_id} with their geometry from {source_table}");
        self.stream(&sql, &[&run_id], &action, |row| {
            let get = |e: tokio_postgres::Error| database_error(&action, &e);
            visit(UnitLayerRow {
                unit_id: if integer_ids {
                    Owned::Int(row.try_get(0).map_err(get)?)
                } else {
                    Owned::Text(row.try_get(0).map_err(get)?)
                },
                run_id: row.try_get(1).map_err(get)?,
                fold: row.try_get(2).map_err(get)?,
                observed: row.try_get(3).map_err(get)?,
                predicted: row.try_get(4).map_err(get)?,
                residual: row.try_get(5).map_err(get)?,
                abs_error: row.try_get(6).map_err(get)?,
                rmse: row.try_get(7).map_err(get)?,
                repetitions: row.try_get(8).map_err(get)?,
                geometry: row.try_get(9).map_err(get)?,
                loss: row.try_get(10).map_err(get)?,
            })
        })
    }

    /// The regions of repetition 1 of a run.
    ///
    /// # Errors
    /// Database errors.
    pub fn region_layer_rows(&self, run_id: Uuid) -> Result<Vec<RegionLayerRow>, Error> {
        let sql = format!(
            "SELECT run_id::text, fold::int8, kind, label, units::int8, ST_AsBinary(geom) FROM {}.fold_regions
             WHERE run_id = $1 AND repetition = 1 ORDER BY region_id",
            quote_ident(self.schema())
        );
        let action = format!("reading the regions of run {run_id}");
        let mut rows = Vec::new();
        self.stream(&sql, &[&run_id], &action, |row| {
            let get = |e: tokio_postgres::Error| database_error(&action, &e);
            if let Owned::Geometry(geometry) = owned(row, 5, ColumnType::Geometry).map_err(get)? {
                rows.push(RegionLayerRow {
                    run_id: row.try_get(0).map_err(get)?,
                    fold: row.try_get(1).map_err(get)?,
                    kind: row.try_get(2).map_err(get)?,
                    label: row.try_get(3).map_err(get)?,
                    units: row.try_get(4).map_err(get)?,
                    geometry,
                });
            }
            Ok(())
        })?;
        Ok(rows)
    }

    /// The GeoPackage SRS row of an SRID, from `spatial_ref_sys` (WKT1).
    ///
    /// # Errors
    /// Database errors.
    pub fn srs(&self, srid: i32) -> Result<Srs, Error> {
        if srid <= 0 {
            return Ok(Srs {
                srs_id: -1,
                name: "Undefined Cartesian SRS".into(),
                organization: "NONE".into(),
                organization_id: -1,
                definition: "undefined".into(),
            });
        }
        let facts = super::read::srs_facts(self.session(), srid)?;
        Ok(Srs::epsg(srid, None, facts.wkt.as_deref()))
    }
}
