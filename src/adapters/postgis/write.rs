//! The PostGIS results schema and writing runs into it.
//!
//! The schema is created and upgraded by the versioned SQL files under `sql/`,
//! applied by [`PostgisStore::prepare`] in one transaction and recorded in
//! `schema_version`. A run is written by [`PostgisStore::commit`]: every table
//! is loaded with binary COPY inside one transaction that also marks the run
//! succeeded and refreshes the job's views, so a failure at any point leaves no
//! result rows of the run behind.

use std::pin::pin;

use bytes::Bytes;
use futures_util::SinkExt;
use tokio_postgres::Transaction;

use super::copy::CopyEncoder;
use super::{database_error, quote_ident, quote_literal, Session};
use crate::adapters::{
    add_count, check_store_settings, wkb, FinishedRun, ResultStore, RunRecord, SourceInfo,
    StoreReport,
};
use crate::core::geometry::cell_polygon;
use crate::core::units::{Dataset, IdKind, UnitId};
use crate::error::Error;

/// Versioned migrations: (version, SQL with `{schema}`, `{unit_id_type}`, `{srid}` placeholders).
const MIGRATIONS: &[(i32, &str)] = &[(1, include_str!("../../../sql/001_results.sql"))];

/// Bytes per COPY message sent to the server.
const CHUNK: usize = 1 << 20;

/// A PostGIS results schema.
pub struct PostgisStore {
    session: Session,
    schema: String,
}

impl PostgisStore {
    /// A store in `schema` (created on first use).
    pub fn new(session: Session, schema: &str) -> PostgisStore {
        PostgisStore {
            session,
            schema: schema.to_string(),
        }
    }

    fn qualified(&self, table: &str) -> String {
        format!("{}.{}", quote_ident(&self.schema), quote_ident(table))
    }
}

fn unit_id_type(kind: IdKind) -> &'static str {
    match kind {
        IdKind::Integer => "bigint",
        IdKind::Text => "text",
    }
}

impl ResultStore for PostgisStore {
    fn prepare(&mut self, info: &SourceInfo) -> Result<(), Error> {
        let schema = quote_ident(&self.schema);
        let id_type = unit_id_type(info.id_kind);
        let srid = info.srid;
        let version = env!("CARGO_PKG_VERSION");
        let store = self.schema.clone();
        let session = &mut self.session;
        let action = format!("preparing results schema {store}");
        session.runtime.block_on(async {
            let tx = session.client.transaction().await.map_err(|e| database_error(&action, &e))?;
            tx.batch_execute(&format!(
                "CREATE SCHEMA IF NOT EXISTS {schema};
                 CREATE TABLE IF NOT EXISTS {schema}.schema_version (
                     version integer PRIMARY KEY,
                     applied_at timestamptz NOT NULL DEFAULT now(),
                     tool_version text NOT NULL);
                 LOCK TABLE {schema}.schema_version IN EXCLUSIVE MODE;"
            ))
            .await
            .map_err(|e| database_error(&action, &e))?;
            let current: i32 = tx
                .query_one(&format!("SELECT coalesce(max(version), 0) FROM {schema}.schema_version"), &[])
                .await
                .map_err(|e| database_error(&action, &e))?
                .get(0);
            for (number, sql) in MIGRATIONS {
                if *number <= current {
                    continue;
                }
                let text = sql
                    .replace("{schema}", &schema)
                    .replace("{unit_id_type}", id_type)
                    .replace("{srid}", &srid.to_string());
                tx.batch_execute(&text).await.map_err(|e| database_error(&format!("{action} (migration {number})"), &e))?;
                tx.execute(
                    &format!("INSERT INTO {schema}.schema_version (version, tool_version) VALUES ($1, $2)"),
                    &[number, &version],
                )
                .await
                .map_err(|e| database_error(&action, &e))?;
                if *number == 1 {
                    tx.execute(
                        &format!("INSERT INTO {schema}.store_settings VALUES ('unit_id_type', $1), ('block_srid', $2)"),
                        &[&id_type, &srid.to_string()],
                    )
                    .await
                    .map_err(|e| database_error(&action, &e))?;
                }
            }
            let settings = tx
                .query(&format!("SELECT key, value FROM {schema}.store_settings"), &[])
                .await
                .map_err(|e| database_error(&action, &e))?;
            let settings: Vec<(String, String)> =
                settings.iter().map(|row| (row.get(0), row.get(1))).collect();
            check_store_settings(
                &store,
                &settings,
                id_type,
                srid,
                "use another --results-schema",
            )?;
            tx.commit().await.map_err(|e| database_error(&action, &e))
        })
    }

