//! [`ReadBack`] of a GeoPackage results file: rows of any results table by a
//! key column, unit geometries (from the source layer when it is in the same
//! file, else from the job's unit layer, which carries each unit's geometry),
//! and CRS facts from `gpkg_spatial_ref_sys`.
//!
//! SQLite cannot transform coordinates: unit geometries are handed over in
//! their layer's SRS, which [`GeometryOrigin::srid`] names (the run's distance
//! SRS for every run geofold makes in a GeoPackage, since a GeoPackage source
//! is never transformed).

use std::path::Path;

use rusqlite::types::ValueRef;
use rusqlite::{Connection, OptionalExtension};

use super::rows::job_descriptions;
use super::store::GpkgStore;
use super::{blob, quote, schema, sqlite_error};
use crate::adapters::readback::{
    key_column, select_list, CrsFacts, GeometryOrigin, ReadBack, UnitSource,
};
use crate::error::{Error, FileProblem};
use crate::results::rows::Owned;
use crate::results::{ColumnType, Keying, TableDef};

/// A column's value as an [`Owned`] value of its type.
fn owned(value: ValueRef<'_>, ty: ColumnType) -> Result<Owned, String> {
    Ok(match (ty, value) {
        (_, ValueRef::Null) => Owned::Null,
        (ColumnType::Geometry, ValueRef::Blob(bytes)) => match blob::to_geometry(bytes)? {
            Some(geo_types::Geometry::MultiPolygon(shape)) => Owned::Geometry(shape),
            Some(geo_types::Geometry::Polygon(polygon)) => {
                Owned::Geometry(geo_types::MultiPolygon::new(vec![polygon]))
            }
            _ => Owned::Null,
        },
        (ColumnType::Float, ValueRef::Real(v)) => Owned::Float(v),
        (ColumnType::Float, ValueRef::Integer(v)) => Owned::Float(v as f64),
        (ColumnType::Int | ColumnType::BigInt | ColumnType::Bool, ValueRef::Integer(v)) => {
            Owned::Int(v)
        }
        (_, ValueRef::Text(text)) => Owned::Text(String::from_utf8_lossy(text).into_owned()),
        (_, ValueRef::Integer(v)) => Owned::Text(v.to_string()),
        (_, ValueRef::Real(v)) => Owned::Float(v),
        (ty, ValueRef::Blob(_)) => return Err(format!("a blob where a {ty:?} belongs")),
    })
}

impl GpkgStore {
    fn reading(&self) -> Result<&Connection, Error> {
        self.connection().ok_or_else(|| {
            crate::adapters::gpkg::file_error(
                self.path(),
                "no such results file: no run has written to it yet",
                FileProblem::Missing,
            )
        })
    }
}

/// The SRS id a feature layer declares.
fn layer_srs(conn: &Connection, path: &Path, layer: &str) -> Result<Option<i32>, Error> {
    conn.query_row(
        "SELECT srs_id FROM gpkg_geometry_columns WHERE table_name = ?1",
        [layer],
        |row| row.get(0),
    )
    .optional()
    .map_err(|e| sqlite_error(path, "reading gpkg_geometry_columns", &e))
}

/// True when the recorded source `file.gpkg:layer` is a layer of this file.
fn source_in_file(
    conn: &Connection,
    path: &Path,
    source_table: &str,
) -> Result<Option<String>, Error> {
    let Some((file, layer)) = source_table.rsplit_once(':') else {
        return Ok(None);
    };
    let same = match (Path::new(file).canonicalize(), path.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        // The run may have named the file relative to another directory.
        _ => Path::new(file).file_name() == path.file_name(),
    };
    let present = schema::has_table(conn, "main", layer)
        .map_err(|e| sqlite_error(path, "looking for the source layer", &e))?;
    Ok((same && present).then(|| layer.to_string()))
}

impl ReadBack for GpkgStore {
    fn read_rows(
        &mut self,
        table: &TableDef,
        key: &str,
        values: &[String],
        visit: &mut dyn FnMut(Vec<Owned>) -> Result<(), Error>,
    ) -> Result<(), Error> {
        key_column(table, key)?;
        let path = self.path().to_path_buf();
        let conn = self.reading()?;
        // A file made by an earlier geofold may lack a newer table (no rows)
        // or column (read as NULL): reading never changes a store.
        let present: Vec<String> = {
            let mut statement = conn
                .prepare("SELECT name FROM pragma_table_info(?1)")
                .map_err(|e| sqlite_error(&path, "reading the results tables' columns", &e))?;
            let names = statement
                .query_map([table.name], |row| row.get(0))
                .map_err(|e| sqlite_error(&path, "reading the results tables' columns", &e))?;
            names
                .collect::<Result<_, _>>()
                .map_err(|e| sqlite_error(&path, "reading the results tables' columns", &e))?
        };
        let Some(columns) = select_list(
            table,
            key,
            &present,
            |c| quote(c.name),
            |_| "NULL".to_string(),
        ) else {
            return Ok(());
        };
        let order = match table.keying {
            Keying::Serial(key) => quote(key),
            Keying::Primary(key) => key.iter().map(|k| quote(k)).collect::<Vec<_>>().join(", "),
            Keying::PerUnit => "fid".to_string(),
        };
        let sql = format!(
            "SELECT {} FROM main.{} WHERE {} IN (SELECT value FROM json_each(?1)) ORDER BY {order}",
            columns.join(", "),
            quote(table.name),
            quote(key)
        );
        let action = format!("reading {}", table.name);
        let error = |e: rusqlite::Error| sqlite_error(&path, &action, &e);
        let wanted = serde_json::Value::from(values.to_vec()).to_string();
        let mut statement = conn.prepare(&sql).map_err(error)?;
        let mut rows = statement.query([wanted]).map_err(error)?;
        while let Some(row) = rows.next().map_err(error)? {
            let mut out = Vec::with_capacity(table.columns.len());
            for (index, column) in table.columns.iter().enumerate() {
                let value = row.get_ref(index).map_err(error)?;
                out.push(owned(value, column.ty).map_err(|problem| {
                    Error::input(
                        &format!("{}:{}", path.display(), table.name),
                        Some(column.name),
                        None,
                        problem,
                    )
                })?);
            }
            visit(out)?;
        }
        Ok(())
    }

