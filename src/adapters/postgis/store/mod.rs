//! A PostGIS results schema as a [`ResultStore`].
//!
//! - **One run per job.** [`lock_job`](ResultStore::lock_job) takes a session
//!   advisory lock keyed on the schema and job (FNV-1a, [`lock_key`]); the
//!   server frees it when the session ends, however it ends.
//! - **No run left `running`.** A run's row says `running` while its session
//!   holds its job's lock. [`prepare`](ResultStore::prepare) marks failed every
//!   `running` run whose job lock nobody holds: its process or session is gone
//!   (killed, terminated, timed out).
//! - **All or nothing.** [`commit`](ResultStore::commit) loads every table
//!   with binary COPY, marks the runs succeeded and points the job's views at
//!   the primary run inside one transaction.

use std::pin::pin;
use std::time::{Duration, Instant};

use futures_util::SinkExt;
use tokio_postgres::Transaction;
use uuid::Uuid;

use super::copy::CopyEncoder;
use super::layers::job_views;
use super::migrate::{lock_key, prepare_schema};
use super::{database_error, quote_ident, Session};
use crate::adapters::{
    add_count, Layer, PredictionRow, ResultStore, SourceInfo, StoreReport, StoredInspection,
    StoredRun,
};
use crate::core::units::{Dataset, IdKind};
use crate::error::Error;
use crate::results::rows::{run_rows, FinishedRun, RowSource, RunRecord, Value};
use crate::results::{TableDef, HELD_OUT, JOBS, REGIONS_SUFFIX, RUNS};

mod writing;
use writing::*;

/// Bytes per COPY message sent to the server.
const CHUNK: usize = 1 << 20;

/// A PostGIS results schema.
pub struct PostgisStore {
    session: Session,
    schema: String,
    /// The connection string, to reconnect when marking a run failed after
    /// the session was lost.
    db: Option<String>,
    locked: Option<i64>,
}

impl PostgisStore {
    /// A store in `schema` (created on first use) reached through `session`.
    pub fn new(session: Session, schema: &str, db: Option<&str>) -> PostgisStore {
        PostgisStore {
            session,
            schema: schema.to_string(),
            db: db.map(str::to_string),
            locked: None,
        }
    }

    fn qualified(&self, table: &str) -> String {
        format!("{}.{}", quote_ident(&self.schema), quote_ident(table))
    }

    /// The session, for the store's reads in [`super::reads`].
    pub(crate) fn session(&self) -> &Session {
        &self.session
    }

    /// The results schema (unquoted).
    pub fn schema(&self) -> &str {
        &self.schema
    }

    fn job_key(&self, job: &str) -> i64 {
        lock_key(&format!("geofold job {} {job}", self.schema))
    }

    /// Who holds the advisory lock `key`, for the busy message.
    fn holder(&self, key: i64) -> String {
        let sql = "SELECT a.pid, coalesce(a.application_name, ''), coalesce(a.client_addr::text, 'local'), \
                   to_char(a.backend_start AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS') \
                   FROM pg_locks l JOIN pg_stat_activity a ON a.pid = l.pid \
                   WHERE l.locktype = 'advisory' AND l.granted \
                   AND l.classid = (($1::bigint >> 32) & 4294967295)::oid AND l.objid = ($1::bigint & 4294967295)::oid AND l.objsubid = 1 \
                   LIMIT 1";
        match self
            .session
            .runtime
            .block_on(self.session.client.query_opt(sql, &[&key]))
        {
            Ok(Some(row)) => {
                let pid: i32 = row.try_get(0).unwrap_or(0);
                let app: String = row.try_get(1).unwrap_or_default();
                let addr: String = row.try_get(2).unwrap_or_default();
                let since: String = row.try_get(3).unwrap_or_default();
                format!("held by server process {pid} ({app}, from {addr}, connected since {since} UTC)")
            }
            _ => "held by another session".to_string(),
        }
    }

    fn try_lock(&self, key: i64) -> Result<bool, Error> {
        self.session
            .runtime
            .block_on(
                self.session
                    .client
                    .query_one("SELECT pg_try_advisory_lock($1)", &[&key]),
            )
            .and_then(|row| row.try_get(0))
            .map_err(|e| database_error("taking the job's lock", &e))
    }

