//! Writing a run's rows into the file in one transaction and rewriting the job's layers.

use super::*;

/// Writes every run's rows, marks them succeeded and rewrites the job's
/// layers, in one transaction.
pub(super) fn write_runs(
    conn: &mut Connection,
    path: &Path,
    source_schema: &str,
    info: &SourceInfo,
    data: &Dataset,
    runs: &[FinishedRun<'_>],
) -> Result<Written, Error> {
    let triggers = trigger_set(conn, path)?;
    let tx = conn
        .transaction_with_behavior(TransactionBehavior::Immediate)
        .map_err(|e| sqlite_error(path, "starting the transaction", &e))?;
    let mut counts = Vec::new();
    let mut layers = Vec::new();
    let skipped = data.skipped.counts_json().to_string();
    for run in runs {
        if run.stage.replaces_held_out() {
            tx.execute(
                "DELETE FROM held_out WHERE run_id = ?1",
                [run.record.run_id.to_string()],
            )
            .map_err(|e| sqlite_error(path, "replacing the run's fold assignments", &e))?;
        }
        let mut unit_rows = None;
        for rows in run_rows(data, run, info.srid) {
            if rows.is_empty() {
                continue;
            }
            let clock = std::time::Instant::now();
            let range = insert_rows(&tx, path, rows.as_ref())?;
            let table = rows.table().name;
            tracing::debug!(
                table,
                rows = rows.len(),
                elapsed_ms = clock.elapsed().as_millis() as u64,
                "inserted"
            );
            if (table == "held_out" && run.outcome.repetitions.len() == 1)
                || table == "unit_summaries"
            {
                unit_rows = Some(UnitRows { table, range });
            }
            add_count(&mut counts, table, rows.len() as u64);
        }
        schema::refresh_extent(&tx, "fold_regions")
            .map_err(|e| sqlite_error(path, "updating the extent of fold_regions", &e))?;
        tx.execute(
            "UPDATE runs SET status = ?6, finished_at = strftime('%Y-%m-%dT%H:%M:%fZ', 'now'),
                input_fingerprint = ?2, units_read = ?3, units_used = ?4, units_skipped = ?5
             WHERE run_id = ?1",
            params![
                run.record.run_id.to_string(),
                run.record.input_fingerprint,
                data.rows_read as i64,
                data.len() as i64,
                skipped,
                run.stage.status()
            ],
        )
        .map_err(|e| sqlite_error(path, "marking the run succeeded", &e))?;
        if run.record.primary_run_id.is_none() && run.stage.shows_on_maps() {
            let units = unit_rows
                .ok_or_else(|| Error::Internal("the primary run wrote no per-unit rows".into()))?;
            let regions = run
                .outcome
                .repetitions
                .first()
                .map(|r| r.folds.regions.as_slice())
                .unwrap_or(&[]);
            let (made, written) = rewrite_job_layers(
                &tx,
                path,
                &run.record.job,
                info,
                source_schema,
                units,
                regions,
                triggers,
            )?;
            add_count(&mut counts, &run.record.job, written);
            layers = made;
        }
    }
    tx.commit()
        .map_err(|e| sqlite_error(path, "committing", &e))?;
    Ok((counts, layers))
}
