//! A GeoPackage file as a [`ResultStore`].
//!
//! - **A new file** is built under a temporary name (results tables, the
//!   `running` rows, then the result rows) and renamed into place only when
//!   the run succeeded; a failed run leaves no file behind.
//! - **An existing file** gets its `running` rows in a committed transaction
//!   and everything else in one `BEGIN IMMEDIATE` transaction, so a failure
//!   leaves it as it was, with the runs marked failed.
//! - **One run per job** (`JobLock`): a `running` row whose job lock nobody
//!   holds belongs to a process that is gone, and is marked failed by the
//!   next run into the file.
//! - The per-unit layer copies each unit's geometry blob from the source
//!   layer (the same file, or the source file attached read-only), so a
//!   GeoPackage store needs a GeoPackage source; PostGIS results go to
//!   PostGIS, and `geofold export` makes a GeoPackage of them.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use rusqlite::{params, Connection, OptionalExtension, TransactionBehavior};
use uuid::Uuid;

use super::container::{JobLock, NewFile};
use super::read::srs_row;
use super::rows::{insert_rows, job_descriptions, rewrite_job_layers, UnitRows};
use super::schema::{self, Srs, TriggerSet};
use super::{check_geopackage, file_error, open_file, sqlite_error, tables};
use crate::adapters::{
    add_count, PredictionRow, ResultStore, SourceInfo, StoreReport, StoredInspection, StoredRun,
};
use crate::core::units::Dataset;
use crate::error::{Error, FileProblem};
use crate::results::rows::{run_rows, FinishedRun, RowSource, RunRecord};

mod support;
mod writing;
use support::*;
use writing::*;

/// A GeoPackage results store.
pub struct GpkgStore {
    path: PathBuf,
    conn: Option<Connection>,
    new_file: Option<NewFile>,
    lock: Option<(JobLock, String)>,
    lock_timeout: Duration,
}

impl GpkgStore {
    /// A new file's first write committed: moved into place and reopened.
    fn finish_new_file(&mut self, path: &std::path::Path) -> Result<(), Error> {
        if let Some(file) = self.new_file.take() {
            let conn = self
                .conn
                .take()
                .ok_or_else(|| Error::Internal("the new file has no connection".into()))?;
            file.finish(conn)?;
            self.conn = Some(open_existing(path, self.lock_timeout)?);
        }
        Ok(())
    }

    /// A store in the GeoPackage at `path`; the file is created by the first
    /// successful run when it does not exist. Locks held by other programs
    /// are waited for up to `lock_timeout`.
    ///
    /// # Errors
    /// Exit 65 for an existing file that is not a GeoPackage; 73 when the
    /// directory does not exist; 75 when the file stays locked.
    pub fn open(path: &Path, lock_timeout: Duration) -> Result<GpkgStore, Error> {
        let conn = if path.exists() {
            Some(open_existing(path, lock_timeout)?)
        } else {
            let directory = super::container::directory_of(path);
            if !directory.is_dir() {
                return Err(file_error(
                    path,
                    format!(
                        "cannot create: directory {} does not exist",
                        directory.display()
                    ),
                    FileProblem::CannotCreate,
                ));
            }
            None
        };
        Ok(GpkgStore {
            path: path.to_path_buf(),
            conn,
            new_file: None,
            lock: None,
            lock_timeout,
        })
    }

    /// The open file, None before the first run created it (for [`super::history`]).
    pub(crate) fn connection(&self) -> Option<&Connection> {
        self.conn.as_ref()
    }

    /// The file.
    pub(crate) fn path(&self) -> &Path {
        &self.path
    }

    fn conn(&self) -> Result<&Connection, Error> {
        self.conn
            .as_ref()
            .ok_or_else(|| Error::Internal("the results file is not open".into()))
    }