    fn begin(&mut self, info: &SourceInfo, records: &[RunRecord]) -> Result<(), Error> {
        let runs = self.qualified("runs");
        let session = &self.session;
        session.runtime.block_on(async {
            for record in records {
                let started = record.started_at_micros as f64 / 1e6;
                session
                    .client
                    .execute(
                        &format!(
                            "INSERT INTO {runs} (run_id, job, primary_run_id, status, started_at, source_store, source_table,
                                id_column, geometry_column, target_column, feature_columns, scheme, parameters, seed,
                                repeats, folds, source_srid, distance_srid, tool_version)
                             VALUES ($1, $2, $3, 'running', to_timestamp($4), $5, $6, $7, $8, $9, $10, $11, $12, $13,
                                $14, $15, $16, $17, $18)"
                        ),
                        &[
                            &record.run_id,
                            &record.job,
                            &record.primary_run_id,
                            &started,
                            &info.store,
                            &info.table,
                            &info.id_column,
                            &info.geom_column,
                            &info.target_column,
                            &info.feature_columns,
                            &record.scheme,
                            &record.parameters,
                            &(record.seed as i64),
                            &(record.repeats as i32),
                            &(record.folds as i32),
                            &info.source_srid,
                            &info.srid,
                            &record.tool_version,
                        ],
                    )
                    .await
                    .map_err(|e| database_error("recording the run", &e))?;
            }
            Ok(())
        })
    }

    fn commit(
        &mut self,
        info: &SourceInfo,
        dataset: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error> {
        let schema = self.schema.clone();
        let names = TableNames::new(&schema);
        let session = &mut self.session;
        let rows_written = session.runtime.block_on(async {
            let action = format!("writing results to schema {schema}");
            let tx = session
                .client
                .transaction()
                .await
                .map_err(|e| database_error(&action, &e))?;
            let mut counts: Vec<(String, u64)> = Vec::new();
            for run in runs {
                for (table, rows) in write_run(&tx, &names, info, dataset, run).await? {
                    add_count(&mut counts, &table, rows);
                }
            }
            // Summarise the BRIN ranges the COPYs just filled, so queries by run
            // skip them at once rather than after the next VACUUM.
            for index in ["predictions_run_brin", "unit_errors_run_brin"] {
                let name = format!("{}.{}", quote_ident(&schema), quote_ident(index));
                tx.execute(
                    "SELECT brin_summarize_new_values($1::text::regclass)",
                    &[&name],
                )
                .await
                .map_err(|e| database_error("summarising the run indexes", &e))?;
            }
            let primary = runs.iter().find(|run| run.record.primary_run_id.is_none());
            if let Some(primary) = primary {
                for sql in job_views(&schema, &primary.record.job, info, dataset) {
                    tx.batch_execute(&sql)
                        .await
                        .map_err(|e| database_error("creating the job's views", &e))?;
                }
            }
            tx.commit().await.map_err(|e| database_error(&action, &e))?;
            Ok::<_, Error>(counts)
        })?;
        let job = runs
            .first()
            .map(|run| run.record.job.clone())
            .unwrap_or_default();
        Ok(StoreReport {
            store: "postgis",
            location: format!("{} schema {}", self.session.description, self.schema),
            layer: format!("{}.{} (key fid)", self.schema, job),
            blocks_layer: format!("{}.{}_blocks (key block_key)", self.schema, job),
            rows_written,
        })
    }

    fn fail(&mut self, records: &[RunRecord], message: &str) {
        let runs = self.qualified("runs");
        let session = &self.session;
        let result: Result<(), tokio_postgres::Error> = session.runtime.block_on(async {
            for record in records {
                session
                    .client
                    .execute(
                        &format!(
                            "UPDATE {runs} SET status = 'failed', finished_at = now(), error_message = $2 WHERE run_id = $1"
                        ),
                        &[&record.run_id, &message],
                    )
                    .await?;
            }
            Ok(())
        });
        if let Err(error) = result {
            tracing::warn!(%error, "could not mark the run failed");
        }
    }
}

