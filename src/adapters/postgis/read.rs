//! Inspecting and streaming a PostGIS source table.
//!
//! Inspection checks, before any row is read, that the table and every named
//! column exist (all missing ones are listed), that the id is an integer or
//! text column, the geometry a `geometry` column, and the target and features
//! numeric. Streaming is one `COPY (SELECT …) TO STDOUT (FORMAT binary)`: the
//! geometry arrives as EWKB (PostGIS binary send) and is decoded with geozero;
//! numbers are cast to `float8` by the server.

use futures_util::StreamExt;
use geozero::ToGeo;

use super::copy::{read_float8, read_int8, CopyDecoder};
use super::{database_error, quote_ident, split_qualified, Session};
use crate::adapters::{missing_columns, wanted_columns, ColumnSpec, Source, SourceInfo};
use crate::core::units::{IdKind, RawGeometry, UnitCollector, UnitId};
use crate::error::{Error, Location};

/// A PostGIS table opened as a source.
pub struct PostgisSource {
    session: Session,
    info: SourceInfo,
    select: String,
}

const INTEGER_TYPES: &[&str] = &["int2", "int4", "int8"];
const TEXT_TYPES: &[&str] = &["text", "varchar", "bpchar"];
const NUMERIC_TYPES: &[&str] = &["int2", "int4", "int8", "float4", "float8", "numeric"];

struct Column {
    name: String,
    type_name: String,
    formatted: String,
}