    fn unit_geometries(
        &mut self,
        units: &UnitSource,
        visit: &mut dyn FnMut(String, Option<geo_types::Geometry<f64>>) -> Result<(), Error>,
    ) -> Result<GeometryOrigin, Error> {
        let path = self.path().to_path_buf();
        let conn = self.reading()?;
        let [(unit_layer, description), _] = job_descriptions(&units.job);
        let source_layer = if units.source_store == "gpkg" {
            source_in_file(conn, &path, &units.source_table)?
        } else {
            None
        };
        let (layer, id, geometry, read_from) = match source_layer {
            Some(layer) => (
                layer.clone(),
                units.id_column.clone(),
                units.geometry_column.clone(),
                format!("source layer {layer} of {}", path.display()),
            ),
            None => {
                let ours: Option<String> = conn
                    .query_row(
                        "SELECT description FROM gpkg_contents WHERE table_name = ?1",
                        [&unit_layer],
                        |row| row.get::<_, Option<String>>(0),
                    )
                    .optional()
                    .map_err(|e| sqlite_error(&path, "looking for the job's unit layer", &e))?
                    .flatten();
                let head = description.split(';').next().unwrap_or_default();
                let present = schema::has_table(conn, "main", &unit_layer)
                    .map_err(|e| sqlite_error(&path, "looking for the job's unit layer", &e))?;
                if !present || ours.as_deref().and_then(|d| d.split(';').next()) != Some(head) {
                    return Err(Error::NotFound {
                        what: format!(
                            "the unit geometries of run {}: its source {} is not in {} and the file has \
                             no layer {unit_layer} made by geofold",
                            units.run_id,
                            units.source_table,
                            path.display()
                        ),
                    });
                }
                (
                    unit_layer.clone(),
                    "unit_id".to_string(),
                    "geom".to_string(),
                    format!("layer {unit_layer} of {}", path.display()),
                )
            }
        };
        let srid = layer_srs(conn, &path, &layer)?.unwrap_or(units.distance_srid);
        let action = format!("reading the unit geometries from {read_from}");
        let error = |e: rusqlite::Error| sqlite_error(&path, &action, &e);
        let mut statement = conn
            .prepare(&format!(
                "SELECT CAST({id} AS TEXT), {geometry} FROM main.{layer} \
                 WHERE CAST({id} AS TEXT) IN (SELECT unit_id FROM main.held_out WHERE run_id = ?1 \
                 AND repetition = 1) ORDER BY 1",
                id = quote(&id),
                geometry = quote(&geometry),
                layer = quote(&layer)
            ))
            .map_err(error)?;
        let mut rows = statement.query([&units.run_id]).map_err(error)?;
        while let Some(row) = rows.next().map_err(error)? {
            let id: Option<String> = row.get(0).map_err(error)?;
            let shape = match row.get_ref(1).map_err(error)? {
                ValueRef::Blob(bytes) => blob::to_geometry(bytes).ok().flatten(),
                _ => None,
            };
            if let Some(id) = id {
                visit(id, shape)?;
            }
        }
        Ok(GeometryOrigin { read_from, srid })
    }

    fn crs(&mut self, srid: i32) -> Result<CrsFacts, Error> {
        if srid <= 0 {
            return Ok(CrsFacts::undefined(srid));
        }
        let path = self.path().to_path_buf();
        let conn = self.reading()?;
        let definition: Option<String> = conn
            .query_row(
                "SELECT definition FROM gpkg_spatial_ref_sys WHERE srs_id = ?1",
                [srid],
                |row| row.get(0),
            )
            .optional()
            .map_err(|e| sqlite_error(&path, "reading gpkg_spatial_ref_sys", &e))?;
        Ok(match definition {
            Some(wkt) => CrsFacts::from_wkt(srid, &wkt, ""),
            None => CrsFacts::undefined(srid),
        })
    }
}