struct TableNames {
    predictions: String,
    unit_errors: String,
    fold_scores: String,
    run_scores: String,
    blocks: String,
    runs: String,
}

impl TableNames {
    fn new(schema: &str) -> TableNames {
        let q = |table: &str| format!("{}.{}", quote_ident(schema), quote_ident(table));
        TableNames {
            predictions: q("predictions"),
            unit_errors: q("unit_errors"),
            fold_scores: q("fold_scores"),
            run_scores: q("run_scores"),
            blocks: q("blocks"),
            runs: q("runs"),
        }
    }
}

fn put_id(encoder: &mut CopyEncoder, id: &UnitId) {
    match id {
        UnitId::Int(value) => encoder.int8(*value),
        UnitId::Text(value) => encoder.text(value),
    }
}

/// Sends an encoder's buffered bytes whenever it passes [`CHUNK`].
async fn pump<S>(
    sink: &mut std::pin::Pin<&mut S>,
    encoder: &mut CopyEncoder,
    action: &str,
) -> Result<(), Error>
where
    S: futures_util::Sink<Bytes, Error = tokio_postgres::Error>,
{
    if let Some(bytes) = encoder.take_if_larger(CHUNK) {
        sink.send(bytes).await.map_err(|e| send_error(action, &e))?;
    }
    Ok(())
}

/// The error of a failed COPY send. When the server refuses the data while
/// rows are still being sent, tokio-postgres drops the server's message and
/// reports a closed channel; say what that means instead of "connection closed".
fn send_error(action: &str, error: &tokio_postgres::Error) -> Error {
    if error.as_db_error().is_some() {
        return database_error(action, error);
    }
    Error::Database {
        action: action.to_string(),
        message: format!(
            "the server ended the load early ({error}): it refused the data or the connection dropped; \
             the server log has the reason"
        ),
        sqlstate: None,
    }
}

/// Runs one `COPY … FROM STDIN (FORMAT binary)`, with `fill` encoding the rows.
async fn copy_in(
    tx: &Transaction<'_>,
    table: &str,
    columns: &str,
    rows: u64,
    mut fill: impl FnMut(&mut CopyEncoder) -> bool,
) -> Result<u64, Error> {
    let action = format!("loading {table}");
    let sink = tx
        .copy_in(&format!(
            "COPY {table} ({columns}) FROM STDIN (FORMAT binary)"
        ))
        .await
        .map_err(|e| database_error(&action, &e))?;
    let mut sink = pin!(sink);
    let mut encoder = CopyEncoder::new();
    while fill(&mut encoder) {
        pump(&mut sink, &mut encoder, &action).await?;
    }
    sink.send(encoder.finish())
        .await
        .map_err(|e| send_error(&action, &e))?;
    let written = sink
        .as_mut()
        .finish()
        .await
        .map_err(|e| database_error(&action, &e))?;
    if written != rows {
        return Err(Error::Internal(format!(
            "{table}: wrote {written} rows, expected {rows}"
        )));
    }
    Ok(written)
}

