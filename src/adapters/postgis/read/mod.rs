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
use crate::adapters::{
    check_value_kinds, index_pairs, resolve_named_columns, suggest, ColumnSpec, CrsKind, NameMatch,
    NamedColumns, Source, SourceInfo, ValueKind,
};
use crate::core::diagnostics::contiguity::Contiguity;
use crate::core::units::Dataset;
use crate::core::units::{Extras, IdKind, RawGeometry, UnitCollector, UnitId};
use crate::error::{Error, Location};

mod catalog;
pub use catalog::srs_facts;
use catalog::*;
pub(crate) use catalog::{column_srid, declared_srid};

/// A PostGIS table opened as a source.
pub struct PostgisSource {
    session: Session,
    info: SourceInfo,
    select: String,
}

pub(super) const INTEGER_TYPES: &[&str] = &["int2", "int4", "int8"];
pub(super) const TEXT_TYPES: &[&str] = &["text", "varchar", "bpchar"];
pub(super) const NUMERIC_TYPES: &[&str] = &["int2", "int4", "int8", "float4", "float8", "numeric"];

struct Column {
    name: String,
    type_name: String,
    formatted: String,
}

/// What the distance CRS is, read from `spatial_ref_sys`.
pub struct SrsFacts {
    /// Kind of CRS.
    pub crs: CrsKind,
    /// `EPSG:N` when known.
    pub name: Option<String>,
    /// Its WKT.
    pub wkt: Option<String>,
    /// Its length unit, from the WKT.
    pub length_unit: Option<String>,
}

