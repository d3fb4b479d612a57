//! Writing runs into a GeoPackage ([`GpkgStore`]), and the demo layer
//! ([`write_demo`]).
//!
//! `begin` records the runs as `running` in a committed transaction (for a
//! new file: builds the whole file under a temporary name, then renames it);
//! `commit` writes every result row, marks the runs succeeded and rewrites
//! the job's two feature layers in one `BEGIN IMMEDIATE` transaction, so a
//! failure leaves no result rows of the run; `fail` marks the runs failed.
//! The per-unit layer copies each unit's geometry blob from the source layer
//! (same file, or the source file attached read-only), so the geometry is the
//! source's own. A PostGIS source has no file to copy from: its results go to
//! PostGIS, and `geofold export` makes the GeoPackage.

use std::path::{Path, PathBuf};

use rusqlite::types::{ToSqlOutput, Value, ValueRef};
use rusqlite::{params, Connection, OptionalExtension, TransactionBehavior};

use super::read::srs_row;
use super::schema::{self, FeatureTable, Srs, TriggerSet};
use super::{
    blob, check_geopackage, directory_of, file_error, open_file, quote, sqlite_error, NewFile,
};
use crate::adapters::{
    add_count, check_store_settings, wkb, FinishedRun, ResultStore, RunRecord, SourceInfo,
    StoreReport,
};
use crate::core::folds::SchemeSpec;
use crate::core::geometry::cell_polygon;
use crate::core::units::{Dataset, IdKind, UnitId};
use crate::demo::{DemoUnit, DEMO_LAYER, DEMO_SRID, DEMO_SRS_WKT};
use crate::error::{exit, Error};

/// A GeoPackage results store.
pub struct GpkgStore {
    path: PathBuf,
    conn: Option<Connection>,
}

/// `store_settings.unit_id_type` for an id kind (the PostGIS type names, so
/// both stores say the same).
pub(crate) fn unit_id_type(kind: IdKind) -> &'static str {
    match kind {
        IdKind::Integer => "bigint",
        IdKind::Text => "text",
    }
}

impl GpkgStore {
    /// A store in the GeoPackage at `path`; the file is created by the first
    /// run when it does not exist.
    ///
    /// # Errors
    /// Exit 65 for an existing file that is not a GeoPackage or holds tables
    /// named like geofold's that geofold did not make; 73 when the directory
    /// does not exist; 75 when the file stays locked.
    pub fn open(path: &Path) -> Result<GpkgStore, Error> {
        let conn = if path.exists() {
            Some(open_existing(path)?)
        } else {
            directory_of(path)?;
            None
        };
        Ok(GpkgStore {
            path: path.to_path_buf(),
            conn,
        })
    }

    fn location(&self) -> String {
        self.path.display().to_string()
    }
}

/// Opens an existing GeoPackage to write results into.
fn open_existing(path: &Path) -> Result<Connection, Error> {
    let conn = open_file(path, true)?;
    check_geopackage(&conn, path).map_err(|error| match error {
        Error::File {
            path,
            problem,
            code,
        } if code == exit::DATA => Error::File {
            path,
            problem: format!("{problem}; refusing to write results into it"),
            code,
        },
        other => other,
    })?;
    Ok(conn)
}

/// A GeoPackage being written: an existing file, or a new one built under a
/// temporary name until [`Target::finish`].
pub(crate) struct Target {
    /// The connection to write through.
    pub conn: Connection,
    new_file: Option<NewFile>,
}

impl Target {
    /// Opens the file at `path`, or starts a new one with the required tables.
    ///
    /// # Errors
    /// As [`GpkgStore::open`]; SQLite errors.
    pub(crate) fn open(path: &Path) -> Result<Target, Error> {
        if path.exists() {
            return Ok(Target {
                conn: open_existing(path)?,
                new_file: None,
            });
        }
        let (file, conn) = NewFile::create(path)?;
        schema::create_container(&conn)
            .map_err(|e| sqlite_error(path, "creating the GeoPackage", &e))?;
        Ok(Target {
            conn,
            new_file: Some(file),
        })
    }

    /// True for a file this target is creating.
    pub(crate) fn is_new(&self) -> bool {
        self.new_file.is_some()
    }