    /// Marks failed the `running` runs whose job lock nobody holds.
    fn sweep_stale_runs(&self) -> Result<(), Error> {
        let (Some(conn), Some((lock, ours))) = (&self.conn, &self.lock) else {
            return Ok(());
        };
        let error =
            |e: rusqlite::Error| sqlite_error(&self.path, "finding runs whose process is gone", &e);
        let jobs: Vec<String> = {
            let mut statement = conn
                .prepare("SELECT DISTINCT job FROM runs WHERE status = 'running'")
                .map_err(error)?;
            let rows = statement.query_map([], |row| row.get(0)).map_err(error)?;
            rows.collect::<Result<_, _>>().map_err(error)?
        };
        for job in jobs {
            let own = &job == ours;
            if !own && !lock.try_lock(&job) {
                continue;
            }
            let marked = conn.execute(
                "UPDATE runs SET status = 'failed', finished_at = strftime('%Y-%m-%dT%H:%M:%fZ', 'now'),
                    error_message = 'the run ended without finishing: the process running it (' ||
                    coalesce(session, 'unknown') || ') is gone'
                 WHERE job = ?1 AND status = 'running'",
                [&job],
            );
            if !own {
                lock.unlock(&job);
            }
            let marked = marked.map_err(error)?;
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

impl ResultStore for GpkgStore {
    fn location(&self) -> String {
        self.path.display().to_string()
    }

    fn lock_job(&mut self, job: &str, wait: Duration) -> Result<(), Error> {
        let lock = JobLock::open(&self.path)?;
        let deadline = Instant::now() + wait;
        while !lock.try_lock(job) {
            if Instant::now() >= deadline {
                return Err(Error::Busy {
                    what: format!(
                        "job {job} in {} is running in another process; nothing was done; try again later \
                         or pass --wait SECONDS",
                        self.path.display()
                    ),
                });
            }
            std::thread::sleep(Duration::from_millis(250).min(wait));
        }
        self.lock = Some((lock, job.to_string()));
        Ok(())
    }

    fn prepare(&mut self, info: &SourceInfo) -> Result<(), Error> {
        if info.store != "gpkg" {
            return Err(Error::Usage(format!(
                "--results-gpkg needs a GeoPackage source (the per-unit layer copies its geometries); \
                 for {} write the results to PostGIS (--results-schema) and copy them with \
                 geofold export --job JOB --to {}",
                info.table,
                self.path.display()
            )));
        }
        let path = self.path.clone();
        match self.conn.as_mut() {
            Some(conn) => {
                // Before anything is written into the file: a job whose layers
                // would replace the source layer or a table geofold did not make
                // is refused with the file unchanged.
                if let Some((_, job)) = &self.lock {
                    let source = info.file.clone().unwrap_or_default();
                    let source_layer =
                        same_file(&path, &source).then_some(info.qualified_table.as_str());
                    check_job_layers(conn, &path, job, source_layer)?;
                }
                let triggers = trigger_set(conn, &path)?;
                let tx = conn
                    .transaction_with_behavior(TransactionBehavior::Immediate)
                    .map_err(|e| sqlite_error(&path, "preparing the results tables", &e))?;
                tables::prepare(&tx, &path, triggers)?;
                tx.commit()
                    .map_err(|e| sqlite_error(&path, "preparing the results tables", &e))?;
                self.sweep_stale_runs()
            }
            None => {
                let (file, conn) = NewFile::create(&path)?;
                let error = |e: rusqlite::Error| sqlite_error(&path, "creating the GeoPackage", &e);
                conn.busy_timeout(self.lock_timeout).map_err(error)?;
                schema::create_container(&conn).map_err(error)?;
                let triggers = trigger_set(&conn, &path)?;
                conn.execute_batch("BEGIN").map_err(error)?;
                tables::prepare(&conn, &path, triggers)?;
                conn.execute_batch("COMMIT").map_err(error)?;
                self.conn = Some(conn);
                self.new_file = Some(file);
                Ok(())
            }
        }
    }

    fn begin(&mut self, info: &SourceInfo, records: &[RunRecord]) -> Result<(), Error> {
        let srs = source_srs(info)?;
        let path = self.path.clone();
        let conn = self
            .conn
            .as_mut()
            .ok_or_else(|| Error::Internal("begin before prepare".into()))?;
        let action = |e: rusqlite::Error| sqlite_error(&path, "recording the run", &e);
        let tx = conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(action)?;
        ensure_srs(&tx, &path, &srs)?;
        insert_runs(&tx, info, records).map_err(action)?;
        tx.commit().map_err(action)
    }

    fn commit(
        &mut self,
        info: &SourceInfo,
        data: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error> {
        let path = self.path.clone();
        let source = info.file.clone().ok_or_else(|| {
            Error::Internal(format!("GeoPackage source {} has no file", info.table))
        })?;
        let conn = self
            .conn
            .as_mut()
            .ok_or_else(|| Error::Internal("commit before begin".into()))?;
        let schema_name = if same_file(&path, &source) {
            "main"
        } else {
            conn.execute("ATTACH DATABASE ?1 AS source", [read_only_uri(&source)?])
                .map_err(|e| sqlite_error(&source, "attaching the source file", &e))?;
            "source"
        };
        let written = write_runs(conn, &path, schema_name, info, data, runs);
        if schema_name == "source" {
            if let Err(error) = conn.execute_batch("DETACH DATABASE source") {
                tracing::warn!(%error, "could not detach the source file");
            }
        }
        let (rows_written, layers) = written?;
        self.finish_new_file(&path)?;
        Ok(StoreReport {
            store: "gpkg",
            location: path.display().to_string(),
            layers,
            rows_written,
        })
    }

    fn fail(&mut self, records: &[RunRecord], message: &str) {
        if self.new_file.take().is_some() {
            // Dropping the new file removes it: a failed first run leaves no file.
            self.conn = None;
            return;
        }
        let Some(conn) = &self.conn else {
            return;
        };
        for record in records {
            let result = conn.execute(
                "UPDATE runs SET status = 'failed', finished_at = strftime('%Y-%m-%dT%H:%M:%fZ', 'now'),
                    error_message = ?2 WHERE run_id = ?1 AND status = 'running'",
                params![record.run_id.to_string(), message],
            );
            if let Err(error) = result {
                tracing::warn!(%error, "could not mark the run failed; the next run will");
            }
        }
    }

    fn write_rows(
        &mut self,
        rows: &[Box<dyn RowSource<'_> + '_>],
    ) -> Result<Vec<(String, u64)>, Error> {
        let path = self.path.clone();
        let conn = self
            .conn
            .as_mut()
            .ok_or_else(|| Error::Internal("write before prepare".into()))?;
        let tx = conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(|e| sqlite_error(&path, "starting the transaction", &e))?;
        let mut counts = Vec::new();
        for source in rows {
            if source.is_empty() {
                continue;
            }
            insert_rows(&tx, &path, source.as_ref())?;
            add_count(&mut counts, source.table().name, source.len() as u64);
        }
        tx.commit()
            .map_err(|e| sqlite_error(&path, "committing", &e))?;
        self.finish_new_file(&path)?;
        Ok(counts)
    }

    fn runs(&mut self, job: Option<&str>, limit: usize) -> Result<Vec<StoredRun>, Error> {
        let path = self.path.clone();
        let conn = self.conn()?;
        let error = |e: rusqlite::Error| sqlite_error(&path, "reading the run history", &e);
        let limit = i64::try_from(limit).unwrap_or(i64::MAX);
        let mut statement = conn
            .prepare(
                "SELECT run_id, job, primary_run_id, status, started_at, finished_at, scheme, model, units_used,
                        input_fingerprint, parameters, error_message, pinned
                 FROM runs WHERE (?1 IS NULL OR job = ?1) ORDER BY started_at DESC, run_id LIMIT ?2",
            )
            .map_err(error)?;
        let parse = |text: String| Uuid::parse_str(&text).unwrap_or_default();
        let mut found: Vec<StoredRun> = statement
            .query_map(params![job, limit], |row| {
                let parameters: String = row.get(10)?;
                Ok(StoredRun {
                    run_id: parse(row.get(0)?),
                    job: row.get(1)?,
                    primary_run_id: row.get::<_, Option<String>>(2)?.map(parse),
                    status: row.get(3)?,
                    started_at: row.get(4)?,
                    finished_at: row.get(5)?,
                    scheme: row.get(6)?,
                    model: row.get(7)?,
                    units_used: row.get(8)?,
                    input_fingerprint: row.get(9)?,
                    parameters: serde_json::from_str(&parameters).unwrap_or_default(),
                    error_message: row.get(11)?,
                    pinned: row.get(12)?,
                    scores: Vec::new(),
                })
            })
            .map_err(error)?
            .collect::<Result<_, _>>()
            .map_err(error)?;
        let mut scores = conn
            .prepare("SELECT score, statistic, value FROM run_score_values WHERE run_id = ?1 ORDER BY score, statistic")
            .map_err(error)?;
        for run in &mut found {
            run.scores = scores
                .query_map([run.run_id.to_string()], |row| {
                    Ok((row.get(0)?, row.get(1)?, row.get(2)?))
                })
                .map_err(error)?
                .collect::<Result<_, _>>()
                .map_err(error)?;
        }
        Ok(found)
    }

    fn last_inspection(&mut self, job: &str) -> Result<Option<StoredInspection>, Error> {
        let path = self.path.clone();
        let conn = self.conn()?;
        conn.query_row(
            "SELECT inspection_id, started_at, fitted_range FROM inspections
             WHERE job = ?1 AND fitted_range IS NOT NULL ORDER BY started_at DESC LIMIT 1",
            params![job],
            |row| {
                let id: String = row.get(0)?;
                Ok(StoredInspection {
                    inspection_id: Uuid::parse_str(&id).unwrap_or_default(),
                    started_at: row.get(1)?,
                    fitted_range: row.get(2)?,
                })
            },
        )
        .optional()
        .map_err(|e| sqlite_error(&path, "reading the job's last inspection", &e))
    }

    fn set_pinned(&mut self, run_id: Uuid, pinned: bool) -> Result<bool, Error> {
        let path = self.path.clone();
        let sql = if pinned {
            "UPDATE runs SET pinned = (run_id = ?1)
             WHERE job = (SELECT job FROM runs WHERE run_id = ?1 AND status = 'succeeded' AND primary_run_id IS NULL)"
        } else {
            "UPDATE runs SET pinned = 0 WHERE run_id = ?1 AND pinned"
        };
        let changed = self
            .conn()?
            .execute(sql, [run_id.to_string()])
            .map_err(|e| sqlite_error(&path, "pinning or unpinning the baseline run", &e))?;
        Ok(changed > 0)
    }

    fn read_predictions(&mut self, table: &str) -> Result<Vec<PredictionRow>, Error> {
        super::scoring::read_predictions(self.conn()?, &self.path, table)
    }
}

/// Rows written per table, and the job's layers.
type Written = (Vec<(String, u64)>, Vec<crate::adapters::Layer>);