impl PostgisSource {
    /// Opens `table` (`schema.table` or `table` on the search path).
    ///
    /// # Errors
    /// [`Error::NotFound`] for a missing schema, table or column (with the
    /// closest names); [`Error::Input`] for columns of the wrong type or a
    /// geometry column holding several SRIDs without `--distance-srid`;
    /// [`Error::Usage`] for a geography column without `--distance-srid`.
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
            None => return Err(missing_table(&session, &schema, &name, &display)?),
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
            .map(|row| {
                Ok(Column {
                    name: row.try_get(0)?,
                    type_name: row.try_get(1)?,
                    formatted: row.try_get(2)?,
                })
            })
            .collect::<Result<_, tokio_postgres::Error>>()
            .map_err(|e| database_error("listing the source columns", &e))?;
        let names: Vec<String> = table_columns.iter().map(|c| c.name.clone()).collect();
        let where_ = format!("table {display}");
        let id_column = match &columns.id {
            Some(id) => id.clone(),
            None => primary_key(&session, oid)?.ok_or_else(|| {
                Error::Usage(format!("table {display} has no single-column primary key: name the id column with --id"))
            })?,
        };
        let geom_column = match &columns.geom {
            Some(geom) => geom.clone(),
            None => {
                let spatial: Vec<&Column> = table_columns
                    .iter()
                    .filter(|c| c.type_name == "geometry" || c.type_name == "geography")
                    .collect();
                match spatial.as_slice() {
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
        let NamedColumns {
            id: id_column,
            geom: geom_column,
            target: target_column,
            features: feature_columns,
            group: group_column,
            exposure: exposure_column,
        } = resolve_named_columns(
            &id_column,
            &geom_column,
            columns,
            &names,
            NameMatch::Postgres,
            &where_,
        )?;
        let find = |name: &str| table_columns.iter().find(|c| c.name == name);
        let mut problems = Vec::new();
        let location = |column: &str| Location {
            table: display.clone(),
            column: Some(column.to_string()),
            row_id: None,
        };
        let id = find(&id_column).ok_or_else(|| Error::Internal("id column vanished".into()))?;
        let id_kind = if INTEGER_TYPES.contains(&id.type_name.as_str()) {
            IdKind::Integer
        } else if TEXT_TYPES.contains(&id.type_name.as_str()) {
            IdKind::Text
        } else {
            problems.push((
                location(&id_column),
                format!(
                    "id column has type {}; it must be an integer or text type",
                    id.formatted
                ),
            ));
            IdKind::Integer
        };
        let id_type = match id.type_name.as_str() {
            "int2" | "int4" => "integer",
            "int8" => "bigint",
            _ => "text",
        }
        .to_string();
        let geom =
            find(&geom_column).ok_or_else(|| Error::Internal("geometry column vanished".into()))?;
        let geography = geom.type_name == "geography";
        if geom.type_name != "geometry" && !geography {
            problems.push((
                location(&geom_column),
                format!(
                    "column has type {}; it must be a PostGIS geometry (or geography, with --distance-srid)",
                    geom.formatted
                ),
            ));
        }
        if let Some(group) = &group_column {
            if let Some(column) = find(group) {
                if !INTEGER_TYPES.contains(&column.type_name.as_str())
                    && !TEXT_TYPES.contains(&column.type_name.as_str())
                {
                    problems.push((
                        location(group),
                        format!(
                            "group column has type {}; it must be an integer or text type",
                            column.formatted
                        ),
                    ));
                }
            }
        }
        // A text feature is categorical; the target and exposure must be numbers.
        let text_features = check_value_kinds(
            &target_column,
            &feature_columns,
            exposure_column.as_deref(),
            |name| {
                find(name).map(|c| {
                    if NUMERIC_TYPES.contains(&c.type_name.as_str()) {
                        ValueKind::Number
                    } else if TEXT_TYPES.contains(&c.type_name.as_str()) {
                        ValueKind::Text
                    } else {
                        ValueKind::Other
                    }
                })
            },
            |name, is_feature| {
                let allowed = if is_feature {
                    "numeric, or text for a categorical feature"
                } else {
                    "numeric"
                };
                let formatted = find(name).map_or("", |c| c.formatted.as_str());
                (
                    location(name),
                    format!("column has type {formatted}; it must be {allowed}"),
                )
            },
            &mut problems,
        );
        if !problems.is_empty() {
            return Err(Error::Input { problems });
        }
        if geography && distance_srid.is_none() {
            return Err(Error::Usage(format!(
                "{display}.{geom_column} is a geography column (longitude/latitude on the spheroid); \
                 pass --distance-srid N with a projected CRS in metres, and PostGIS will cast and transform it"
            )));
        }
        // A geography column is GEOGRAPHY whatever its type modifier, so the
        // job view casts it to a typed geometry (layers::unit_geometry).
        let declared_geometry_type = if geography {
            "GEOGRAPHY".to_string()
        } else {
            declared_type(&geom.formatted)
        };
        let source_srid = if geography {
            declared_srid(&geom.formatted).unwrap_or(4326)
        } else {
            column_srid(
                &session,
                &schema,
                &name,
                &geom_column,
                &display,
                distance_srid,
            )?
        };
        let srid = distance_srid.unwrap_or(source_srid);
        let facts = srs_facts(&session, srid)?;
        if distance_srid.is_some() && facts.crs != CrsKind::Projected {
            return Err(Error::Usage(format!(
                "--distance-srid {srid} is not a projected CRS; choose a projected CRS in metres"
            )));
        }
        let qualified_table = format!("{}.{}", quote_ident(&schema), quote_ident(&name));
        let id_expr = match id_kind {
            IdKind::Integer => format!("{}::int8", quote_ident(&id_column)),
            IdKind::Text => format!("{}::text", quote_ident(&id_column)),
        };
        let geom_expr = match (distance_srid, geography) {
            (Some(target), true) => format!(
                "ST_Transform({}::geometry, {target})",
                quote_ident(&geom_column)
            ),
            (Some(target), false) => {
                format!("ST_Transform({}, {target})", quote_ident(&geom_column))
            }
            (None, _) => quote_ident(&geom_column),
        };
        let numbers: Vec<String> = std::iter::once((&target_column, false))
            .chain(feature_columns.iter().zip(text_features.iter().copied()))
            .map(|(name, text)| {
                format!(
                    "{}::{}",
                    quote_ident(name),
                    if text { "text" } else { "float8" }
                )
            })
            .collect();
        let mut extras = String::new();
        if let Some(group) = &group_column {
            extras.push_str(&format!(", {}::text", quote_ident(group)));
        }
        if let Some(exposure) = &exposure_column {
            extras.push_str(&format!(", {}::float8", quote_ident(exposure)));
        }
        let select = format!(
            "SELECT {id_expr}, {geom_expr}, {}{extras} FROM {qualified_table}",
            numbers.join(", ")
        );
        let info = SourceInfo {
            store: "postgis",
            table: display,
            qualified_table,
            file: None,
            id_column,
            geom_column,
            target_column,
            feature_columns,
            text_features,
            group_column,
            exposure_column,
            id_kind,
            id_type,
            source_srid,
            srid,
            crs: facts.crs,
            length_unit: facts.length_unit,
            declared_geometry_type,
            srs_wkt: facts.wkt,
            srs_name: facts.name,
        };
        Ok(PostgisSource {
            session,
            info,
            select,
        })
    }
}

/// The error for a table that is not there: the schema missing, or the
/// table, with the closest table names of the schema.
pub(crate) fn missing_table(
    session: &Session,
    schema: &str,
    name: &str,
    display: &str,
) -> Result<Error, Error> {
    let rt = &session.runtime;
    let schema_exists = rt
        .block_on(
            session
                .client
                .query_opt("SELECT 1 FROM pg_namespace WHERE nspname = $1", &[&schema]),
        )
        .map_err(|e| database_error("looking up the source schema", &e))?
        .is_some();
    if !schema_exists {
        return Ok(Error::NotFound {
            what: format!(
                "schema {schema} does not exist in {} (table {display})",
                session.description
            ),
        });
    }
    let tables: Vec<String> = rt
        .block_on(session.client.query(
            "SELECT c.relname::text FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
             WHERE n.nspname = $1 AND c.relkind IN ('r', 'v', 'm', 'p', 'f')",
            &[&schema],
        ))
        .map_err(|e| database_error("listing the source schema's tables", &e))?
        .iter()
        .filter_map(|row| row.try_get(0).ok())
        .collect();
    Ok(Error::NotFound {
        what: format!(
            "table {display} does not exist in {}{}",
            session.description,
            suggest(name, &tables)
        ),
    })
}

impl Source for PostgisSource {
    fn info(&self) -> &SourceInfo {
        &self.info
    }

    fn contiguity(&mut self, data: &Dataset, rule: Contiguity) -> Result<Vec<(u32, u32)>, Error> {
        let info = &self.info;
        let (id, geom) = (quote_ident(&info.id_column), quote_ident(&info.geom_column));
        let test = match rule {
            Contiguity::Queen => format!("ST_Touches(a.{geom}, b.{geom})"),
            Contiguity::Rook => format!("ST_Relate(a.{geom}, b.{geom}, 'F***1****')"),
        };
        let cast = match info.id_kind {
            IdKind::Integer => "int8",
            IdKind::Text => "text",
        };
        // The && operator lets the GiST index of the geometry column find the
        // candidates (PostGIS manual, "Using Spatial Indexes").
        let sql = format!(
            "SELECT a.{id}::{cast}, b.{id}::{cast} FROM {t} a JOIN {t} b ON a.{geom} && b.{geom} AND a.{id} < b.{id} \
             WHERE {test}",
            t = info.qualified_table
        );
        let action = format!(
            "finding the {} neighbours of {} in PostGIS",
            rule.name(),
            info.table
        );
        let rows = self
            .session
            .runtime
            .block_on(self.session.client.query(sql.as_str(), &[]))
            .map_err(|e| database_error(&action, &e))?;
        let mut pairs = Vec::with_capacity(rows.len());
        for row in rows {
            let get = |e: tokio_postgres::Error| database_error(&action, &e);
            let pair = match info.id_kind {
                IdKind::Integer => (
                    UnitId::Int(row.try_get(0).map_err(get)?),
                    UnitId::Int(row.try_get(1).map_err(get)?),
                ),
                IdKind::Text => (
                    UnitId::Text(row.try_get(0).map_err(get)?),
                    UnitId::Text(row.try_get(1).map_err(get)?),
                ),
            };
            pairs.push(pair);
        }
        Ok(index_pairs(data, pairs))
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
                    let mut extras = Extras::default();
                    values.clear();
                    for j in 0..n_features {
                        if info.text_features[j] {
                            values.push(None);
                            extras.texts.push(
                                fields[3 + j]
                                    .map(|bytes| String::from_utf8_lossy(bytes).into_owned()),
                            );
                        } else {
                            values.push(number(3 + j));
                        }
                    }
                    let mut next = 3 + n_features;
                    if info.group_column.is_some() {
                        extras.group =
                            fields[next].map(|bytes| String::from_utf8_lossy(bytes).into_owned());
                        next += 1;
                    }
                    if info.exposure_column.is_some() {
                        extras.exposure = number(next);
                    }
                    collector.push_with(id, geometry, number(2), &values, extras)
                })?;
            }
            Ok(())
        })
    }

    fn read_locations(
        &mut self,
        table: &str,
        geom: Option<&str>,
        distance_srid: Option<i32>,
    ) -> Result<crate::adapters::Locations, Error> {
        super::locations::read(&self.session, &self.info, table, geom, distance_srid)
    }
}

#[cfg(test)]
mod tests;