    /// Moves a new file into place (after the caller committed); a no-op for an
    /// existing file.
    ///
    /// # Errors
    /// I/O errors.
    pub(crate) fn finish(self) -> Result<(), Error> {
        match self.new_file {
            Some(file) => file.finish(self.conn),
            None => Ok(()),
        }
    }
}

/// What the file's results tables were made for, if it has them.
///
/// # Errors
/// [`Error::Store`] for tables named like geofold's without geofold's
/// bookkeeping, a newer results version, or other settings than `unit_id_type`
/// and `block_srid`.
pub(crate) fn check_results(
    conn: &Connection,
    path: &Path,
    unit_id_type: &str,
    block_srid: i32,
) -> Result<bool, Error> {
    let store = path.display().to_string();
    let error = |e: rusqlite::Error| sqlite_error(path, "reading the results tables", &e);
    if !schema::has_table(conn, "main", "schema_version").map_err(error)? {
        for name in crate::adapters::RESERVED_NAMES {
            if schema::has_table(conn, "main", name).map_err(error)? {
                return Err(Error::Store {
                    store,
                    problem: format!(
                        "it has a table {name} that geofold did not make; write the results to another file"
                    ),
                });
            }
        }
        return Ok(false);
    }
    let version: i64 = conn
        .query_row(
            "SELECT coalesce(max(version), 0) FROM schema_version",
            [],
            |row| row.get(0),
        )
        .map_err(error)?;
    if version > schema::RESULTS_VERSION {
        return Err(Error::Store {
            store,
            problem: format!(
                "its results tables are version {version}, newer than this geofold knows ({}); upgrade geofold",
                schema::RESULTS_VERSION
            ),
        });
    }
    let mut statement = conn
        .prepare("SELECT key, value FROM store_settings")
        .map_err(error)?;
    let settings: Vec<(String, String)> = statement
        .query_map([], |row| Ok((row.get(0)?, row.get(1)?)))
        .map_err(error)?
        .collect::<Result<_, _>>()
        .map_err(error)?;
    check_store_settings(
        &store,
        &settings,
        unit_id_type,
        block_srid,
        "write the results to another file",
    )?;
    Ok(true)
}

/// The `gpkg_contents` descriptions that mark a job's layers as geofold's.
fn job_descriptions(job: &str) -> [(String, String); 2] {
    [
        (
            job.to_string(),
            format!(
                "geofold: per-unit held-out errors of the latest successful run of job {job}; key: fid; residual = observed - predicted"
            ),
        ),
        (
            format!("{job}_blocks"),
            format!(
                "geofold: blocks (repetition 1) of the latest successful run of job {job}; key: block_key"
            ),
        ),
    ]
}

/// Refuses a job whose layers would replace tables geofold did not make for
/// it (`source_layer`: the source layer when it is in this file).
///
/// # Errors
/// [`Error::Store`] naming the table.
pub(crate) fn check_job_layers(
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
        if source_layer == Some(name.as_str()) || found.as_deref() != Some(description.as_str()) {
            let what = if source_layer == Some(name.as_str()) {
                "the source layer"
            } else {
                "a table geofold did not make for this job"
            };
            return Err(Error::Store {
                store: path.display().to_string(),
                problem: format!("job {job} would replace {name}, {what}; name the job with --job"),
            });
        }
    }
    Ok(())
}