async fn write_run(
    tx: &Transaction<'_>,
    names: &TableNames,
    info: &SourceInfo,
    dataset: &Dataset,
    run: &FinishedRun<'_>,
) -> Result<Vec<(String, u64)>, Error> {
    let run_id = run.record.run_id;
    let outcome = run.outcome;
    let n = dataset.len();
    let mut counts = Vec::new();

    // predictions: one row per unit and repetition, encoded in slices so the
    // encoder never holds more than a chunk (fold_members is a view over it).
    let total = (n * outcome.repetitions.len()) as u64;
    let mut cursor = 0usize;
    let written = copy_in(
        tx,
        &names.predictions,
        "run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error",
        total,
        |encoder| {
            let end = (cursor + 4096).min(n * outcome.repetitions.len());
            for position in cursor..end {
                let (repetition, unit) = (position / n, position % n);
                let repetition_outcome = &outcome.repetitions[repetition];
                let observed = dataset.target[unit];
                let predicted = repetition_outcome.predicted[unit];
                let residual = observed - predicted;
                encoder.row(9);
                encoder.uuid(&run_id);
                encoder.int4(repetition as i32 + 1);
                encoder.int4(repetition_outcome.assignment.fold_of[unit] as i32 + 1);
                put_id(encoder, &dataset.ids[unit]);
                encoder.float8(observed);
                encoder.float8(predicted);
                encoder.float8(residual);
                encoder.float8(residual.abs());
                encoder.float8(residual * residual);
            }
            let more = end > cursor;
            cursor = end;
            more
        },
    )
    .await?;
    counts.push(("predictions".to_string(), written));
    counts.push(("fold_members".to_string(), written));

    let repetitions = outcome.repetitions.len() as i32;
    let mut cursor = 0usize;
    let written = copy_in(
        tx,
        &names.unit_errors,
        "run_id, unit_key, unit_id, observed, predicted, residual, abs_error, rmse, repetitions",
        n as u64,
        |encoder| {
            let end = (cursor + 4096).min(n);
            for unit in cursor..end {
                let error = &outcome.unit_errors[unit];
                encoder.row(9);
                encoder.uuid(&run_id);
                encoder.int4(unit as i32 + 1);
                put_id(encoder, &dataset.ids[unit]);
                encoder.float8(error.observed);
                encoder.float8(error.mean_predicted);
                encoder.float8(error.mean_residual);
                encoder.float8(error.mae);
                encoder.float8(error.rmse);
                encoder.int4(repetitions);
            }
            let more = end > cursor;
            cursor = end;
            more
        },
    )
    .await?;
    counts.push(("unit_errors".to_string(), written));

    let mut done = false;
    let written = copy_in(
        tx,
        &names.fold_scores,
        "run_id, repetition, fold, n_train, n_test, rmse, mae, bias, r2",
        outcome.fold_scores.len() as u64,
        |encoder| {
            if done {
                return false;
            }
            for score in &outcome.fold_scores {
                encoder.row(9);
                encoder.uuid(&run_id);
                encoder.int4(score.repetition as i32 + 1);
                encoder.int4(score.fold as i32 + 1);
                encoder.int4(score.n_train as i32);
                encoder.int4(score.n_test as i32);
                encoder.float8(score.scores.rmse);
                encoder.float8(score.scores.mae);
                encoder.float8(score.scores.bias);
                encoder.float8_opt(score.scores.r2);
            }
            done = true;
            true
        },
    )
    .await?;
    counts.push(("fold_scores".to_string(), written));

    let mut done = false;
    let spread = &outcome.fold_spread;
    let written = copy_in(
        tx,
        &names.run_scores,
        "run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean, mae_fold_sd, \
         bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd",
        1,
        |encoder| {
            if done {
                return false;
            }
            encoder.row(14);
            encoder.uuid(&run_id);
            encoder.int8(outcome.pooled.n as i64);
            encoder.float8(outcome.pooled.rmse);
            encoder.float8(outcome.pooled.mae);
            encoder.float8(outcome.pooled.bias);
            encoder.float8_opt(outcome.pooled.r2);
            for value in [
                spread.rmse.mean,
                spread.rmse.sd,
                spread.mae.mean,
                spread.mae.sd,
                spread.bias.mean,
                spread.bias.sd,
                spread.r2.mean,
                spread.r2.sd,
            ] {
                encoder.float8(value);
            }
            done = true;
            true
        },
    )
    .await?;
    counts.push(("run_scores".to_string(), written));

    if let crate::core::folds::SchemeSpec::Grid(params) = &run.plan.scheme {
        let total: u64 = outcome
            .repetitions
            .iter()
            .map(|r| r.assignment.blocks.len() as u64)
            .sum();
        let mut done = false;
        let written = copy_in(
            tx,
            &names.blocks,
            "run_id, repetition, block_col, block_row, fold, n_units, geom",
            total,
            |encoder| {
                if done {
                    return false;
                }
                for (repetition, repetition_outcome) in outcome.repetitions.iter().enumerate() {
                    for block in &repetition_outcome.assignment.blocks {
                        let cell =
                            cell_polygon(params.origin, params.block_size, block.col, block.row);
                        encoder.row(7);
                        encoder.uuid(&run_id);
                        encoder.int4(repetition as i32 + 1);
                        encoder.int8(block.col);
                        encoder.int8(block.row);
                        encoder.int4(block.fold as i32 + 1);
                        encoder.int4(block.n_units as i32);
                        encoder.raw(&wkb::polygon(&wkb::ring_of(&cell), Some(info.srid)));
                    }
                }
                done = true;
                true
            },
        )
        .await?;
        counts.push(("blocks".to_string(), written));
    }

    let skipped =
        serde_json::to_value(&dataset.skipped).map_err(|e| Error::Internal(e.to_string()))?;
    tx.execute(
        &format!(
            "UPDATE {} SET status = 'succeeded', finished_at = clock_timestamp(), input_fingerprint = $2,
                units_read = $3, units_used = $4, units_skipped = $5 WHERE run_id = $1",
            names.runs
        ),
        &[&run_id, &dataset.fingerprint(), &(dataset.rows_read as i64), &(n as i64), &skipped],
    )
    .await
    .map_err(|e| database_error("marking the run succeeded", &e))?;
    Ok(counts)
}

