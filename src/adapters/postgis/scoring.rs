//! What `geofold score` reads from PostGIS besides the results tables
//! (which it reads through `ReadBack`): the analyst's table of held-out
//! predictions loaded by the analyst (in any schema of the same
//! database).

use futures_util::{pin_mut, StreamExt};

use super::read::{INTEGER_TYPES, NUMERIC_TYPES, TEXT_TYPES};
use super::store::PostgisStore;
use super::{database_error, quote_ident, split_qualified};
use crate::adapters::{resolve_columns, NameMatch, PredictionRow, PREDICTION_COLUMNS};
use crate::error::{Error, Location};

impl PostgisStore {
    /// See [`crate::adapters::ResultStore::read_predictions`].
    ///
    /// # Errors
    /// [`Error::NotFound`] for a missing table or column; [`Error::Input`]
    /// for a column of the wrong type; database errors.
    pub fn read_prediction_table(&self, table: &str) -> Result<Vec<PredictionRow>, Error> {
        let session = self.session();
        let (schema, name) = split_qualified(table);
        let schema = schema.unwrap_or_else(|| self.schema().to_string());
        let display = format!("{schema}.{name}");
        let action = format!("reading the predictions in {display}");
        let get = |e: tokio_postgres::Error| database_error(&action, &e);
        let columns: Vec<(String, String)> = session
            .runtime
            .block_on(session.client.query(
                "SELECT a.attname::text, t.typname::text FROM pg_attribute a
                 JOIN pg_type t ON t.oid = a.atttypid
                 JOIN pg_class c ON c.oid = a.attrelid JOIN pg_namespace n ON n.oid = c.relnamespace
                 WHERE n.nspname = $1 AND c.relname = $2 AND a.attnum > 0 AND NOT a.attisdropped",
                &[&schema, &name],
            ))
            .map_err(get)?
            .iter()
            .map(|row| Ok((row.try_get(0)?, row.try_get(1)?)))
            .collect::<Result<_, tokio_postgres::Error>>()
            .map_err(get)?;
        if columns.is_empty() {
            return Err(Error::NotFound {
                what: format!("predictions table {display} (or it has no columns)"),
            });
        }
        let names: Vec<String> = columns.iter().map(|(n, _)| n.clone()).collect();
        let has_repetition = names.iter().any(|n| n.eq_ignore_ascii_case("repetition"));
        let wanted = wanted_list(has_repetition);
        let found = resolve_columns(
            &wanted,
            &names,
            NameMatch::Postgres,
            &format!("table {display}"),
        )?;
        let mut problems = Vec::new();
        for (wanted, actual) in wanted.iter().zip(&found) {
            let type_name = columns
                .iter()
                .find(|(n, _)| n == actual)
                .map(|(_, t)| t.as_str())
                .unwrap_or_default();
            let of = |types: &[&str]| types.contains(&type_name);
            let allowed = match *wanted {
                "unit_id" => of(INTEGER_TYPES) || of(TEXT_TYPES),
                "predicted" => of(NUMERIC_TYPES),
                _ => of(INTEGER_TYPES),
            };
            if !allowed {
                problems.push((
                    Location {
                        table: display.clone(),
                        column: Some(actual.clone()),
                        row_id: None,
                    },
                    format!(
                        "column has type {type_name}; {wanted} must be {}",
                        match *wanted {
                            "unit_id" => "an integer or text (the source's id)",
                            "predicted" => "numeric",
                            _ => "an integer",
                        }
                    ),
                ));
            }
        }
        if !problems.is_empty() {
            return Err(Error::Input { problems });
        }
        let column = |name: &str| {
            wanted
                .iter()
                .position(|c| *c == name)
                .map(|i| quote_ident(&found[i]))
        };
        let repetition =
            column("repetition").map_or("NULL::int8".to_string(), |c| format!("{c}::int8"));
        let sql = format!(
            "SELECT {}::text, {repetition}, {}::int8, {}::float8 FROM {}.{}",
            column("unit_id").unwrap_or_default(),
            column("fold").unwrap_or_default(),
            column("predicted").unwrap_or_default(),
            quote_ident(&schema),
            quote_ident(&name)
        );
        session.runtime.block_on(async {
            let rows = session
                .client
                .query_raw(
                    sql.as_str(),
                    std::iter::empty::<&(dyn tokio_postgres::types::ToSql + Sync)>(),
                )
                .await
                .map_err(get)?;
            pin_mut!(rows);
            let mut found = Vec::new();
            while let Some(row) = rows.next().await {
                let row = row.map_err(get)?;
                found.push(PredictionRow {
                    unit_id: row.try_get(0).map_err(get)?,
                    repetition: row.try_get(1).map_err(get)?,
                    fold: row.try_get(2).map_err(get)?,
                    predicted: row.try_get(3).map_err(get)?,
                });
            }
            Ok(found)
        })
    }
}

/// The prediction columns asked for, with or without `repetition`.
fn wanted_list(has_repetition: bool) -> Vec<&'static str> {
    PREDICTION_COLUMNS
        .iter()
        .copied()
        .filter(|c| *c != "repetition" || has_repetition)
        .collect()
}