/// Inserts the SRS row unless the file has one under that id, and refuses an
/// existing row that names another CRS.
///
/// # Errors
/// [`Error::Store`] for a conflicting row; SQLite errors.
pub(crate) fn ensure_srs(conn: &Connection, path: &Path, srs: &Srs) -> Result<(), Error> {
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

/// The `user_version` of the open file, which decides the trigger set.
pub(crate) fn trigger_set(conn: &Connection, path: &Path) -> Result<TriggerSet, Error> {
    let version: i64 = conn
        .query_row("PRAGMA user_version", [], |row| row.get(0))
        .map_err(|e| sqlite_error(path, "reading user_version", &e))?;
    Ok(TriggerSet::for_user_version(version))
}

/// Creates the results tables when the file has none yet (in the caller's transaction).
pub(crate) fn ensure_results(
    conn: &Connection,
    path: &Path,
    unit_id_type: &str,
    block_srid: i32,
) -> Result<(), Error> {
    if check_results(conn, path, unit_id_type, block_srid)? {
        return Ok(());
    }
    let triggers = trigger_set(conn, path)?;
    let error = |e: rusqlite::Error| sqlite_error(path, "creating the results tables", &e);
    if !schema::has_table(conn, "main", "gpkg_extensions").map_err(error)? {
        schema::create_extensions(conn).map_err(error)?;
    }
    schema::create_results(conn, unit_id_type, block_srid, triggers).map_err(error)
}

/// The job's two feature layers, as geofold creates them.
pub(crate) struct JobLayers {
    /// `<job>`: per-unit errors with the unit geometry.
    pub units: FeatureTable,
    /// `<job>_blocks`.
    pub blocks: FeatureTable,
}

impl JobLayers {
    /// The layers of `job`; the unit geometry has `geometry_type`, `srs_id`, `z`, `m`.
    pub(crate) fn new(
        job: &str,
        unit_id_type: &str,
        geometry_type: &str,
        srs_id: i32,
        z_m: (i64, i64),
        block_srid: i32,
    ) -> JobLayers {
        let [(units_name, units_description), (blocks_name, blocks_description)] =
            job_descriptions(job);
        let id_type = if unit_id_type == "text" {
            "TEXT"
        } else {
            "INTEGER"
        };
        JobLayers {
            units: FeatureTable {
                name: units_name,
                key: "fid".into(),
                columns: format!(
                    "unit_id {id_type} NOT NULL, run_id TEXT NOT NULL, observed DOUBLE, predicted DOUBLE, \
                     residual DOUBLE, abs_error DOUBLE, rmse DOUBLE, repetitions INTEGER"
                ),
                geometry_type: geometry_type.to_string(),
                geometry_not_null: false,
                srs_id,
                z: z_m.0,
                m: z_m.1,
                description: units_description,
            },
            blocks: FeatureTable {
                name: blocks_name,
                key: "block_key".into(),
                columns: "run_id TEXT NOT NULL, block_col INTEGER, block_row INTEGER, fold INTEGER, n_units INTEGER"
                    .into(),
                geometry_type: "POLYGON".into(),
                geometry_not_null: false,
                srs_id: block_srid,
                z: 0,
                m: 0,
                description: blocks_description,
            },
        }
    }

    /// Rewrites both layers for `run_id`: `fill` inserts the per-unit rows
    /// (columns `fid, unit_id, run_id, observed, predicted, residual,
    /// abs_error, rmse, repetitions, geom`); the blocks come from `blocks`.
    /// Returns the per-unit rows written.
    pub(crate) fn rewrite(
        &self,
        conn: &Connection,
        path: &Path,
        run_id: &str,
        triggers: TriggerSet,
        fill: impl FnOnce(&Connection, &str) -> Result<(), Error>,
    ) -> Result<u64, Error> {
        let at = |what: &'static str| move |e: rusqlite::Error| sqlite_error(path, what, &e);
        for table in [&self.units, &self.blocks] {
            schema::drop_feature_table(conn, &table.name)
                .map_err(at("replacing the job layers"))?;
            schema::create_feature_table(conn, table).map_err(at("replacing the job layers"))?;
        }
        let clock = std::time::Instant::now();
        fill(conn, &format!("main.{}", quote(&self.units.name)))?;
        tracing::debug!(
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "filled the per-unit layer"
        );
        conn.execute(
            &format!(
                "INSERT INTO main.{} (block_key, run_id, block_col, block_row, fold, n_units, geom)
                 SELECT block_key, run_id, block_col, block_row, fold, n_units, geom FROM main.blocks
                 WHERE run_id = ?1 AND repetition = 1",
                quote(&self.blocks.name)
            ),
            [run_id],
        )
        .map_err(at("writing the job's blocks layer"))?;
        let clock = std::time::Instant::now();
        for table in [&self.units, &self.blocks] {
            schema::index_feature_table(conn, table, triggers)
                .map_err(at("indexing the job layers"))?;
        }
        tracing::debug!(
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "indexed the job layers"
        );
        conn.query_row(
            &format!("SELECT count(*) FROM main.{}", quote(&self.units.name)),
            [],
            |row| row.get::<_, i64>(0),
        )
        .map(|count| count as u64)
        .map_err(at("counting the per-unit layer"))
    }
}

/// True when `run_id` is the job's latest successful primary run in the file.
pub(crate) fn is_latest(conn: &Connection, job: &str, run_id: &str) -> rusqlite::Result<bool> {
    let latest: Option<String> = conn
        .query_row(
            "SELECT run_id FROM main.runs WHERE job = ?1 AND status = 'succeeded' AND primary_run_id IS NULL
             ORDER BY finished_at DESC, fid DESC LIMIT 1",
            [job],
            |row| row.get(0),
        )
        .optional()?;
    Ok(latest.as_deref() == Some(run_id))
}

/// Binds a unit id as INTEGER or TEXT.
pub(crate) fn id_value(id: &UnitId) -> ToSqlOutput<'_> {
    match id {
        UnitId::Int(value) => ToSqlOutput::Owned(Value::Integer(*value)),
        UnitId::Text(value) => ToSqlOutput::Borrowed(ValueRef::Text(value.as_bytes())),
    }
}