impl PostgisSource {
    /// Opens `table` (`schema.table` or `table` on the search path).
    ///
    /// # Errors
    /// [`Error::NotFound`] for a missing schema, table or column; [`Error::Input`]
    /// for columns of the wrong type; [`Error::Usage`] for a geographic SRID
    /// without `--distance-srid` when distances matter.
    pub fn open(
        session: Session,
        table: &str,
        columns: &ColumnSpec,
        distance_srid: Option<i32>,
    ) -> Result<PostgisSource, Error> {
        let (schema, name) = split_qualified(table);
        let client = &session.client;
        let rt = &session.runtime;
        let schema = match schema {
            Some(schema) => schema,
            None => rt
                .block_on(client.query_one("SELECT current_schema()::text", &[]))
                .map_err(|e| database_error("finding the current schema", &e))?
                .try_get::<_, String>(0)
                .map_err(|e| database_error("finding the current schema", &e))?,
        };
        let display = format!("{schema}.{name}");
        let relation = rt
            .block_on(client.query_opt(
                "SELECT c.oid FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
                 WHERE n.nspname = $1 AND c.relname = $2 AND c.relkind IN ('r', 'v', 'm', 'p', 'f')",
                &[&schema, &name],
            ))
            .map_err(|e| database_error("looking up the source table", &e))?;
        let oid: u32 = match relation {
            Some(row) => row
                .try_get(0)
                .map_err(|e| database_error("looking up the source table", &e))?,
            None => {
                let schema_exists = rt
                    .block_on(
                        client
                            .query_opt("SELECT 1 FROM pg_namespace WHERE nspname = $1", &[&schema]),
                    )
                    .map_err(|e| database_error("looking up the source schema", &e))?
                    .is_some();
                let what = if schema_exists {
                    format!("table {display} does not exist in {}", session.description)
                } else {
                    format!(
                        "schema {schema} does not exist in {} (table {display})",
                        session.description
                    )
                };
                return Err(Error::NotFound { what });
            }
        };
        let table_columns: Vec<Column> = rt
            .block_on(client.query(
                "SELECT a.attname::text, t.typname::text, format_type(a.atttypid, a.atttypmod) \
                 FROM pg_attribute a JOIN pg_type t ON t.oid = a.atttypid \
                 WHERE a.attrelid = $1 AND a.attnum > 0 AND NOT a.attisdropped ORDER BY a.attnum",
                &[&oid],
            ))
            .map_err(|e| database_error("listing the source columns", &e))?
            .iter()
            .map(|row| Column {
                name: row.get(0),
                type_name: row.get(1),
                formatted: row.get(2),
            })
            .collect();
        let id_column = match &columns.id {
            Some(id) => id.clone(),
            None => primary_key(&session, oid)?.ok_or_else(|| {
                Error::Usage(format!("table {display} has no single-column primary key: name the id column with --id"))
            })?,
        };
        let geom_column = match &columns.geom {
            Some(geom) => geom.clone(),
            None => {
                let geometry: Vec<&Column> = table_columns
                    .iter()
                    .filter(|c| c.type_name == "geometry")
                    .collect();
                match geometry.as_slice() {
                    [only] => only.name.clone(),
                    [] => {
                        return Err(Error::NotFound {
                            what: format!("table {display} has no geometry column"),
                        })
                    }
                    _ => {
                        return Err(Error::Usage(format!(
                            "table {display} has several geometry columns: name one with --geom"
                        )))
                    }
                }
            }
        };
        let wanted = wanted_columns(&id_column, &geom_column, columns);
        if let Some(missing) =
            missing_columns(&wanted, |name| table_columns.iter().any(|c| c.name == name))
        {
            return Err(Error::NotFound {
                what: format!("{missing} in table {display}"),
            });
        }
        let find = |name: &str| table_columns.iter().find(|c| c.name == name);
        let mut problems = Vec::new();
        let location = |column: &str| Location {
            table: display.clone(),
            column: Some(column.to_string()),
            row_id: None,
        };
        let id_type = find(&id_column)
            .map(|c| c.type_name.clone())
            .unwrap_or_default();
        let id_kind = if INTEGER_TYPES.contains(&id_type.as_str()) {
            IdKind::Integer
        } else if TEXT_TYPES.contains(&id_type.as_str()) {
            IdKind::Text
        } else {
            problems.push((
                location(&id_column),
                format!("id column has type {id_type}; it must be an integer or text type"),
            ));
            IdKind::Integer
        };
        let geom =
            find(&geom_column).ok_or_else(|| Error::Internal("geometry column vanished".into()))?;
        if geom.type_name != "geometry" {
            problems.push((
                location(&geom_column),
                format!(
                    "column has type {}; it must be a PostGIS geometry",
                    geom.formatted
                ),
            ));
        }
        for name in std::iter::once(&columns.target).chain(columns.features.iter()) {
            if let Some(column) = find(name) {
                if !NUMERIC_TYPES.contains(&column.type_name.as_str()) {
                    problems.push((
                        location(name),
                        format!("column has type {}; it must be numeric", column.formatted),
                    ));
                }
            }
        }
        if !problems.is_empty() {
            return Err(Error::Input { problems });
        }
        let declared_geometry_type = declared_type(&geom.formatted);
        let source_srid = column_srid(&session, &schema, &name, &geom_column)?;
        let (geographic, _, _) = srs_facts(&session, source_srid)?;
        let srid = distance_srid.unwrap_or(source_srid);
        let (distance_geographic, srs_name, srs_wkt) = srs_facts(&session, srid)?;
        if distance_srid.is_some() && distance_geographic {
            return Err(Error::Usage(format!(
                "--distance-srid {srid} is a longitude/latitude CRS; choose a projected CRS in metres"
            )));
        }
        let qualified_table = format!("{}.{}", quote_ident(&schema), quote_ident(&name));
        let id_expr = match id_kind {
            IdKind::Integer => format!("{}::int8", quote_ident(&id_column)),
            IdKind::Text => format!("{}::text", quote_ident(&id_column)),
        };
        let geom_expr = match distance_srid {
            Some(target) => format!("ST_Transform({}, {target})", quote_ident(&geom_column)),
            None => quote_ident(&geom_column),
        };
        let numbers: Vec<String> = std::iter::once(&columns.target)
            .chain(columns.features.iter())
            .map(|name| format!("{}::float8", quote_ident(name)))
            .collect();
        let select = format!(
            "SELECT {id_expr}, {geom_expr}, {} FROM {qualified_table}",
            numbers.join(", ")
        );
        let info = SourceInfo {
            store: "postgis",
            table: display,
            qualified_table,
            id_column,
            geom_column,
            target_column: columns.target.clone(),
            feature_columns: columns.features.clone(),
            id_kind,
            source_srid,
            srid,
            geographic,
            declared_geometry_type,
            srs_wkt,
            srs_name,
        };
        Ok(PostgisSource {
            session,
            info,
            select,
        })
    }
}

impl Source for PostgisSource {
    fn info(&self) -> &SourceInfo {
        &self.info
    }

    fn read(&mut self, collector: &mut UnitCollector) -> Result<(), Error> {
        let info = &self.info;
        let n_features = info.feature_columns.len();
        let copy = format!("COPY ({}) TO STDOUT (FORMAT binary)", self.select);
        let session = &self.session;
        session.runtime.block_on(async {
            let stream = session
                .client
                .copy_out(copy.as_str())
                .await
                .map_err(|e| database_error(&format!("reading {}", info.table), &e))?;
            futures_util::pin_mut!(stream);
            let mut decoder = CopyDecoder::new();
            let mut values: Vec<Option<f64>> = Vec::with_capacity(n_features);
            while let Some(chunk) = stream.next().await {
                let chunk =
                    chunk.map_err(|e| database_error(&format!("reading {}", info.table), &e))?;
                decoder.feed(&chunk, |fields| {
                    let id = match (info.id_kind, fields[0]) {
                        (_, None) => {
                            return Err(Error::input(
                                &info.table,
                                Some(&info.id_column),
                                None,
                                "NULL id",
                            ));
                        }
                        (IdKind::Integer, Some(bytes)) => UnitId::Int(
                            read_int8(bytes)
                                .ok_or_else(|| Error::Internal("bad int8 in COPY stream".into()))?,
                        ),
                        (IdKind::Text, Some(bytes)) => {
                            UnitId::Text(String::from_utf8_lossy(bytes).into_owned())
                        }
                    };
                    let geometry = match fields[1] {
                        None => RawGeometry::Null,
                        Some(bytes) => RawGeometry::Decoded(
                            geozero::wkb::Ewkb(bytes).to_geo().map_err(|error| {
                                Error::input(
                                    &info.table,
                                    Some(&info.geom_column),
                                    Some(id.to_string()),
                                    format!("geometry cannot be decoded: {error}"),
                                )
                            })?,
                        ),
                    };
                    let number = |index: usize| fields[index].and_then(read_float8);
                    values.clear();
                    values.extend((0..n_features).map(|j| number(3 + j)));
                    collector.push(id, geometry, number(2), &values)
                })?;
            }
            Ok(())
        })
    }
}