    fn unlock(&self, key: i64) -> Result<(), Error> {
        self.session
            .runtime
            .block_on(
                self.session
                    .client
                    .execute("SELECT pg_advisory_unlock($1)", &[&key]),
            )
            .map(|_| ())
            .map_err(|e| database_error("releasing a job's lock", &e))
    }

    /// Marks failed the `running` runs whose job lock nobody holds.
    fn sweep_stale_runs(&mut self) -> Result<(), Error> {
        let runs = self.qualified("runs");
        let action = "finding runs whose process is gone";
        let jobs: Vec<String> = self
            .session
            .runtime
            .block_on(self.session.client.query(
                &format!("SELECT DISTINCT job FROM {runs} WHERE status = 'running'"),
                &[],
            ))
            .map_err(|e| database_error(action, &e))?
            .iter()
            .filter_map(|row| row.try_get(0).ok())
            .collect();
        for job in jobs {
            let key = self.job_key(&job);
            let ours = self.locked == Some(key);
            if !ours && !self.try_lock(key)? {
                continue;
            }
            let marked = self
                .session
                .runtime
                .block_on(self.session.client.execute(
                    &format!(
                        "UPDATE {runs} SET status = 'failed', finished_at = now(), \
                         error_message = 'the run ended without finishing: the process or database session running it (' \
                         || coalesce(session, 'unknown') || ') is gone' \
                         WHERE job = $1 AND status = 'running'"
                    ),
                    &[&job],
                ))
                .map_err(|e| database_error(action, &e));
            if !ours {
                self.unlock(key)?;
            }
            let marked = marked?;
            if marked > 0 {
                tracing::warn!(
                    job,
                    runs = marked,
                    "marked runs failed whose process is gone"
                );
            }
        }
        Ok(())
    }
}

impl ResultStore for PostgisStore {
    fn location(&self) -> String {
        format!("schema {} in {}", self.schema, self.session.description)
    }

    fn lock_job(&mut self, job: &str, wait: Duration) -> Result<(), Error> {
        let key = self.job_key(job);
        let deadline = Instant::now() + wait;
        loop {
            if self.try_lock(key)? {
                self.locked = Some(key);
                return Ok(());
            }
            if Instant::now() >= deadline {
                return Err(Error::Busy {
                    what: format!(
                        "job {job} in schema {} is running in another process ({}); nothing was done; \
                         try again later or pass --wait SECONDS",
                        self.schema,
                        self.holder(key)
                    ),
                });
            }
            std::thread::sleep(Duration::from_millis(250).min(wait));
        }
    }