/// The geometry expression of the job view: the source column itself when it
/// has a type modifier, else a cast that gives QGIS a typed column.
fn view_geometry(info: &SourceInfo, dataset: &Dataset) -> String {
    let column = format!("s.{}", quote_ident(&info.geom_column));
    let srid = info.source_srid;
    if info.declared_geometry_type != "GEOMETRY" {
        return column;
    }
    let kinds = dataset.geometry_kinds;
    match (kinds.points, kinds.polygons, kinds.other) {
        (false, true, false) => format!("ST_Multi({column})::geometry(MultiPolygon, {srid})"),
        (true, false, false) => format!("ST_Multi({column})::geometry(MultiPoint, {srid})"),
        _ => format!("{column}::geometry(Geometry, {srid})"),
    }
}

/// SQL for the job's two views: `<job>` (per-unit errors of the latest
/// successful primary run joined to the source geometry, key `fid`) and
/// `<job>_blocks` (that run's blocks of repetition 1, key `block_key`).
fn job_views(schema: &str, job: &str, info: &SourceInfo, dataset: &Dataset) -> Vec<String> {
    let q = |table: &str| format!("{}.{}", quote_ident(schema), quote_ident(table));
    let latest = format!(
        "(SELECT r.run_id FROM {runs} r WHERE r.job = {job_literal} AND r.status = 'succeeded' \
         AND r.primary_run_id IS NULL ORDER BY r.finished_at DESC LIMIT 1)",
        runs = q("runs"),
        job_literal = quote_literal(job)
    );
    let view = q(job);
    let blocks_view = q(&format!("{job}_blocks"));
    vec![
        format!(
            "CREATE OR REPLACE VIEW {view} AS
             SELECT e.unit_key AS fid, e.unit_id, e.run_id, e.observed, e.predicted, e.residual, e.abs_error, e.rmse,
                    e.repetitions, {geometry} AS geom
             FROM {unit_errors} e JOIN {source} s ON s.{id} = e.unit_id
             WHERE e.run_id = {latest};
             COMMENT ON VIEW {view} IS {comment};",
            geometry = view_geometry(info, dataset),
            unit_errors = q("unit_errors"),
            source = info.qualified_table,
            id = quote_ident(&info.id_column),
            comment = quote_literal(&format!(
                "geofold: per-unit held-out errors of the latest successful run of job {job}; key: fid; residual = observed - predicted"
            )),
        ),
        format!(
            "CREATE OR REPLACE VIEW {blocks_view} AS
             SELECT b.block_key, b.run_id, b.block_col, b.block_row, b.fold, b.n_units, b.geom
             FROM {blocks} b WHERE b.repetition = 1 AND b.run_id = {latest};
             COMMENT ON VIEW {blocks_view} IS {comment};",
            blocks = q("blocks"),
            comment = quote_literal(&format!(
                "geofold: blocks (repetition 1) of the latest successful run of job {job}; key: block_key"
            )),
        ),
    ]
}
