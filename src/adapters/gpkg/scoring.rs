//! What `geofold score` reads from a GeoPackage results file: a run
//! awaiting predictions with its recorded folds and exclusions, and a table
//! of held-out predictions (an attribute table, a layer, or a plain SQLite
//! table written by any tool) in that file or another GeoPackage.

use std::path::Path;

use geo_types::{Geometry, MultiPolygon};
use geozero::ToGeo;
use rusqlite::types::ValueRef;
use rusqlite::{params, Connection, OptionalExtension};
use uuid::Uuid;

use super::import::RegionLayerRow;
use super::{blob, open_file, quote, sqlite_error};
use crate::adapters::{resolve_columns, AssignedRun, NameMatch, PredictionRow, PREDICTION_COLUMNS};
use crate::error::{Error, Location};

/// The run `run_id` of the results file `path` with its folds.
///
/// # Errors
/// [`Error::NotFound`] for an unknown run; SQLite errors.
pub fn assigned_run(conn: &Connection, path: &Path, run_id: Uuid) -> Result<AssignedRun, Error> {
    let error = |e: rusqlite::Error| sqlite_error(path, &format!("reading run {run_id}"), &e);
    let id = run_id.to_string();
    let row = conn
        .query_row(
            "SELECT job, primary_run_id, status, scheme, model, family, parameters, seed, repeats, folds,
                input_fingerprint, tool_version FROM runs WHERE run_id = ?1",
            [&id],
            |row| {
                Ok((
                    row.get::<_, String>(0)?,
                    row.get::<_, Option<String>>(1)?,
                    row.get::<_, String>(2)?,
                    row.get::<_, String>(3)?,
                    row.get::<_, String>(4)?,
                    row.get::<_, String>(5)?,
                    row.get::<_, String>(6)?,
                    row.get::<_, i64>(7)?,
                    row.get::<_, i64>(8)?,
                    row.get::<_, i64>(9)?,
                    row.get::<_, Option<String>>(10)?,
                    row.get::<_, String>(11)?,
                ))
            },
        )
        .optional()
        .map_err(error)?
        .ok_or_else(|| Error::NotFound {
            what: format!("run {run_id} in {}", path.display()),
        })?;
    let mut run = AssignedRun {
        run_id,
        job: row.0,
        primary_run_id: row.1.and_then(|text| Uuid::parse_str(&text).ok()),
        status: row.2,
        scheme: row.3,
        model: row.4,
        family: row.5,
        parameters: serde_json::from_str(&row.6).unwrap_or_default(),
        seed: row.7,
        repeats: row.8,
        folds: row.9,
        input_fingerprint: row.10,
        tool_version: row.11,
        assignments: Vec::new(),
        exclusions: Vec::new(),
        regions: Vec::new(),
    };
    let mut statement = conn
        .prepare("SELECT unit_id, repetition, fold FROM held_out WHERE run_id = ?1 ORDER BY fid")
        .map_err(error)?;
    let mut rows = statement.query(params![id]).map_err(error)?;
    while let Some(row) = rows.next().map_err(error)? {
        run.assignments.push((
            row.get(0).map_err(error)?,
            row.get(1).map_err(error)?,
            row.get(2).map_err(error)?,
        ));
    }
    let mut statement = conn
        .prepare(
            "SELECT repetition, fold, unit_id FROM fold_exclusions WHERE run_id = ?1 ORDER BY fid",
        )
        .map_err(error)?;
    let mut rows = statement.query(params![id]).map_err(error)?;
    while let Some(row) = rows.next().map_err(error)? {
        run.exclusions.push((
            row.get(0).map_err(error)?,
            row.get(1).map_err(error)?,
            row.get(2).map_err(error)?,
        ));
    }
    let mut statement = conn
        .prepare(
            "SELECT fold, kind, label, units, geom FROM fold_regions WHERE run_id = ?1 AND repetition = 1
             ORDER BY region_id",
        )
        .map_err(error)?;
    let mut rows = statement.query(params![id]).map_err(error)?;
    while let Some(row) = rows.next().map_err(error)? {
        let bytes: Vec<u8> = row.get(4).map_err(error)?;
        let Ok(header) = blob::check(&bytes) else {
            continue;
        };
        let geometry = match geozero::wkb::Wkb(&bytes[header.wkb_offset..]).to_geo() {
            Ok(Geometry::MultiPolygon(shape)) => shape,
            Ok(Geometry::Polygon(polygon)) => MultiPolygon::new(vec![polygon]),
            _ => continue,
        };
        run.regions.push(RegionLayerRow {
            run_id: id.clone(),
            fold: row.get(0).map_err(error)?,
            kind: row.get(1).map_err(error)?,
            label: row.get(2).map_err(error)?,
            units: row.get(3).map_err(error)?,
            geometry,
        });
    }
    Ok(run)
}

