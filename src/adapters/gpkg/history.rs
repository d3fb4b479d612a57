//! [`RunHistory`] of a GeoPackage results file: fold scores and unit errors
//! of a run, and removing runs in one transaction.

use rusqlite::{params, Connection};
use uuid::Uuid;

use super::store::GpkgStore;
use super::{schema, sqlite_error};
use crate::adapters::history::{tables_by_run, Deleted, FoldScore, RunHistory, UnitError};
use crate::adapters::sql::quote_ident;
use crate::error::Error;

impl GpkgStore {
    fn open_connection(&self) -> Result<&Connection, Error> {
        self.connection()
            .ok_or_else(|| Error::Internal(format!("{} is not open", self.path().display())))
    }
}

/// Bytes of the pages on the file's free list.
fn free_bytes(conn: &Connection) -> rusqlite::Result<i64> {
    let pages: i64 = conn.query_row("PRAGMA freelist_count", [], |row| row.get(0))?;
    let size: i64 = conn.query_row("PRAGMA page_size", [], |row| row.get(0))?;
    Ok(pages * size)
}

impl RunHistory for GpkgStore {
    fn initialised(&mut self) -> Result<bool, Error> {
        match self.connection() {
            None => Ok(false),
            Some(conn) => schema::has_table(conn, "main", "runs")
                .map_err(|e| sqlite_error(self.path(), "looking for the results tables", &e)),
        }
    }

    fn fold_scores(&mut self, run_id: Uuid) -> Result<Vec<FoldScore>, Error> {
        let error = |e: rusqlite::Error| sqlite_error(self.path(), "reading the fold scores", &e);
        let conn = self.open_connection()?;
        let mut statement = conn
            .prepare(
                "SELECT v.repetition, v.fold, f.n_test, v.score, v.value
                 FROM fold_score_values v JOIN folds f
                   ON f.run_id = v.run_id AND f.repetition = v.repetition AND f.fold = v.fold
                 WHERE v.run_id = ?1 ORDER BY 1, 2, 4",
            )
            .map_err(error)?;
        let rows = statement
            .query_map([run_id.to_string()], |row| {
                Ok(FoldScore {
                    repetition: row.get(0)?,
                    fold: row.get(1)?,
                    n_test: row.get(2)?,
                    score: row.get(3)?,
                    value: row.get(4)?,
                })
            })
            .map_err(error)?;
        rows.collect::<Result<_, _>>().map_err(error)
    }

    fn unit_errors(&mut self, run_id: Uuid) -> Result<Vec<UnitError>, Error> {
        let error =
            |e: rusqlite::Error| sqlite_error(self.path(), "reading the per-unit errors", &e);
        let conn = self.open_connection()?;
        let mut statement = conn
            .prepare(
                "SELECT unit_id, avg(abs(observed - predicted)) FROM held_out WHERE run_id = ?1
                 GROUP BY unit_id ORDER BY unit_id",
            )
            .map_err(error)?;
        let rows = statement
            .query_map([run_id.to_string()], |row| {
                Ok(UnitError {
                    unit_id: row.get(0)?,
                    mean_abs_error: row.get(1)?,
                })
            })
            .map_err(error)?;
        rows.collect::<Result<_, _>>().map_err(error)
    }

    fn delete_runs(&mut self, run_ids: &[Uuid], commit: bool) -> Result<Deleted, Error> {
        let path = self.path().to_path_buf();
        let error = |e: rusqlite::Error| sqlite_error(&path, "removing runs", &e);
        let conn = self.open_connection()?;
        conn.execute_batch("BEGIN IMMEDIATE").map_err(error)?;
        let outcome = (|| {
            let before = free_bytes(conn)?;
            let mut ids = Vec::new();
            {
                let mut check = conn.prepare(
                    "SELECT 1 FROM runs WHERE run_id = ?1 AND NOT pinned AND status <> 'running'",
                )?;
                for id in run_ids {
                    if check.exists([id.to_string()])? {
                        ids.push(*id);
                    }
                }
            }
            let mut rows = Vec::new();
            for table in tables_by_run() {
                let mut delete = conn.prepare(&format!(
                    "DELETE FROM {} WHERE {} = ?1",
                    quote_ident(table.name),
                    table.owner_column().unwrap_or("run_id")
                ))?;
                let mut removed = 0u64;
                for id in &ids {
                    removed += delete.execute(params![id.to_string()])? as u64;
                }
                rows.push((table.name.to_string(), removed));
            }
            let after = free_bytes(conn)?;
            Ok::<_, rusqlite::Error>((ids, rows, after - before))
        })();
        let end = if commit && outcome.is_ok() {
            "COMMIT"
        } else {
            "ROLLBACK"
        };
        let ended = conn.execute_batch(end);
        let (ids, rows, bytes) = outcome.map_err(error)?;
        ended.map_err(error)?;
        Ok(Deleted {
            run_ids: ids,
            rows,
            bytes: u64::try_from(bytes).unwrap_or(0),
            bytes_meaning: "pages of the file put on its free list (PRAGMA freelist_count × page_size); \
                            later runs reuse them; the file shrinks only with VACUUM (sqlite3 FILE VACUUM)",
            committed: commit,
        })
    }
}
