//! Writing a run's rows: binary COPY of each table, marking the runs succeeded, and pointing the
//! job's views at the primary run.

use super::*;

/// Loads one table's rows with binary COPY.
pub(super) async fn copy_rows(
    tx: &Transaction<'_>,
    schema: &str,
    rows: &dyn RowSource<'_>,
    srid: i32,
) -> Result<u64, Error> {
    let table: &TableDef = rows.table();
    let name = format!("{}.{}", quote_ident(schema), quote_ident(table.name));
    let action = format!("loading {name}");
    let sink = tx
        .copy_in(&format!(
            "COPY {name} ({}) FROM STDIN (FORMAT binary)",
            table.column_list()
        ))
        .await
        .map_err(|e| database_error(&action, &e))?;
    let mut sink = pin!(sink);
    let mut encoder = CopyEncoder::new();
    let mut values: Vec<Value<'_>> = Vec::with_capacity(table.columns.len());
    for row in 0..rows.len() {
        rows.fill(row, &mut values);
        encoder.row(table.columns.len() as i16);
        for (column, value) in table.columns.iter().zip(&values) {
            encoder.value(column, value, srid);
        }
        if let Some(bytes) = encoder.take_if_larger(CHUNK) {
            sink.send(bytes)
                .await
                .map_err(|e| send_error(&action, &e))?;
        }
    }
    sink.send(encoder.finish())
        .await
        .map_err(|e| send_error(&action, &e))?;
    let written = sink
        .as_mut()
        .finish()
        .await
        .map_err(|e| database_error(&action, &e))?;
    if written != rows.len() as u64 {
        return Err(Error::Internal(format!(
            "{name}: wrote {written} rows, expected {}",
            rows.len()
        )));
    }
    Ok(written)
}

/// The error of a failed COPY send. When the server refuses the data while
/// rows are still being sent, tokio-postgres drops the server's message and
/// reports a closed channel; say what that means instead of "connection closed".
pub(super) fn send_error(action: &str, error: &tokio_postgres::Error) -> Error {
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

/// Marks a run succeeded (or assigned) with its input facts.
pub(super) async fn mark_succeeded(
    tx: &Transaction<'_>,
    schema: &str,
    run: &FinishedRun<'_>,
    data: &Dataset,
) -> Result<(), Error> {
    tx.execute(
        &format!(
            "UPDATE {}.{} SET status = $6, finished_at = clock_timestamp(), input_fingerprint = $2,
                units_read = $3, units_used = $4, units_skipped = $5 WHERE run_id = $1",
            quote_ident(schema),
            quote_ident(RUNS.name)
        ),
        &[
            &run.record.run_id,
            &run.record.input_fingerprint,
            &(data.rows_read as i64),
            &(data.len() as i64),
            &data.skipped.counts_json(),
            &run.stage.status(),
        ],
    )
    .await
    .map_err(|e| database_error("marking the run succeeded", &e))?;
    Ok(())
}

/// Makes the job's views show its latest run: creates them when missing and
/// replaces them only when their definition changed; refuses to replace a
/// table or view geofold did not make.
pub(super) async fn point_job_views(
    tx: &Transaction<'_>,
    schema: &str,
    job: &str,
    info: &SourceInfo,
    data: &Dataset,
    regions: bool,
) -> Result<Vec<Layer>, Error> {
    let views = job_views(schema, job, info, data, regions);
    let q = |name: &str| format!("{}.{}", quote_ident(schema), quote_ident(name));
    let jobs = q(JOBS.name);
    let action = format!("making the map views of job {job}");
    // A view follows its source table by identity, not by name: when the
    // table the job names was replaced (a new table swapped in under the
    // name), the view must be made again even if its SQL text is the same.
    let source: u32 = tx
        .query_one("SELECT $1::text::regclass::oid", &[&info.qualified_table])
        .await
        .and_then(|row| row.try_get(0))
        .map_err(|e| database_error(&action, &e))?;
    let definition = format!("{} {source}", views.definition);
    let recorded: Option<String> = tx
        .query_opt(
            &format!("SELECT layer_definition FROM {jobs} WHERE job = $1"),
            &[&job],
        )
        .await
        .map_err(|e| database_error(&action, &e))?
        .and_then(|row| row.try_get(0).ok());
    let names = [job.to_string(), format!("{job}{REGIONS_SUFFIX}")];
    let mut present = Vec::new();
    for name in &names {
        let exists = tx
            .query_opt(
                "SELECT 1 FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace \
                 WHERE n.nspname = $1 AND c.relname = $2",
                &[&schema, name],
            )
            .await
            .map_err(|e| database_error(&action, &e))?
            .is_some();
        if exists {
            present.push(name.clone());
        }
    }
    if recorded.is_none() {
        if let Some(name) = present.first() {
            return Err(Error::CannotCreate {
                what: format!("view {}", q(name)),
                problem: format!(
                    "a table or view of that name, which geofold did not make for job {job}, is in the way; \
                     rename it or choose another --job"
                ),
            });
        }
    }
    let wanted: Vec<&String> = views.views.iter().map(|(name, _)| name).collect();
    let unchanged = recorded.as_deref() == Some(definition.as_str())
        && wanted.iter().all(|name| present.contains(name));
    if !unchanged {
        for name in present.iter().rev() {
            tx.batch_execute(&format!("DROP VIEW {}", q(name)))
                .await
                .map_err(|e| database_error(&format!("replacing view {}", q(name)), &e))?;
        }
        for (name, sql) in &views.views {
            tx.batch_execute(sql)
                .await
                .map_err(|e| database_error(&format!("creating view {}", q(name)), &e))?;
        }
        tx.execute(
            &format!(
                "INSERT INTO {jobs} (job, source_table, id_type, geometry_type, srid, distance_srid, layer_definition)
                 VALUES ($1, $2, $3, $4, $5, $6, $7)
                 ON CONFLICT (job) DO UPDATE SET source_table = excluded.source_table, id_type = excluded.id_type,
                    geometry_type = excluded.geometry_type, srid = excluded.srid,
                    distance_srid = excluded.distance_srid, layer_definition = excluded.layer_definition"
            ),
            &[
                &job,
                &info.table,
                &(match info.id_kind {
                    IdKind::Integer => "bigint",
                    IdKind::Text => "text",
                }),
                &views.geometry_type,
                &info.source_srid,
                &info.srid,
                &definition,
            ],
        )
        .await
        .map_err(|e| database_error(&action, &e))?;
    }
    let mut layers = vec![Layer {
        name: format!("{schema}.{job}"),
        key: "fid".into(),
        shows: "per-unit errors of the latest successful run, with each unit's fold".into(),
    }];
    if regions {
        layers.push(Layer {
            name: format!("{schema}.{job}{REGIONS_SUFFIX}"),
            key: "region_id".into(),
            shows: "fold regions of that run, coloured by fold".into(),
        });
    }
    Ok(layers)
}