/// The source file of a GeoPackage source (its `table` is `FILE:LAYER`).
fn source_path(info: &SourceInfo) -> Result<PathBuf, Error> {
    info.table
        .strip_suffix(&format!(":{}", info.qualified_table))
        .map(PathBuf::from)
        .ok_or_else(|| Error::Internal(format!("GeoPackage source {} has no file", info.table)))
}

/// The SRS row of the source layer, read from the source file.
fn source_srs(info: &SourceInfo) -> Result<Srs, Error> {
    let path = source_path(info)?;
    let conn = open_file(&path, false)?;
    srs_row(&conn, &path, i64::from(info.srid))?.ok_or_else(|| {
        file_error(
            &path,
            format!(
                "layer {}: unknown SRS id {}",
                info.qualified_table, info.srid
            ),
            exit::DATA,
        )
    })
}

/// True when both paths name the same file.
fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}

/// An SQLite `file:` URI opening `path` read-only.
fn read_only_uri(path: &Path) -> Result<String, Error> {
    let absolute = path.canonicalize().map_err(|e| {
        file_error(
            path,
            format!("cannot resolve the path: {e}"),
            exit::NO_INPUT,
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

fn insert_runs(
    conn: &Connection,
    info: &SourceInfo,
    records: &[RunRecord],
) -> rusqlite::Result<()> {
    let mut statement = conn.prepare(
        "INSERT INTO runs (run_id, job, primary_run_id, status, started_at, source_store, source_table,
            id_column, geometry_column, target_column, feature_columns, scheme, parameters, seed,
            repeats, folds, source_srid, distance_srid, tool_version)
         VALUES (?1, ?2, ?3, 'running', strftime('%Y-%m-%dT%H:%M:%fZ', ?4, 'unixepoch'), ?5, ?6, ?7, ?8,
            ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17, ?18)",
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
            record.parameters.to_string(),
            record.seed as i64,
            record.repeats,
            record.folds,
            info.source_srid,
            info.srid,
            record.tool_version,
        ])?;
    }
    Ok(())
}

impl ResultStore for GpkgStore {
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
        if let Some(conn) = &self.conn {
            check_results(conn, &self.path, unit_id_type(info.id_kind), info.srid)?;
        }
        Ok(())
    }

    fn begin(&mut self, info: &SourceInfo, records: &[RunRecord]) -> Result<(), Error> {
        let job = records.first().map(|r| r.job.as_str()).unwrap_or_default();
        let srs = source_srs(info)?;
        let id_type = unit_id_type(info.id_kind);
        let path = self.path.clone();
        let action = |e: rusqlite::Error| sqlite_error(&path, "recording the run", &e);
        let mut target = match self.conn.take() {
            Some(conn) => Target {
                conn,
                new_file: None,
            },
            None => Target::open(&path)?,
        };
        let recorded = (|| {
            if !target.is_new() {
                let source_layer =
                    same_file(&path, &source_path(info)?).then_some(info.qualified_table.as_str());
                check_job_layers(&target.conn, &path, job, source_layer)?;
            }
            let tx = target
                .conn
                .transaction_with_behavior(TransactionBehavior::Immediate)
                .map_err(action)?;
            // The SRS row first: the blocks layer's registration refers to it.
            ensure_srs(&tx, &path, &srs)?;
            ensure_results(&tx, &path, id_type, info.srid)?;
            insert_runs(&tx, info, records).map_err(action)?;
            tx.commit().map_err(action)
        })();
        match (recorded, target.is_new()) {
            (Ok(()), true) => {
                target.finish()?;
                self.conn = Some(open_file(&path, true)?);
                Ok(())
            }
            (Ok(()), false) => {
                self.conn = Some(target.conn);
                Ok(())
            }
            (Err(error), is_new) => {
                if !is_new {
                    self.conn = Some(target.conn);
                }
                Err(error)
            }
        }
    }

    fn commit(
        &mut self,
        info: &SourceInfo,
        dataset: &Dataset,
        runs: &[FinishedRun<'_>],
    ) -> Result<StoreReport, Error> {
        let path = self.path.clone();
        let location = self.location();
        let conn = self
            .conn
            .as_mut()
            .ok_or_else(|| Error::Internal("commit before begin".into()))?;
        let source = source_path(info)?;
        let schema_name = if same_file(&path, &source) {
            "main"
        } else {
            conn.execute("ATTACH DATABASE ?1 AS source", [read_only_uri(&source)?])
                .map_err(|e| sqlite_error(&source, "attaching the source file", &e))?;
            "source"
        };
        let written = write_runs(conn, &path, schema_name, info, dataset, runs);
        if schema_name == "source" {
            if let Err(error) = conn.execute_batch("DETACH DATABASE source") {
                tracing::warn!(%error, "could not detach the source file");
            }
        }
        let rows_written = written?;
        let job = runs
            .first()
            .map(|run| run.record.job.clone())
            .unwrap_or_default();
        Ok(StoreReport {
            store: "gpkg",
            layer: format!("{location}:{job} (key fid)"),
            blocks_layer: format!("{location}:{job}_blocks (key block_key)"),
            location,
            rows_written,
        })
    }

    fn fail(&mut self, records: &[RunRecord], message: &str) {
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
                tracing::warn!(%error, "could not mark the run failed");
            }
        }
    }
}