    fn prepare(&mut self, _source: &SourceInfo) -> Result<(), Error> {
        prepare_schema(&mut self.session, &self.schema)?;
        self.sweep_stale_runs()
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
                                id_column, geometry_column, target_column, feature_columns, scheme, model, family,
                                parameters, seed, repeats, folds, source_srid, distance_srid, tool_version, session, pinned)
                             VALUES ($1, $2, $3, 'running', to_timestamp($4), $5, $6, $7, $8, $9, $10, $11, $12, $13,
                                $14, $15, $16, $17, $18, $19, $20, $21, false)"
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
                            &record.model,
                            &record.family,
                            &record.parameters,
                            &(record.seed as i64),
                            &(record.repeats as i32),
                            &(record.folds as i32),
                            &info.source_srid,
                            &info.srid,
                            &record.tool_version,
                            &record.session,
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
        data: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error> {
        let schema = self.schema.clone();
        let session = &mut self.session;
        let runtime = &session.runtime;
        let client = &mut session.client;
        let (rows_written, layers) = runtime.block_on(async {
            let action = format!("writing results to schema {schema}");
            let tx = client
                .transaction()
                .await
                .map_err(|e| database_error(&action, &e))?;
            let mut counts: Vec<(String, u64)> = Vec::new();
            for run in runs {
                if run.stage.replaces_held_out() {
                    tx.execute(
                        &format!(
                            "DELETE FROM {}.{} WHERE run_id = $1",
                            quote_ident(&schema),
                            quote_ident(HELD_OUT.name)
                        ),
                        &[&run.record.run_id],
                    )
                    .await
                    .map_err(|e| database_error("replacing the run's fold assignments", &e))?;
                }
                for rows in run_rows(data, run, info.srid) {
                    if rows.is_empty() {
                        continue;
                    }
                    let clock = std::time::Instant::now();
                    let written = copy_rows(&tx, &schema, rows.as_ref(), info.srid).await?;
                    tracing::debug!(
                        table = rows.table().name,
                        rows = written,
                        elapsed_ms = clock.elapsed().as_millis() as u64,
                        "loaded"
                    );
                    add_count(&mut counts, rows.table().name, written);
                }
                mark_succeeded(&tx, &schema, run, data).await?;
            }
            // Summarise the BRIN ranges the COPYs just filled, so queries by run
            // skip them at once rather than after the next VACUUM.
            for table in ["held_out", "unit_summaries", "fold_exclusions"] {
                let index = format!(
                    "{}.{}",
                    quote_ident(&schema),
                    quote_ident(&format!("{table}_run_brin"))
                );
                tx.execute(
                    "SELECT brin_summarize_new_values($1::text::regclass)",
                    &[&index],
                )
                .await
                .map_err(|e| database_error("summarising the run indexes", &e))?;
            }
            let mut layers = Vec::new();
            if let Some(primary) = runs
                .iter()
                .find(|run| run.record.primary_run_id.is_none() && run.stage.shows_on_maps())
            {
                let regions = primary
                    .outcome
                    .repetitions
                    .first()
                    .is_some_and(|r| !r.folds.regions.is_empty());
                layers =
                    point_job_views(&tx, &schema, &primary.record.job, info, data, regions).await?;
            }
            tx.commit().await.map_err(|e| database_error(&action, &e))?;
            Ok::<_, Error>((counts, layers))
        })?;
        Ok(StoreReport {
            store: "postgis",
            location: format!("{} schema {}", self.session.description, self.schema),
            layers,
            rows_written,
        })
    }

    fn fail(&mut self, records: &[RunRecord], message: &str) {
        let runs = self.qualified("runs");
        let sql = format!(
            "UPDATE {runs} SET status = 'failed', finished_at = now(), error_message = $2 \
             WHERE run_id = $1 AND status = 'running'"
        );
        let mark = |session: &Session| -> Result<(), tokio_postgres::Error> {
            session.runtime.block_on(async {
                for record in records {
                    session
                        .client
                        .execute(&sql, &[&record.run_id, &message])
                        .await?;
                }
                Ok(())
            })
        };
        if mark(&self.session).is_ok() {
            return;
        }
        // The session may be gone (a lost connection, a terminated backend):
        // try once on a new one; otherwise the next run marks these failed.
        match Session::connect(self.db.as_deref()).map(|session| mark(&session)) {
            Ok(Ok(())) => {}
            Ok(Err(error)) => {
                tracing::warn!(%error, "could not mark the run failed; the next run will")
            }
            Err(error) => {
                tracing::warn!(%error, "could not mark the run failed; the next run will")
            }
        }
    }

    fn write_rows(
        &mut self,
        rows: &[Box<dyn RowSource<'_> + '_>],
    ) -> Result<Vec<(String, u64)>, Error> {
        let schema = self.schema.clone();
        let runtime = &self.session.runtime;
        let client = &mut self.session.client;
        runtime.block_on(async {
            let action = format!("writing to results schema {schema}");
            let tx = client
                .transaction()
                .await
                .map_err(|e| database_error(&action, &e))?;
            let mut counts = Vec::new();
            for source in rows {
                if source.is_empty() {
                    continue;
                }
                let written = copy_rows(&tx, &schema, source.as_ref(), 0).await?;
                add_count(&mut counts, source.table().name, written);
            }
            tx.commit().await.map_err(|e| database_error(&action, &e))?;
            Ok(counts)
        })
    }