fn primary_key(session: &Session, oid: u32) -> Result<Option<String>, Error> {
    let rows = session
        .runtime
        .block_on(session.client.query(
            "SELECT a.attname::text FROM pg_index i JOIN pg_attribute a \
             ON a.attrelid = i.indrelid AND a.attnum = ANY(i.indkey) WHERE i.indrelid = $1 AND i.indisprimary",
            &[&oid],
        ))
        .map_err(|e| database_error("looking up the primary key", &e))?;
    Ok(match rows.as_slice() {
        [only] => Some(only.get(0)),
        _ => None,
    })
}

/// `geometry(MultiPolygon,3035)` → `MULTIPOLYGON`; `geometry` → `GEOMETRY`.
fn declared_type(formatted: &str) -> String {
    match formatted.find('(') {
        Some(start) => formatted[start + 1..]
            .split([',', ')'])
            .next()
            .unwrap_or("geometry")
            .trim()
            .to_ascii_uppercase(),
        None => "GEOMETRY".to_string(),
    }
}

/// The SRID of the column: its typmod if it has one, else the SRID of its first
/// non-NULL value, else 0.
fn column_srid(session: &Session, schema: &str, table: &str, column: &str) -> Result<i32, Error> {
    let rt = &session.runtime;
    let registered = rt
        .block_on(session.client.query_opt(
            "SELECT srid FROM geometry_columns WHERE f_table_schema = $1 AND f_table_name = $2 AND f_geometry_column = $3",
            &[&schema, &table, &column],
        ))
        .map_err(|e| database_error("reading geometry_columns", &e))?
        .and_then(|row| row.try_get::<_, i32>(0).ok())
        .unwrap_or(0);
    if registered != 0 {
        return Ok(registered);
    }
    let sql = format!(
        "SELECT ST_SRID({c}) FROM {s}.{t} WHERE {c} IS NOT NULL LIMIT 1",
        c = quote_ident(column),
        s = quote_ident(schema),
        t = quote_ident(table)
    );
    Ok(rt
        .block_on(session.client.query_opt(sql.as_str(), &[]))
        .map_err(|e| database_error("reading the geometry SRID", &e))?
        .and_then(|row| row.try_get::<_, i32>(0).ok())
        .unwrap_or(0))
}

/// Whether the SRID is longitude/latitude, its name and its WKT, from `spatial_ref_sys`.
/// SRID 0 (unknown) is treated as projected.
fn srs_facts(
    session: &Session,
    srid: i32,
) -> Result<(bool, Option<String>, Option<String>), Error> {
    if srid == 0 {
        return Ok((false, None, None));
    }
    let row = session
        .runtime
        .block_on(session.client.query_opt(
            "SELECT coalesce(srtext, ''), coalesce(proj4text, ''), auth_name || ':' || auth_srid FROM spatial_ref_sys WHERE srid = $1",
            &[&srid],
        ))
        .map_err(|e| database_error("reading spatial_ref_sys", &e))?;
    let Some(row) = row else {
        return Err(Error::Usage(format!(
            "SRID {srid} is not in spatial_ref_sys"
        )));
    };
    let srtext: String = row.get(0);
    let proj4: String = row.get(1);
    let name: Option<String> = row.get(2);
    let upper = srtext.to_ascii_uppercase();
    let geographic = upper.starts_with("GEOGCS[")
        || upper.starts_with("GEOGCRS[")
        || proj4.contains("+proj=longlat");
    Ok((geographic, name, (!srtext.is_empty()).then_some(srtext)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn declared_types_are_read_from_format_type() {
        assert_eq!(declared_type("geometry(MultiPolygon,3035)"), "MULTIPOLYGON");
        assert_eq!(declared_type("geometry(Point)"), "POINT");
        assert_eq!(declared_type("geometry"), "GEOMETRY");
    }
}