/// Adds a count to the per-table totals.
fn write_runs(
    conn: &mut Connection,
    path: &Path,
    source_schema: &str,
    info: &SourceInfo,
    dataset: &Dataset,
    runs: &[FinishedRun<'_>],
) -> Result<Vec<(String, u64)>, Error> {
    let triggers = trigger_set(conn, path)?;
    let tx = conn
        .transaction_with_behavior(TransactionBehavior::Immediate)
        .map_err(|e| sqlite_error(path, "starting the transaction", &e))?;
    let mut counts = Vec::new();
    let clock = std::time::Instant::now();
    let mut unit_rows = Vec::new();
    for run in runs {
        let written = write_run(&tx, path, info, dataset, run)?;
        for (table, count) in written.counts {
            add_count(&mut counts, table, count);
        }
        unit_rows.push((run.record.run_id, written.unit_errors));
    }
    tracing::debug!(
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "wrote the result rows"
    );
    let clock = std::time::Instant::now();
    let primary = runs.iter().find(|run| run.record.primary_run_id.is_none());
    if let Some(primary) = primary {
        let job = &primary.record.job;
        let run_id = primary.record.run_id.to_string();
        if is_latest(&tx, job, &run_id)
            .map_err(|e| sqlite_error(path, "finding the latest run", &e))?
        {
            let (z, m): (i64, i64) = tx
                .query_row(
                    &format!(
                        "SELECT z, m FROM {}.gpkg_geometry_columns WHERE table_name = ?1",
                        quote(source_schema)
                    ),
                    [&info.qualified_table],
                    |row| Ok((row.get(0)?, row.get(1)?)),
                )
                .map_err(|e| sqlite_error(path, "reading the source geometry column", &e))?;
            let layers = JobLayers::new(
                job,
                unit_id_type(info.id_kind),
                &info.declared_geometry_type,
                info.source_srid,
                (z, m),
                info.srid,
            );
            let rows = unit_rows
                .iter()
                .find(|(id, _)| *id == primary.record.run_id)
                .map(|(_, rows)| *rows)
                .ok_or_else(|| Error::Internal("the primary run wrote no unit_errors".into()))?;
            let units = layers.rewrite(&tx, path, &run_id, triggers, |conn, table| {
                fill_unit_layer(conn, path, table, source_schema, info, rows)
            })?;
            add_count(&mut counts, job, units);
        }
    }
    tracing::debug!(
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "rewrote the job layers"
    );
    let clock = std::time::Instant::now();
    tx.commit()
        .map_err(|e| sqlite_error(path, "committing", &e))?;
    tracing::debug!(elapsed_ms = clock.elapsed().as_millis() as u64, "committed");
    Ok(counts)
}

/// Fills the per-unit layer: the run's `unit_errors` rows (fids `rows`, so
/// other runs are not scanned) joined to the source layer's geometry blobs.
/// A skipped row may share its id with a used one; the first row with a
/// geometry is kept.
fn fill_unit_layer(
    conn: &Connection,
    path: &Path,
    table: &str,
    source_schema: &str,
    info: &SourceInfo,
    rows: (i64, i64),
) -> Result<(), Error> {
    let source = format!("{}.{}", quote(source_schema), quote(&info.qualified_table));
    let id = quote(&info.id_column);
    let geom = quote(&info.geom_column);
    conn.execute(
        &format!(
            "INSERT OR IGNORE INTO {table}
               (fid, unit_id, run_id, observed, predicted, residual, abs_error, rmse, repetitions, geom)
             SELECT e.unit_key, e.unit_id, e.run_id, e.observed, e.predicted, e.residual,
                    e.abs_error, e.rmse, e.repetitions, s.{geom}
             FROM main.unit_errors e JOIN {source} s ON s.{id} = e.unit_id
             WHERE e.fid BETWEEN ?1 AND ?2 AND s.{geom} IS NOT NULL"
        ),
        [rows.0, rows.1],
    )
    .map(|_| ())
    .map_err(|e| sqlite_error(path, "copying the unit geometries", &e))
}

/// Rows per multi-row `INSERT`: SQLite steps one statement per this many rows
/// instead of one per row, which roughly halves the cost of a million-row write.
const ROWS_PER_INSERT: usize = 64;

/// Inserts `count` rows into `table`, [`ROWS_PER_INSERT`] rows per statement.
/// `bind(row, statement, first)` binds row `row`'s values, in `columns` order,
/// to the 1-based parameters `first..first + columns.len()`.
fn insert_many(
    conn: &Connection,
    table: &str,
    columns: &[&str],
    count: usize,
    mut bind: impl FnMut(usize, &mut rusqlite::Statement<'_>, usize) -> rusqlite::Result<()>,
) -> rusqlite::Result<()> {
    let width = columns.len();
    let sql = |rows: usize| {
        let one = format!("({})", vec!["?"; width].join(", "));
        format!(
            "INSERT INTO {table} ({}) VALUES {}",
            columns.join(", "),
            vec![one; rows].join(", ")
        )
    };
    let mut start = 0;
    if count >= ROWS_PER_INSERT {
        let mut full = conn.prepare(&sql(ROWS_PER_INSERT))?;
        while start + ROWS_PER_INSERT <= count {
            for k in 0..ROWS_PER_INSERT {
                bind(start + k, &mut full, k * width + 1)?;
            }
            full.raw_execute()?;
            start += ROWS_PER_INSERT;
        }
    }
    if start < count {
        let mut tail = conn.prepare(&sql(count - start))?;
        for k in 0..count - start {
            bind(start + k, &mut tail, k * width + 1)?;
        }
        tail.raw_execute()?;
    }
    Ok(())
}

/// What [`write_run`] wrote: rows per table, and the fid range of its `unit_errors`.
struct RunRows {
    counts: Vec<(&'static str, u64)>,
    unit_errors: (i64, i64),
}

fn write_run(
    conn: &Connection,
    path: &Path,
    info: &SourceInfo,
    dataset: &Dataset,
    run: &FinishedRun<'_>,
) -> Result<RunRows, Error> {
    let at = |what: &'static str| move |e: rusqlite::Error| sqlite_error(path, what, &e);
    let run_id = run.record.run_id.to_string();
    let outcome = run.outcome;
    let n = dataset.len();
    let mut counts = Vec::new();

    let repetition_count = outcome.repetitions.len();
    insert_many(
        conn,
        "main.predictions",
        &[
            "run_id",
            "repetition",
            "fold",
            "unit_id",
            "observed",
            "predicted",
            "residual",
            "abs_error",
            "squared_error",
        ],
        n * repetition_count,
        |position, statement, first| {
            let (repetition, unit) = (position / n, position % n);
            let repetition_outcome = &outcome.repetitions[repetition];
            let observed = dataset.target[unit];
            let predicted = repetition_outcome.predicted[unit];
            let residual = observed - predicted;
            statement.raw_bind_parameter(first, &run_id)?;
            statement.raw_bind_parameter(first + 1, repetition as i64 + 1)?;
            statement.raw_bind_parameter(
                first + 2,
                repetition_outcome.assignment.fold_of[unit] as i64 + 1,
            )?;
            statement.raw_bind_parameter(first + 3, id_value(&dataset.ids[unit]))?;
            statement.raw_bind_parameter(first + 4, observed)?;
            statement.raw_bind_parameter(first + 5, predicted)?;
            statement.raw_bind_parameter(first + 6, residual)?;
            statement.raw_bind_parameter(first + 7, residual.abs())?;
            statement.raw_bind_parameter(first + 8, residual * residual)
        },
    )
    .map_err(at("writing predictions"))?;
    let total = (n * outcome.repetitions.len()) as u64;
    // fold_members is a view over predictions, as in PostGIS.
    counts.push(("predictions", total));
    counts.push(("fold_members", total));

    let repetitions = repetition_count as i64;
    insert_many(
        conn,
        "main.unit_errors",
        &[
            "run_id",
            "unit_key",
            "unit_id",
            "observed",
            "predicted",
            "residual",
            "abs_error",
            "rmse",
            "repetitions",
        ],
        n,
        |unit, statement, first| {
            let error = &outcome.unit_errors[unit];
            statement.raw_bind_parameter(first, &run_id)?;
            statement.raw_bind_parameter(first + 1, unit as i64 + 1)?;
            statement.raw_bind_parameter(first + 2, id_value(&dataset.ids[unit]))?;
            statement.raw_bind_parameter(first + 3, error.observed)?;
            statement.raw_bind_parameter(first + 4, error.mean_predicted)?;
            statement.raw_bind_parameter(first + 5, error.mean_residual)?;
            statement.raw_bind_parameter(first + 6, error.mae)?;
            statement.raw_bind_parameter(first + 7, error.rmse)?;
            statement.raw_bind_parameter(first + 8, repetitions)
        },
    )
    .map_err(at("writing unit_errors"))?;
    counts.push(("unit_errors", n as u64));
    // The run's unit_errors rows are the last n inserted.
    let last = conn.last_insert_rowid();
    let unit_rows = (last - n as i64 + 1, last);

    let mut scores = conn.prepare(
        "INSERT INTO main.fold_scores (run_id, repetition, fold, n_train, n_test, rmse, mae, bias, r2)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
    ).map_err(at("writing fold_scores"))?;
    for score in &outcome.fold_scores {
        scores
            .execute(params![
                run_id,
                score.repetition as i64 + 1,
                score.fold as i64 + 1,
                score.n_train as i64,
                score.n_test as i64,
                score.scores.rmse,
                score.scores.mae,
                score.scores.bias,
                score.scores.r2
            ])
            .map_err(at("writing fold_scores"))?;
    }
    counts.push(("fold_scores", outcome.fold_scores.len() as u64));

    let spread = &outcome.fold_spread;
    conn.execute(
        "INSERT INTO main.run_scores (run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd,
            mae_fold_mean, mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd)
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14)",
        params![
            run_id,
            outcome.pooled.n as i64,
            outcome.pooled.rmse,
            outcome.pooled.mae,
            outcome.pooled.bias,
            outcome.pooled.r2,
            spread.rmse.mean,
            spread.rmse.sd,
            spread.mae.mean,
            spread.mae.sd,
            spread.bias.mean,
            spread.bias.sd,
            spread.r2.mean,
            spread.r2.sd
        ],
    ).map_err(at("writing run_scores"))?;
    counts.push(("run_scores", 1));

    if let SchemeSpec::Grid(grid) = &run.plan.scheme {
        let mut blocks = conn
            .prepare(
                "INSERT INTO main.blocks (run_id, repetition, block_col, block_row, fold, n_units, geom)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )
            .map_err(at("writing blocks"))?;
        let mut written = 0u64;
        for (repetition, repetition_outcome) in outcome.repetitions.iter().enumerate() {
            for block in &repetition_outcome.assignment.blocks {
                let cell = cell_polygon(grid.origin, grid.block_size, block.col, block.row);
                let geometry =
                    blob::encode_wkb(info.srid, &wkb::polygon(&wkb::ring_of(&cell), None))
                        .map_err(|e| Error::Internal(format!("encoding a block: {e}")))?;
                blocks
                    .execute(params![
                        run_id,
                        repetition as i64 + 1,
                        block.col,
                        block.row,
                        block.fold as i64 + 1,
                        block.n_units as i64,
                        geometry
                    ])
                    .map_err(at("writing blocks"))?;
                written += 1;
            }
        }
        schema::refresh_extent(conn, "blocks").map_err(at("updating the extent of blocks"))?;
        counts.push(("blocks", written));
    }

    let skipped =
        serde_json::to_string(&dataset.skipped).map_err(|e| Error::Internal(e.to_string()))?;
    conn.execute(
        "UPDATE main.runs SET status = 'succeeded', finished_at = strftime('%Y-%m-%dT%H:%M:%fZ', 'now'),
            input_fingerprint = ?2, units_read = ?3, units_used = ?4, units_skipped = ?5
         WHERE run_id = ?1",
        params![
            run_id,
            dataset.fingerprint(),
            dataset.rows_read as i64,
            n as i64,
            skipped
        ],
    )
    .map_err(at("marking the run succeeded"))?;
    Ok(RunRows {
        counts,
        unit_errors: unit_rows,
    })
}

/// Writes the demo scenario as a fresh GeoPackage at `path` (replacing any
/// file there) with the layer `subcatchments`: `fid` key, `id`, `name`, the
/// three features and the target (`rainfall_mm` NULL where the invented
/// gauge has a gap), and `geom` MULTIPOLYGON in EPSG:32631, R-tree indexed.
///
/// # Errors
/// Exit 73 when the file cannot be created, 74 on I/O errors.
pub fn write_demo(path: &Path, units: &[DemoUnit]) -> Result<(), Error> {
    use geozero::{CoordDimensions, ToWkb};
    let (file, mut conn) = NewFile::create(path)?;
    let action = |e: rusqlite::Error| sqlite_error(path, "writing the demo layer", &e);
    let layer = FeatureTable {
        name: DEMO_LAYER.to_string(),
        key: "fid".into(),
        columns: "id INTEGER NOT NULL UNIQUE, name TEXT NOT NULL, farmland_share DOUBLE, rainfall_mm DOUBLE, \
                  elevation_m DOUBLE, nitrate_mg_l DOUBLE"
            .into(),
        geometry_type: "MULTIPOLYGON".into(),
        geometry_not_null: true,
        srs_id: DEMO_SRID,
        z: 0,
        m: 0,
        description: "geofold demo: invented sub-catchments of an invented basin".into(),
    };
    let tx = conn.transaction().map_err(action)?;
    schema::create_container(&tx).map_err(action)?;
    schema::ensure_srs(&tx, &Srs::epsg(DEMO_SRID, None, Some(DEMO_SRS_WKT))).map_err(action)?;
    schema::create_feature_table(&tx, &layer).map_err(action)?;
    {
        let mut insert = tx
            .prepare(
                "INSERT INTO subcatchments (fid, id, name, farmland_share, rainfall_mm, elevation_m, nitrate_mg_l, geom)
                 VALUES (?1, ?1, ?2, ?3, ?4, ?5, ?6, ?7)",
            )
            .map_err(action)?;
        for unit in units {
            let body = geo_types::Geometry::MultiPolygon(unit.geometry.clone())
                .to_wkb(CoordDimensions::xy())
                .map_err(|e| Error::Internal(format!("encoding demo geometry: {e}")))?;
            let geometry = blob::encode_wkb(DEMO_SRID, &body)
                .map_err(|e| Error::Internal(format!("encoding demo geometry: {e}")))?;
            insert
                .execute(params![
                    unit.id,
                    unit.name,
                    unit.farmland_share,
                    unit.rainfall_mm,
                    unit.elevation_m,
                    unit.nitrate_mg_l,
                    geometry
                ])
                .map_err(action)?;
        }
    }
    schema::index_feature_table(&tx, &layer, TriggerSet::V1_3).map_err(action)?;
    tx.commit().map_err(action)?;
    file.finish(conn)
}
