//! What `geofold score` reads from a GeoPackage besides the results tables
//! (which it reads through `ReadBack`): the analyst's table of held-out
//! predictions (an attribute table, a layer, or a plain SQLite
//! table written by any tool) in that file or another GeoPackage.

use std::path::Path;

use rusqlite::types::ValueRef;
use rusqlite::Connection;

use super::{open_file, quote, sqlite_error};
use crate::adapters::{resolve_columns, NameMatch, PredictionRow, PREDICTION_COLUMNS};
use crate::error::{Error, Location};

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
