//! [`ReadBack`] of a PostGIS results schema: rows of any results table by a
//! key column, unit geometries from the source table a run recorded
//! (transformed to the run's distance SRID in the database), and CRS facts
//! from `spatial_ref_sys`.

use geozero::ToGeo;

use super::reads::{owned, read_expression};
use super::store::PostgisStore;
use super::{database_error, quote_ident, split_qualified};
use crate::adapters::readback::{
    key_column, select_list, CrsFacts, GeometryOrigin, ReadBack, UnitSource,
};
use crate::error::Error;
use crate::results::rows::Owned;
use crate::results::{ColumnType, Keying, TableDef};

/// A typed NULL for a column the store lacks, of the type [`read_expression`] gives.
fn null_expression(ty: ColumnType) -> &'static str {
    match ty {
        ColumnType::Int | ColumnType::BigInt | ColumnType::Bool => "NULL::int8",
        ColumnType::Float => "NULL::float8",
        ColumnType::Geometry => "NULL::bytea",
        _ => "NULL::text",
    }
}

impl PostgisStore {
    /// The columns of results table `name`, None when the schema has no such table.
    fn existing_columns(&self, name: &str) -> Result<Option<Vec<String>>, Error> {
        let session = self.session();
        let action = format!("reading the columns of {}.{name}", self.schema());
        let relation = format!("{}.{}", quote_ident(self.schema()), quote_ident(name));
        let rows = session
            .runtime
            .block_on(session.client.query(
                "SELECT a.attname::text, c.oid IS NOT NULL FROM (SELECT to_regclass($1) AS oid) c \
                 LEFT JOIN pg_attribute a ON a.attrelid = c.oid AND a.attnum > 0 AND NOT a.attisdropped",
                &[&relation],
            ))
            .map_err(|e| database_error(&action, &e))?;
        let mut columns = Vec::new();
        for row in &rows {
            let exists: bool = row.try_get(1).map_err(|e| database_error(&action, &e))?;
            if !exists {
                return Ok(None);
            }
            if let Some(name) = row
                .try_get::<_, Option<String>>(0)
                .map_err(|e| database_error(&action, &e))?
            {
                columns.push(name);
            }
        }
        Ok(Some(columns))
    }
}

impl ReadBack for PostgisStore {
    fn read_rows(
        &mut self,
        table: &TableDef,
        key: &str,
        values: &[String],
        visit: &mut dyn FnMut(Vec<Owned>) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let key_type = key_column(table, key)?.ty;
        // A store made by an earlier geofold may lack a newer table (no rows)
        // or column (read as NULL): reading never changes a store.
        let Some(present) = self.existing_columns(table.name)? else {
            return Ok(());
        };
        let Some(columns) = select_list(
            table,
            key,
            &present,
            |c| read_expression(c.name, c.ty),
            |ty| null_expression(ty).to_string(),
        ) else {
            return Ok(());
        };
        let order = match table.keying {
            Keying::Serial(key) => format!(" ORDER BY {}", quote_ident(key)),
            Keying::Primary(key) => format!(
                " ORDER BY {}",
                key.iter()
                    .map(|k| quote_ident(k))
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
            Keying::PerUnit => String::new(),
        };
        // The key compared in its own type, so its index serves the read.
        let condition = match key_type {
            ColumnType::RunId => format!("{} = ANY($1::text[]::uuid[])", quote_ident(key)),
            ColumnType::Text => format!("{} = ANY($1::text[])", quote_ident(key)),
            _ => format!("{}::text = ANY($1::text[])", quote_ident(key)),
        };
        let sql = format!(
            "SELECT {} FROM {}.{} WHERE {condition}{order}",
            columns.join(", "),
            quote_ident(self.schema()),
            quote_ident(table.name)
        );
        let action = format!("reading {}.{}", self.schema(), table.name);
        self.stream(&sql, &[&values], &action, |row| {
            let mut out = Vec::with_capacity(table.columns.len());
            for (index, column) in table.columns.iter().enumerate() {
                out.push(owned(row, index, column.ty).map_err(|e| database_error(&action, &e))?);
            }
            visit(out)
        })
    }

    fn unit_geometries(
        &mut self,
        units: &UnitSource,
        visit: &mut dyn FnMut(String, Option<geo_types::Geometry<f64>>) -> Result<(), Error>,
    ) -> Result<GeometryOrigin, Error> {
        let (schema, table) = split_qualified(&units.source_table);
        let source = match &schema {
            Some(schema) => format!("{}.{}", quote_ident(schema), quote_ident(&table)),
            None => quote_ident(&table),
        };
        let id = quote_ident(&units.id_column);
        let geometry = format!("s.{}::geometry", quote_ident(&units.geometry_column));
        // Rows already in the distance SRID (or without one) stay as they are,
        // so a column mixing SRIDs is read as the run read it.
        let geometry = if units.distance_srid > 0 {
            format!(
                "CASE WHEN ST_SRID({geometry}) IN ({srid}, 0) THEN {geometry} \
                 ELSE ST_Transform({geometry}, {srid}) END",
                srid = units.distance_srid
            )
        } else {
            geometry
        };
        let sql = format!(
            "SELECT s.{id}::text, ST_AsBinary(ST_Force2D({geometry})) FROM {source} s \
             WHERE s.{id}::text IN (SELECT unit_id FROM {results}.held_out WHERE run_id = $1::text::uuid \
             AND repetition = 1)",
            results = quote_ident(self.schema())
        );
        let action = format!(
            "reading the unit geometries of run {} from table {}",
            units.run_id, units.source_table
        );
        self.stream(&sql, &[&units.run_id], &action, |row| {
            let id: String = row.try_get(0).map_err(|e| database_error(&action, &e))?;
            let bytes: Option<Vec<u8>> = row.try_get(1).map_err(|e| database_error(&action, &e))?;
            let shape = bytes.and_then(|b| geozero::wkb::Wkb(b).to_geo().ok());
            visit(id, shape)
        })?;
        Ok(GeometryOrigin {
            read_from: format!("PostGIS table {}", units.source_table),
            srid: units.distance_srid,
        })
    }

    fn crs(&mut self, srid: i32) -> Result<CrsFacts, Error> {
        if srid <= 0 {
            return Ok(CrsFacts::undefined(srid));
        }
        let session = self.session();
        let action = "reading spatial_ref_sys";
        let row = session
            .runtime
            .block_on(session.client.query_opt(
                "SELECT coalesce(srtext, ''), coalesce(proj4text, '') FROM spatial_ref_sys WHERE srid = $1",
                &[&srid],
            ))
            .map_err(|e| database_error(action, &e))?;
        let Some(row) = row else {
            return Ok(CrsFacts::undefined(srid));
        };
        let wkt: String = row.try_get(0).map_err(|e| database_error(action, &e))?;
        let proj4: String = row.try_get(1).map_err(|e| database_error(action, &e))?;
        Ok(CrsFacts::from_wkt(srid, &wkt, &proj4))
    }
}