/// The rows of the predictions table `table` in the GeoPackage at `path`.
///
/// # Errors
/// As [`read_predictions`].
pub fn read_predictions_file(path: &Path, table: &str) -> Result<Vec<PredictionRow>, Error> {
    let conn = open_file(path, false)?;
    read_predictions(&conn, path, table)
}

/// The rows of the predictions table `table` on `conn` (the file `path`).
///
/// # Errors
/// [`Error::NotFound`] for a missing table or column; [`Error::Input`] for a
/// value of the wrong type, naming its row; SQLite errors.
pub fn read_predictions(
    conn: &Connection,
    path: &Path,
    table: &str,
) -> Result<Vec<PredictionRow>, Error> {
    let display = format!("{}:{table}", path.display());
    let error =
        |e: rusqlite::Error| sqlite_error(path, &format!("reading the predictions in {table}"), &e);
    let names: Vec<String> = {
        let mut statement = conn
            .prepare("SELECT name FROM pragma_table_info(?1)")
            .map_err(error)?;
        let rows = statement
            .query_map([table], |row| row.get(0))
            .map_err(error)?;
        rows.collect::<Result<_, _>>().map_err(error)?
    };
    if names.is_empty() {
        return Err(Error::NotFound {
            what: format!("predictions table {table} in {}", path.display()),
        });
    }
    let has_repetition = names.iter().any(|n| n.eq_ignore_ascii_case("repetition"));
    let wanted: Vec<&str> = PREDICTION_COLUMNS
        .iter()
        .copied()
        .filter(|c| *c != "repetition" || has_repetition)
        .collect();
    let found = resolve_columns(
        &wanted,
        &names,
        NameMatch::Sqlite,
        &format!("table {display}"),
    )?;
    let column = |name: &str| {
        wanted
            .iter()
            .position(|c| *c == name)
            .map(|i| quote(&found[i]))
    };
    let sql = format!(
        "SELECT {}, {}, {}, {}, rowid FROM {}",
        column("unit_id").unwrap_or_default(),
        column("repetition").unwrap_or_else(|| "NULL".into()),
        column("fold").unwrap_or_default(),
        column("predicted").unwrap_or_default(),
        quote(table)
    );
    let mut statement = conn.prepare(&sql).map_err(error)?;
    let mut rows = statement.query([]).map_err(error)?;
    let mut found_rows = Vec::new();
    let mut problems = Vec::new();
    while let Some(row) = rows.next().map_err(error)? {
        let value = |i: usize| row.get_ref(i).map_err(error);
        let rowid: i64 = row.get(4).unwrap_or_default();
        let mut bad = |column: &str, what: String| {
            if problems.len() < 1000 {
                problems.push((
                    Location {
                        table: display.clone(),
                        column: Some(column.to_string()),
                        row_id: Some(format!("rowid {rowid}")),
                    },
                    what,
                ));
            }
        };
        let unit_id = match value(0)? {
            ValueRef::Null => None,
            ValueRef::Integer(v) => Some(v.to_string()),
            ValueRef::Real(v) if v.fract() == 0.0 && v.abs() < 9e15 => Some((v as i64).to_string()),
            ValueRef::Text(bytes) => Some(String::from_utf8_lossy(bytes).into_owned()),
            _ => {
                bad("unit_id", "unit_id is not an integer or a text".into());
                None
            }
        };
        let mut integer = |i: usize, name: &str| -> Result<Option<i64>, Error> {
            Ok(match value(i)? {
                ValueRef::Null => None,
                ValueRef::Integer(v) => Some(v),
                ValueRef::Real(v) if v.fract() == 0.0 && v.abs() < 9e15 => Some(v as i64),
                _ => {
                    bad(name, format!("{name} is not a whole number"));
                    None
                }
            })
        };
        let repetition = integer(1, "repetition")?;
        let fold = integer(2, "fold")?;
        let predicted = match value(3)? {
            ValueRef::Null => None,
            ValueRef::Integer(v) => Some(v as f64),
            ValueRef::Real(v) => Some(v),
            _ => {
                bad("predicted", "predicted is not a number".into());
                None
            }
        };
        found_rows.push(PredictionRow {
            unit_id,
            repetition,
            fold,
            predicted,
        });
    }
    if problems.is_empty() {
        Ok(found_rows)
    } else {
        Err(Error::Input { problems })
    }
}