    fn runs(&mut self, job: Option<&str>, limit: usize) -> Result<Vec<StoredRun>, Error> {
        let runs = self.qualified("runs");
        let scores = self.qualified("run_score_values");
        let limit = i64::try_from(limit).unwrap_or(i64::MAX);
        let session = &self.session;
        let action = "reading the run history";
        session.runtime.block_on(async {
            let rows = session
                .client
                .query(
                    &format!(
                        "SELECT run_id, job, primary_run_id, status,
                            to_char(started_at AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"'),
                            to_char(finished_at AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"'),
                            scheme, model, units_used, input_fingerprint, parameters, error_message, pinned
                         FROM {runs} WHERE ($1::text IS NULL OR job = $1)
                         ORDER BY started_at DESC, run_id LIMIT $2"
                    ),
                    &[&job, &limit],
                )
                .await
                .map_err(|e| database_error(action, &e))?;
            let mut found = Vec::with_capacity(rows.len());
            for row in rows {
                let get = |e: tokio_postgres::Error| database_error(action, &e);
                found.push(StoredRun {
                    run_id: row.try_get(0).map_err(get)?,
                    job: row.try_get(1).map_err(get)?,
                    primary_run_id: row.try_get(2).map_err(get)?,
                    status: row.try_get(3).map_err(get)?,
                    started_at: row.try_get(4).map_err(get)?,
                    finished_at: row.try_get(5).map_err(get)?,
                    scheme: row.try_get(6).map_err(get)?,
                    model: row.try_get(7).map_err(get)?,
                    units_used: row.try_get(8).map_err(get)?,
                    input_fingerprint: row.try_get(9).map_err(get)?,
                    parameters: row.try_get(10).map_err(get)?,
                    error_message: row.try_get(11).map_err(get)?,
                    pinned: row.try_get(12).map_err(get)?,
                    scores: Vec::new(),
                });
            }
            let ids: Vec<Uuid> = found.iter().map(|run| run.run_id).collect();
            let rows = session
                .client
                .query(
                    &format!(
                        "SELECT run_id, score, statistic, value FROM {scores} WHERE run_id = ANY($1) \
                         ORDER BY run_id, score, statistic"
                    ),
                    &[&ids],
                )
                .await
                .map_err(|e| database_error(action, &e))?;
            for row in rows {
                let get = |e: tokio_postgres::Error| database_error(action, &e);
                let run_id: Uuid = row.try_get(0).map_err(get)?;
                if let Some(run) = found.iter_mut().find(|run| run.run_id == run_id) {
                    run.scores.push((
                        row.try_get(1).map_err(get)?,
                        row.try_get(2).map_err(get)?,
                        row.try_get(3).map_err(get)?,
                    ));
                }
            }
            Ok(found)
        })
    }

    fn last_inspection(&mut self, job: &str) -> Result<Option<StoredInspection>, Error> {
        let inspections = self.qualified("inspections");
        let session = &self.session;
        let action = "reading the job's last inspection";
        session.runtime.block_on(async {
            let row = session
                .client
                .query_opt(
                    &format!(
                        "SELECT inspection_id,
                            to_char(started_at AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"'),
                            fitted_range
                         FROM {inspections} WHERE job = $1 AND fitted_range IS NOT NULL
                         ORDER BY started_at DESC LIMIT 1"
                    ),
                    &[&job],
                )
                .await
                .map_err(|e| database_error(action, &e))?;
            row.map(|row| {
                Ok(StoredInspection {
                    inspection_id: row.try_get(0)?,
                    started_at: row.try_get(1)?,
                    fitted_range: row.try_get(2)?,
                })
            })
            .transpose()
            .map_err(|e: tokio_postgres::Error| database_error(action, &e))
        })
    }

    fn set_pinned(&mut self, run_id: Uuid, pinned: bool) -> Result<bool, Error> {
        let runs = self.qualified("runs");
        let sql = if pinned {
            format!(
                "UPDATE {runs} r SET pinned = (r.run_id = $1)
                 FROM {runs} p WHERE p.run_id = $1 AND p.status = 'succeeded' AND p.primary_run_id IS NULL
                 AND r.job = p.job"
            )
        } else {
            format!("UPDATE {runs} SET pinned = false WHERE run_id = $1 AND pinned")
        };
        let changed = self
            .session
            .runtime
            .block_on(self.session.client.execute(&sql, &[&run_id]))
            .map_err(|e| database_error("pinning or unpinning the baseline run", &e))?;
        Ok(changed > 0)
    }

    fn read_predictions(&mut self, table: &str) -> Result<Vec<PredictionRow>, Error> {
        self.read_prediction_table(table)
    }
}
