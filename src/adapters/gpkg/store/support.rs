//! Opening an existing results file, its SRS rows, triggers and job layers, and recording runs.

use super::*;

/// Opens an existing GeoPackage to write results into.
pub(super) fn open_existing(path: &Path, lock_timeout: Duration) -> Result<Connection, Error> {
    let conn = open_file(path, true)?;
    conn.busy_timeout(lock_timeout)
        .map_err(|e| sqlite_error(path, "opening", &e))?;
    check_geopackage(&conn, path).map_err(|error| match error {
        Error::File {
            path,
            problem,
            kind: FileProblem::BadContent,
        } => Error::File {
            path,
            problem: format!("{problem}; refusing to write results into it"),
            kind: FileProblem::BadContent,
        },
        other => other,
    })?;
    Ok(conn)
}

/// The SRS row of the source layer, read from the source file.
pub(super) fn source_srs(info: &SourceInfo) -> Result<Srs, Error> {
    let path = info
        .file
        .clone()
        .ok_or_else(|| Error::Internal(format!("GeoPackage source {} has no file", info.table)))?;
    let conn = open_file(&path, false)?;
    srs_row(&conn, &path, i64::from(info.srid))?.ok_or_else(|| {
        file_error(
            &path,
            format!(
                "layer {}: unknown SRS id {}",
                info.qualified_table, info.srid
            ),
            FileProblem::BadContent,
        )
    })
}

/// True when both paths name the same file.
pub(super) fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}

/// An SQLite `file:` URI opening `path` read-only.
pub(super) fn read_only_uri(path: &Path) -> Result<String, Error> {
    let absolute = path.canonicalize().map_err(|e| {
        file_error(
            path,
            format!("cannot resolve the path: {e}"),
            FileProblem::Missing,
        )
    })?;
    let mut uri = String::from("file:");
    for c in absolute.to_string_lossy().chars() {
        match c {
            '%' => uri.push_str("%25"),
            '?' => uri.push_str("%3f"),
            '#' => uri.push_str("%23"),
            other => uri.push(other),
        }
    }
    uri.push_str("?mode=ro");
    Ok(uri)
}

/// Inserts the SRS row unless the file has one under that id, and refuses an
/// existing row that names another CRS.
pub(super) fn ensure_srs(conn: &Connection, path: &Path, srs: &Srs) -> Result<(), Error> {
    if let Some(existing) = srs_row(conn, path, i64::from(srs.srs_id))? {
        let same = existing
            .organization
            .eq_ignore_ascii_case(&srs.organization)
            && existing.organization_id == srs.organization_id;
        if !same {
            return Err(Error::Store {
                store: path.display().to_string(),
                problem: format!(
                    "its SRS id {} is {}:{}, but the results need {}:{} under that id",
                    srs.srs_id,
                    existing.organization,
                    existing.organization_id,
                    srs.organization,
                    srs.organization_id
                ),
            });
        }
        return Ok(());
    }
    schema::ensure_srs(conn, srs).map_err(|e| sqlite_error(path, "adding the SRS row", &e))
}

/// The trigger set the file's `user_version` needs.
pub(super) fn trigger_set(conn: &Connection, path: &Path) -> Result<TriggerSet, Error> {
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |row| row.get(0))
        .map_err(|e| sqlite_error(path, "reading user_version", &e))?;
    Ok(TriggerSet::for_user_version(version))
}

/// Refuses a job whose layers would replace tables geofold did not make for
/// it (`source_layer`: the source layer when it is in this file).
pub(super) fn check_job_layers(
    conn: &Connection,
    path: &Path,
    job: &str,
    source_layer: Option<&str>,
) -> Result<(), Error> {
    let error = |e: rusqlite::Error| sqlite_error(path, "checking the job's layers", &e);
    for (name, description) in job_descriptions(job) {
        if !schema::has_table(conn, "main", &name).map_err(error)? {
            continue;
        }
        let found: Option<String> = conn
            .query_row(
                "SELECT description FROM gpkg_contents WHERE table_name = ?1",
                [&name],
                |row| row.get::<_, Option<String>>(0),
            )
            .optional()
            .map_err(error)?
            .flatten();
        // Ownership is the description up to its first ";" (earlier versions
        // said more after it).
        let head = description.split(';').next().unwrap_or_default();
        let ours = found
            .as_deref()
            .is_some_and(|found| found.split(';').next() == Some(head));
        if source_layer == Some(name.as_str()) || !ours {
            let what = if source_layer == Some(name.as_str()) {
                "the source layer"
            } else {
                "a table geofold did not make for this job"
            };
            return Err(Error::CannotCreate {
                what: format!("layer {name} in {}", path.display()),
                problem: format!("job {job} would replace {what}; name the job with --job"),
            });
        }
    }
    Ok(())
}

pub(super) fn insert_runs(
    conn: &Connection,
    info: &SourceInfo,
    records: &[RunRecord],
) -> rusqlite::Result<()> {
    let mut statement = conn.prepare(
        "INSERT INTO runs (run_id, job, primary_run_id, status, started_at, source_store, source_table,
            id_column, geometry_column, target_column, feature_columns, scheme, model, family, parameters, seed,
            repeats, folds, source_srid, distance_srid, tool_version, session, pinned)
         VALUES (?1, ?2, ?3, 'running', strftime('%Y-%m-%dT%H:%M:%fZ', ?4, 'unixepoch'), ?5, ?6, ?7, ?8,
            ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18, ?19, ?20, ?21, 0)",
    )?;
    let features = serde_json::Value::from(info.feature_columns.clone()).to_string();
    for record in records {
        statement.execute(params![
            record.run_id.to_string(),
            record.job,
            record.primary_run_id.map(|id| id.to_string()),
            record.started_at_micros as f64 / 1e6,
            info.store,
            info.table,
            info.id_column,
            info.geom_column,
            info.target_column,
            features,
            record.scheme,
            record.model,
            record.family,
            record.parameters.to_string(),
            record.seed as i64,
            record.repeats,
            record.folds,
            info.source_srid,
            info.srid,
            record.tool_version,
            record.session,
        ])?;
    }
    Ok(())
}
