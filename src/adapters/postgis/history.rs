//! [`RunHistory`] of a PostGIS results schema: fold scores and unit errors
//! of a run, and removing runs in one transaction.

use uuid::Uuid;

use super::store::PostgisStore;
use super::{database_error, quote_ident};
use crate::adapters::history::{tables_by_run, Deleted, FoldScore, RunHistory, UnitError};
use crate::error::Error;

impl PostgisStore {
    fn table(&self, name: &str) -> String {
        format!("{}.{}", quote_ident(self.schema()), quote_ident(name))
    }

    /// The rows of a query about one run, each turned into a value.
    fn rows_of_run<T>(
        &self,
        action: &str,
        sql: &str,
        run_id: Uuid,
        value: impl Fn(&tokio_postgres::Row) -> Result<T, tokio_postgres::Error>,
    ) -> Result<Vec<T>, Error> {
        let session = self.session();
        let rows = session
            .runtime
            .block_on(session.client.query(sql, &[&run_id]))
            .map_err(|e| database_error(action, &e))?;
        rows.iter()
            .map(value)
            .collect::<Result<_, _>>()
            .map_err(|e| database_error(action, &e))
    }
}

impl RunHistory for PostgisStore {
    fn initialised(&mut self) -> Result<bool, Error> {
        let session = self.session();
        let runs = self.table("runs");
        let row = session
            .runtime
            .block_on(
                session
                    .client
                    .query_one("SELECT to_regclass($1) IS NOT NULL", &[&runs]),
            )
            .map_err(|e| database_error("looking for the results tables", &e))?;
        row.try_get(0)
            .map_err(|e| database_error("looking for the results tables", &e))
    }

    fn fold_scores(&mut self, run_id: Uuid) -> Result<Vec<FoldScore>, Error> {
        let sql = format!(
            "SELECT v.repetition::int8, v.fold::int8, f.n_test::int8, v.score, v.value
             FROM {} v JOIN {} f USING (run_id, repetition, fold)
             WHERE v.run_id = $1 ORDER BY 1, 2, 4",
            self.table("fold_score_values"),
            self.table("folds")
        );
        self.rows_of_run("reading the fold scores", &sql, run_id, |row| {
            Ok(FoldScore {
                repetition: row.try_get(0)?,
                fold: row.try_get(1)?,
                n_test: row.try_get(2)?,
                score: row.try_get(3)?,
                value: row.try_get(4)?,
            })
        })
    }

    fn unit_errors(&mut self, run_id: Uuid) -> Result<Vec<UnitError>, Error> {
        let sql = format!(
            "SELECT unit_id, avg(abs(observed - predicted)) FROM {} WHERE run_id = $1
             GROUP BY unit_id ORDER BY unit_id",
            self.table("held_out")
        );
        self.rows_of_run("reading the per-unit errors", &sql, run_id, |row| {
            Ok(UnitError {
                unit_id: row.try_get(0)?,
                mean_abs_error: row.try_get(1)?,
            })
        })
    }

    fn delete_runs(&mut self, run_ids: &[Uuid], commit: bool) -> Result<Deleted, Error> {
        let runs = self.table("runs");
        let tables: Vec<(String, String, &str)> = tables_by_run()
            .iter()
            .map(|t| {
                (
                    t.name.to_string(),
                    self.table(t.name),
                    t.owner_column().unwrap_or("run_id"),
                )
            })
            .collect();
        let action = format!("removing runs from schema {}", self.schema());
        let session = self.session();
        let wanted = run_ids.to_vec();
        session.runtime.block_on(async {
            let error = |e: tokio_postgres::Error| database_error(&action, &e);
            let client = &session.client;
            client.batch_execute("BEGIN").await.map_err(error)?;
            let outcome = async {
                // Lock the rows, and drop any run pinned or started meanwhile.
                let ids: Vec<Uuid> = client
                    .query(
                        &format!(
                            "SELECT run_id FROM {runs} WHERE run_id = ANY($1) AND NOT pinned \
                             AND status <> 'running' ORDER BY started_at FOR UPDATE"
                        ),
                        &[&wanted],
                    )
                    .await?
                    .iter()
                    .map(|row| row.try_get(0))
                    .collect::<Result<_, _>>()?;
                let mut rows = Vec::new();
                let mut bytes: i64 = 0;
                for (name, table, owner) in &tables {
                    let size: i64 = client
                        .query_one(
                            &format!(
                                "SELECT coalesce(sum(pg_column_size(t.*)), 0)::int8 FROM {table} t \
                                 WHERE {owner} = ANY($1)"
                            ),
                            &[&ids],
                        )
                        .await?
                        .try_get(0)?;
                    bytes += size;
                    let removed = client
                        .execute(&format!("DELETE FROM {table} WHERE {owner} = ANY($1)"), &[&ids])
                        .await?;
                    rows.push((name.clone(), removed));
                }
                Ok::<_, tokio_postgres::Error>((ids, rows, bytes))
            }
            .await;
            let end = if commit && outcome.is_ok() { "COMMIT" } else { "ROLLBACK" };
            let ended = client.batch_execute(end).await;
            let (ids, rows, bytes) = outcome.map_err(error)?;
            ended.map_err(error)?;
            Ok(Deleted {
                run_ids: ids,
                rows,
                bytes: u64::try_from(bytes).unwrap_or(0),
                bytes_meaning: "the size of the removed rows (pg_column_size); the server reuses the space \
                                after VACUUM (autovacuum does it), and returns it to the file system only \
                                with VACUUM FULL",
                committed: commit,
            })
        })
    }
}
