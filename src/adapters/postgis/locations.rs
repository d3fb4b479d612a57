//! Reading prediction locations from a PostGIS table of the source's
//! database (`--prediction-table`, `--prediction-geom`).
//!
//! # Rules
//! - The table and its geometry (or geography) column must exist: the
//!   column named, or the table's only one (exit 66 otherwise, with the
//!   closest names).
//! - Its SRID (the column's type modifier, else the SRID its rows hold) must
//!   be the units' table's, unless `--distance-srid` is given: then PostGIS
//!   transforms every row from its own SRID, as it does the units (rows with
//!   SRID 0 cannot be transformed). Another SRID is bad input (exit 65): the
//!   message names both SRIDs and the two fixes.
//! - Rows are streamed with one binary COPY; each geometry is decoded
//!   (EWKB) and reduced to its representative point by the rule the units
//!   follow ([`representative_point`]). NULL and empty geometries are
//!   skipped and counted; a table with no usable row is bad input.

use futures_util::StreamExt;
use geozero::ToGeo;

use super::copy::CopyDecoder;
use super::read::{column_srid, declared_srid, missing_table};
use super::{database_error, quote_ident, split_qualified, Session};
use crate::adapters::{resolve_columns, Locations, NameMatch, SourceInfo};
use crate::core::geometry::representative_point;
use crate::error::Error;

/// Reads the locations of `table` (see the module doc).
///
/// # Errors
/// As [`crate::adapters::Source::read_locations`].
pub fn read(
    session: &Session,
    source: &SourceInfo,
    table: &str,
    geom: Option<&str>,
    distance_srid: Option<i32>,
) -> Result<Locations, Error> {
    let rt = &session.runtime;
    let client = &session.client;
    let (schema, name) = split_qualified(table);
    let schema = match schema {
        Some(schema) => schema,
        None => rt
            .block_on(client.query_one("SELECT current_schema()::text", &[]))
            .and_then(|row| row.try_get::<_, String>(0))
            .map_err(|e| database_error("finding the current schema", &e))?,
    };
    let display = format!("{schema}.{name}");
    let oid: u32 = match rt
        .block_on(client.query_opt(
            "SELECT c.oid FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
             WHERE n.nspname = $1 AND c.relname = $2 AND c.relkind IN ('r', 'v', 'm', 'p', 'f')",
            &[&schema, &name],
        ))
        .map_err(|e| database_error("looking up the prediction table", &e))?
    {
        Some(row) => row
            .try_get(0)
            .map_err(|e| database_error("looking up the prediction table", &e))?,
        None => {
            return Err(match missing_table(session, &schema, &name, &display)? {
                Error::NotFound { what } => Error::NotFound {
                    what: format!("prediction locations: {what}"),
                },
                other => other,
            })
        }
    };
    let spatial: Vec<(String, String, String)> = rt
        .block_on(client.query(
            "SELECT a.attname::text, t.typname::text, format_type(a.atttypid, a.atttypmod) \
             FROM pg_attribute a JOIN pg_type t ON t.oid = a.atttypid \
             WHERE a.attrelid = $1 AND a.attnum > 0 AND NOT a.attisdropped \
             AND t.typname IN ('geometry', 'geography') ORDER BY a.attnum",
            &[&oid],
        ))
        .map_err(|e| database_error("listing the prediction table's columns", &e))?
        .iter()
        .map(|row| Ok((row.try_get(0)?, row.try_get(1)?, row.try_get(2)?)))
        .collect::<Result<_, tokio_postgres::Error>>()
        .map_err(|e| database_error("listing the prediction table's columns", &e))?;
    let names: Vec<String> = spatial.iter().map(|c| c.0.clone()).collect();
    let column = match geom {
        Some(geom) => resolve_columns(
            &[geom],
            &names,
            NameMatch::Postgres,
            &format!("the geometry columns of prediction table {display}"),
        )?
        .remove(0),
        None => match names.as_slice() {
            [only] => only.clone(),
            [] => {
                return Err(Error::NotFound {
                    what: format!("prediction table {display} has no geometry column"),
                })
            }
            _ => {
                return Err(Error::Usage(format!(
                    "prediction table {display} has several geometry columns ({}): name one with --prediction-geom",
                    names.join(", ")
                )))
            }
        },
    };
    let (_, type_name, formatted) = spatial
        .iter()
        .find(|c| c.0 == column)
        .cloned()
        .ok_or_else(|| Error::Internal("prediction geometry column vanished".into()))?;
    let geography = type_name == "geography";
    let where_ = format!("{display}.{column}");
    if geography && distance_srid.is_none() {
        return Err(Error::Usage(format!(
            "{where_} is a geography column (longitude/latitude); pass --distance-srid N with a projected CRS in \
             metres, and PostGIS will transform it and the units alike"
        )));
    }
    let srid = if geography {
        declared_srid(&formatted).unwrap_or(4326)
    } else {
        column_srid(session, &schema, &name, &column, &display, distance_srid)?
    };
    if distance_srid.is_none() && srid != source.source_srid {
        return Err(Error::input(
            &display,
            Some(&column),
            None,
            format!(
                "the prediction locations have SRID {srid} but the units ({}.{}) have SRID {}; distances need one \
                 CRS: pass --distance-srid N (a projected CRS in metres) to transform both, or transform the \
                 prediction table with ST_Transform",
                source.table, source.geom_column, source.source_srid
            ),
        ));
    }
    let quoted = quote_ident(&column);
    let expression = match (distance_srid, geography) {
        (Some(target), true) => format!("ST_Transform({quoted}::geometry, {target})"),
        (Some(target), false) => format!("ST_Transform({quoted}, {target})"),
        (None, _) => quoted,
    };
    let copy = format!(
        "COPY (SELECT {expression} FROM {}.{}) TO STDOUT (FORMAT binary)",
        quote_ident(&schema),
        quote_ident(&name)
    );
    let mut points = Vec::new();
    let mut skipped = 0u64;
    let mut row = 0u64;
    rt.block_on(async {
        let stream = client
            .copy_out(copy.as_str())
            .await
            .map_err(|e| database_error(&format!("reading {display}"), &e))?;
        futures_util::pin_mut!(stream);
        let mut decoder = CopyDecoder::new();
        while let Some(chunk) = stream.next().await {
            let chunk = chunk.map_err(|e| database_error(&format!("reading {display}"), &e))?;
            decoder.feed(&chunk, |fields| {
                row += 1;
                match fields.first().copied().flatten() {
                    None => skipped += 1,
                    Some(bytes) => {
                        let geometry = geozero::wkb::Ewkb(bytes).to_geo().map_err(|error| {
                            Error::input(
                                &display,
                                Some(&column),
                                None,
                                format!("row {row} of the COPY stream: geometry cannot be decoded: {error}"),
                            )
                        })?;
                        match representative_point(&geometry) {
                            Some(point) => points.push(point),
                            None => skipped += 1,
                        }
                    }
                }
                Ok(())
            })?;
        }
        Ok::<(), Error>(())
    })?;
    if points.is_empty() {
        return Err(Error::input(
            &display,
            Some(&column),
            None,
            format!("no usable prediction location: {row} rows, all with a NULL or empty geometry"),
        ));
    }
    Ok(Locations {
        count: points.len(),
        table: where_,
        points,
        skipped,
    })
}
