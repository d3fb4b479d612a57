//! `geofold export`: one run's results from a PostGIS results schema into a
//! GeoPackage, for sharing with people who have no database.
//!
//! The run (`--run`, or the latest successful primary run of `--job`) is
//! exported with its comparison runs: their `runs` rows, predictions (and so
//! the `fold_members` view), unit errors, fold and run scores and blocks, in
//! the GeoPackage results tables (see [`super::schema`]). The per-unit layer
//! gets its geometries from the source table recorded in `runs.source_table`
//! (`ST_AsBinary(ST_Force2D(…))`, wrapped in GeoPackageBinary headers), so the
//! export opens in a GIS like a local run. Block keys are renumbered by the
//! file; run ids are UUIDs, so exported runs never collide with local ones
//! (exporting the same run twice is refused).
//!
//! PostGIS is read in one `REPEATABLE READ READ ONLY` transaction, streaming
//! the per-unit tables row by row; the GeoPackage is written in one SQLite
//! transaction (a new file under a temporary name, renamed at the end), so a
//! failure leaves no trace in the file.

use futures_util::{pin_mut, StreamExt};
use std::path::Path;

use rusqlite::types::Value;
use rusqlite::{Connection, TransactionBehavior};
use tokio_postgres::types::{FromSql, ToSql};
use tokio_postgres::Row;
use uuid::Uuid;

use super::schema::{self, Srs};
use super::write::{
    check_job_layers, ensure_results, ensure_srs, is_latest, trigger_set, JobLayers, Target,
};
use super::{blob, sqlite_error};
use crate::adapters::postgis::{database_error, quote_ident, split_qualified, Session};
use crate::cli::export::ExportArgs;
use crate::error::{Error, Location};

/// Columns of `runs`, in the order both stores have them (after the GeoPackage `fid`).
const RUN_COLUMNS: &str = "run_id, job, primary_run_id, status, started_at, finished_at, source_store, \
    source_table, id_column, geometry_column, target_column, feature_columns, scheme, parameters, seed, \
    repeats, folds, source_srid, distance_srid, tool_version, input_fingerprint, units_read, units_used, \
    units_skipped, error_message";

/// Exports a run; returns a JSON account of what was written.
///
/// # Errors
/// Exit 64 for a `--run` that is not a UUID; 66 for a missing results schema,
/// run, job or source table; 65 for a run that did not succeed, a run already
/// in the file, or a file whose results were made for another id type or SRID;
/// database and file errors.
pub fn export(args: &ExportArgs) -> Result<serde_json::Value, Error> {
    let session = Session::connect(args.db.as_deref())?;
    let schema = args.results_schema.as_str();
    let reader = Reader {
        session: &session,
        schema,
    };
    reader.begin()?;
    let exported = reader.export(args);
    // Read-only: ending the transaction either way is enough.
    if let Err(error) = session
        .runtime
        .block_on(session.client.batch_execute("ROLLBACK"))
    {
        tracing::warn!(%error, "could not end the read transaction");
    }
    exported
}

struct Reader<'a> {
    session: &'a Session,
    schema: &'a str,
}

/// One value of a row, with its column named on error.
fn get<'r, T: FromSql<'r>>(row: &'r Row, index: usize, what: &str) -> Result<T, Error> {
    row.try_get(index)
        .map_err(|e| database_error(&format!("reading {what}"), &e))
}

impl Reader<'_> {
    fn table(&self, name: &str) -> String {
        format!("{}.{}", quote_ident(self.schema), quote_ident(name))
    }

    fn block_on<T>(
        &self,
        future: impl std::future::Future<Output = Result<T, tokio_postgres::Error>>,
        action: &str,
    ) -> Result<T, Error> {
        self.session
            .runtime
            .block_on(future)
            .map_err(|e| database_error(action, &e))
    }

    fn begin(&self) -> Result<(), Error> {
        self.block_on(
            self.session
                .client
                .batch_execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY"),
            "starting the read transaction",
        )
    }

    /// Runs `sql` and hands each row to `on_row` as it arrives.
    fn stream(
        &self,
        sql: &str,
        params: &[&(dyn ToSql + Sync)],
        action: &str,
        mut on_row: impl FnMut(&Row) -> Result<(), Error>,
    ) -> Result<(), Error> {
        let client = &self.session.client;
        self.session.runtime.block_on(async {
            let rows = client
                .query_raw(sql, params.iter().map(|p| *p as &dyn ToSql))
                .await
                .map_err(|e| database_error(action, &e))?;
            pin_mut!(rows);
            while let Some(row) = rows.next().await {
                on_row(&row.map_err(|e| database_error(action, &e))?)?;
            }
            Ok(())
        })
    }

    fn export(&self, args: &ExportArgs) -> Result<serde_json::Value, Error> {
        let client = &self.session.client;
        let runs_table = self.table("runs");
        let present: Option<String> = get(
            &self.block_on(
                client.query_one("SELECT to_regclass($1)::text", &[&runs_table]),
                "looking up the results schema",
            )?,
            0,
            "the results schema",
        )?;
        if present.is_none() {
            return Err(Error::NotFound {
                what: format!(
                    "results schema {} (no runs table) in {}",
                    self.schema, self.session.description
                ),
            });
        }
        let primary = self.primary_run(args)?;
        let group: Vec<Uuid> = self
            .block_on(
                client.query(
                    &format!(
                        "SELECT run_id FROM {runs_table} WHERE run_id = $1 \
                         OR (primary_run_id = $1 AND status = 'succeeded') \
                         ORDER BY primary_run_id IS NOT NULL, started_at"
                    ),
                    &[&primary],
                ),
                "listing the runs to export",
            )?
            .iter()
            .map(|row| get(row, 0, "runs.run_id"))
            .collect::<Result<_, _>>()?;
        let settings = self.block_on(
            client.query(
                &format!("SELECT key, value FROM {}", self.table("store_settings")),
                &[],
            ),
            "reading store_settings",
        )?;
        let setting = |key: &str| -> Result<String, Error> {
            for row in &settings {
                if get::<String>(row, 0, "store_settings.key")? == key {
                    return get(row, 1, "store_settings.value");
                }
            }
            Err(Error::Internal(format!(
                "store_settings of {} has no {key}",
                self.schema
            )))
        };
        let unit_id_type = setting("unit_id_type")?;
        let block_srid: i32 = setting("block_srid")?
            .parse()
            .map_err(|_| Error::Internal("block_srid is not a number".into()))?;
        let facts = self.block_on(
            client.query_one(
                &format!(
                    "SELECT job, source_table, id_column, geometry_column, source_srid \
                     FROM {runs_table} WHERE run_id = $1"
                ),
                &[&primary],
            ),
            "reading the run",
        )?;
        let job: String = get(&facts, 0, "runs.job")?;
        let source_table: String = get(&facts, 1, "runs.source_table")?;
        let id_column: String = get(&facts, 2, "runs.id_column")?;
        let geom_column: String = get(&facts, 3, "runs.geometry_column")?;
        let source_srid: i32 = get(&facts, 4, "runs.source_srid")?;
        let source = SourceTable::find(self, &source_table, &id_column, &geom_column, &primary)?;

        let path = args.to.as_path();
        let mut target = Target::open(path)?;
        let error = |action: &'static str| move |e: rusqlite::Error| sqlite_error(path, action, &e);
        if !target.is_new() {
            check_job_layers(&target.conn, path, &job, None)?;
            let has_runs = schema::has_table(&target.conn, "main", "runs")
                .map_err(error("checking the runs"))?;
            for run in group.iter().filter(|_| has_runs) {
                let already: i64 = target
                    .conn
                    .query_row(
                        "SELECT count(*) FROM main.runs WHERE run_id = ?1",
                        [run.to_string()],
                        |row| row.get(0),
                    )
                    .map_err(error("checking the runs"))?;
                if already > 0 {
                    return Err(Error::Store {
                        store: path.display().to_string(),
                        problem: format!("run {run} is already in it; nothing was written"),
                    });
                }
            }
        }
        let triggers = trigger_set(&target.conn, path)?;
        let tx = target
            .conn
            .transaction_with_behavior(TransactionBehavior::Immediate)
            .map_err(error("starting the transaction"))?;
        for srid in [block_srid, source_srid] {
            ensure_srs(&tx, path, &self.srs(srid)?)?;
        }
        ensure_results(&tx, path, &unit_id_type, gpkg_srs_id(block_srid))?;
        let mut counts = serde_json::Map::new();
        let mut count = |table: &str, rows: u64| {
            let entry = counts.entry(table.to_string()).or_insert(0.into());
            *entry = (entry.as_u64().unwrap_or(0) + rows).into();
        };
        let out = Out {
            conn: &tx,
            path,
            unit_id_text: unit_id_type == "text",
        };
        for copy in table_copies(self, block_srid) {
            let rows = self.copy(&out, &copy, &group)?;
            count(copy.table, rows);
            if copy.table == "predictions" {
                count("fold_members", rows);
            }
        }
        schema::refresh_extent(&tx, "blocks").map_err(error("updating the extent of blocks"))?;
        let primary_text = primary.to_string();
        let latest =
            is_latest(&tx, &job, &primary_text).map_err(error("finding the latest run"))?;
        if latest {
            let layers = JobLayers::new(
                &job,
                &unit_id_type,
                &source.geometry_type,
                gpkg_srs_id(source_srid),
                (0, 0),
                gpkg_srs_id(block_srid),
            );
            let units = layers.rewrite(&tx, path, &primary_text, triggers, |conn, table| {
                let copy = unit_layer_copy(self, table, &source, source_srid);
                let out = Out {
                    conn,
                    path,
                    unit_id_text: unit_id_type == "text",
                };
                self.copy(&out, &copy, &[primary]).map(|_| ())
            })?;
            count(&job, units);
        }
        tx.commit().map_err(error("committing"))?;
        target.finish()?;
        Ok(serde_json::json!({
            "status": "succeeded",
            "file": path.display().to_string(),
            "results_schema": self.schema,
            "job": job,
            "runs": group.iter().map(Uuid::to_string).collect::<Vec<_>>(),
            "layer": latest.then(|| format!("{job} (key fid)")),
            "blocks_layer": latest.then(|| format!("{job}_blocks (key block_key)")),
            "rows_written": counts,
        }))
    }

    /// The primary run to export: `--run` (or its primary), or the job's latest.
    fn primary_run(&self, args: &ExportArgs) -> Result<Uuid, Error> {
        let client = &self.session.client;
        let runs_table = self.table("runs");
        let (row, asked) = match (&args.run, &args.job) {
            (Some(text), _) => {
                let run_id = Uuid::parse_str(text.trim()).map_err(|_| {
                    Error::Usage(format!("--run {text:?} is not a run id (a UUID)"))
                })?;
                let row = self.block_on(
                    client.query_opt(
                        &format!(
                            "SELECT coalesce(primary_run_id, run_id), \
                             (SELECT status FROM {runs_table} p WHERE p.run_id = coalesce(r.primary_run_id, r.run_id)) \
                             FROM {runs_table} r WHERE run_id = $1"
                        ),
                        &[&run_id],
                    ),
                    "looking up the run",
                )?;
                (row, format!("run {run_id}"))
            }
            (None, Some(job)) => {
                let row = self.block_on(
                    client.query_opt(
                        &format!(
                            "SELECT run_id, status FROM {runs_table} WHERE job = $1 AND status = 'succeeded' \
                             AND primary_run_id IS NULL ORDER BY finished_at DESC LIMIT 1"
                        ),
                        &[job],
                    ),
                    "looking up the job's latest run",
                )?;
                (row, format!("a successful run of job {job}"))
            }
            (None, None) => return Err(Error::Usage("name --run RUN_ID or --job NAME".into())),
        };
        let Some(row) = row else {
            return Err(Error::NotFound {
                what: format!(
                    "{asked} in results schema {} of {}",
                    self.schema, self.session.description
                ),
            });
        };
        let primary: Uuid = get(&row, 0, "runs.run_id")?;
        let status: String = get(&row, 1, "runs.status")?;
        if status != "succeeded" {
            return Err(Error::Input {
                problems: vec![(
                    Location {
                        table: runs_table,
                        column: Some("status".into()),
                        row_id: Some(primary.to_string()),
                    },
                    format!("the run has status {status}; only succeeded runs are exported"),
                )],
            });
        }
        Ok(primary)
    }

    /// The `gpkg_spatial_ref_sys` row of a PostGIS SRID, from `spatial_ref_sys`.
    /// SRID 0 (unknown) becomes the GeoPackage's undefined Cartesian SRS -1.
    fn srs(&self, srid: i32) -> Result<Srs, Error> {
        if gpkg_srs_id(srid) == -1 {
            return Ok(Srs {
                srs_id: -1,
                name: "Undefined Cartesian SRS".into(),
                organization: "NONE".into(),
                organization_id: -1,
                definition: "undefined".into(),
            });
        }
        let row = self.block_on(
            self.session.client.query_opt(
                "SELECT auth_name, auth_srid, srtext FROM spatial_ref_sys WHERE srid = $1",
                &[&srid],
            ),
            "reading spatial_ref_sys",
        )?;
        let Some(row) = row else {
            return Err(Error::NotFound {
                what: format!("SRID {srid} in spatial_ref_sys"),
            });
        };
        let organization: Option<String> = get(&row, 0, "spatial_ref_sys.auth_name")?;
        let code: Option<i32> = get(&row, 1, "spatial_ref_sys.auth_srid")?;
        let wkt: Option<String> = get(&row, 2, "spatial_ref_sys.srtext")?;
        let wkt = wkt.filter(|text| !text.is_empty());
        let mut srs = Srs::epsg(srid, None, wkt.as_deref());
        if let (Some(organization), Some(code)) = (organization, code) {
            srs.organization = organization;
            srs.organization_id = code;
        }
        Ok(srs)
    }

    /// Streams the rows of `copy` for `runs` from PostGIS into the GeoPackage.
    fn copy(&self, out: &Out<'_>, copy: &TableCopy, runs: &[Uuid]) -> Result<u64, Error> {
        let action = format!("writing {}", copy.table);
        let placeholders: Vec<String> = (1..=copy.kinds.len()).map(|i| format!("?{i}")).collect();
        let mut insert = out
            .conn
            .prepare(&format!(
                "INSERT OR {conflict} INTO {target} ({columns}) VALUES ({placeholders})",
                conflict = copy.on_conflict,
                target = copy.target,
                columns = copy.columns,
                placeholders = placeholders.join(", "),
            ))
            .map_err(|e| sqlite_error(out.path, &action, &e))?;
        let sql = format!("SELECT {} {}", copy.select, copy.from);
        let mut written = 0;
        self.stream(&sql, &[&runs], &format!("reading {}", copy.table), |row| {
            let bound = copy.bind(row, out.unit_id_text)?;
            insert
                .execute(rusqlite::params_from_iter(bound))
                .map_err(|e| sqlite_error(out.path, &action, &e))?;
            written += 1;
            Ok(())
        })?;
        Ok(written)
    }
}

/// Where copied rows go.
struct Out<'a> {
    conn: &'a Connection,
    path: &'a Path,
    /// Whether unit ids are text (else integers).
    unit_id_text: bool,
}

/// One table copied from PostGIS into the GeoPackage, column for column.
struct TableCopy {
    /// The table, for messages and counts.
    table: &'static str,
    /// The GeoPackage table written (`main.…`).
    target: String,
    /// The columns written.
    columns: &'static str,
    /// The PostGIS select list, in the same order.
    select: String,
    /// `FROM … WHERE …` with the run ids as `$1`.
    from: String,
    /// One letter per column: `T` text, `I` integer, `F` float, `U` unit id,
    /// `J` JSON text (re-serialised), `G` WKB made GeoPackageBinary.
    kinds: &'static str,
    /// SRS id of a `G` column.
    srs_id: i32,
    /// `ABORT`, or `IGNORE` where a skipped source row may repeat an id.
    on_conflict: &'static str,
}

impl TableCopy {
    fn bind(&self, row: &Row, unit_id_text: bool) -> Result<Vec<Value>, Error> {
        let table = self.table;
        self.kinds
            .chars()
            .enumerate()
            .map(|(index, kind)| {
                let text = || get::<Option<String>>(row, index, table);
                Ok(match kind {
                    'T' => text()?.map_or(Value::Null, Value::Text),
                    'J' => match text()? {
                        // jsonb prints with spaces; the local store writes serde's compact form.
                        Some(raw) => Value::Text(
                            serde_json::from_str::<serde_json::Value>(&raw)
                                .map_err(|e| Error::Internal(format!("{table} JSON: {e}")))?
                                .to_string(),
                        ),
                        None => Value::Null,
                    },
                    'I' => {
                        get::<Option<i64>>(row, index, table)?.map_or(Value::Null, Value::Integer)
                    }
                    'F' => get::<Option<f64>>(row, index, table)?.map_or(Value::Null, Value::Real),
                    'U' if unit_id_text => Value::Text(get(row, index, table)?),
                    'U' => Value::Integer(get(row, index, table)?),
                    _ => match get::<Option<Vec<u8>>>(row, index, table)? {
                        None => Value::Null,
                        Some(wkb) => {
                            Value::Blob(blob::encode_wkb(self.srs_id, &wkb).map_err(|e| {
                                Error::Internal(format!(
                                    "PostGIS sent malformed WKB for {table}: {e}"
                                ))
                            })?)
                        }
                    },
                })
            })
            .collect()
    }
}

/// A PostGIS SRID as a GeoPackage srs_id (0, unknown, is undefined Cartesian).
fn gpkg_srs_id(srid: i32) -> i32 {
    if srid <= 0 {
        -1
    } else {
        srid
    }
}

/// The results tables to copy, in an order that keeps foreign keys satisfied.
fn table_copies(reader: &Reader<'_>, block_srid: i32) -> Vec<TableCopy> {
    let from = |table: &str, order: &str| {
        format!("FROM {} WHERE run_id = ANY($1){order}", reader.table(table))
    };
    let stamp = |column: &str| {
        format!("to_char({column} AT TIME ZONE 'UTC', 'YYYY-MM-DD\"T\"HH24:MI:SS.MS\"Z\"')")
    };
    let copy = |table: &'static str, columns: &'static str, select: String, from: String, kinds| {
        TableCopy {
            table,
            target: format!("main.{table}"),
            columns,
            select,
            from,
            kinds,
            srs_id: gpkg_srs_id(block_srid),
            on_conflict: "ABORT",
        }
    };
    let scores =
        "n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean, \
                  mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd";
    vec![
        copy(
            "runs",
            RUN_COLUMNS,
            format!(
                "run_id::text, job, primary_run_id::text, status, {}, {}, source_store, source_table, \
                 id_column, geometry_column, target_column, array_to_json(feature_columns)::text, scheme, \
                 parameters::text, seed, repeats::int8, folds::int8, source_srid::int8, distance_srid::int8, \
                 tool_version, input_fingerprint, units_read, units_used, units_skipped::text, error_message",
                stamp("started_at"),
                stamp("finished_at")
            ),
            from("runs", " ORDER BY primary_run_id IS NOT NULL, started_at"),
            "TTTTTTTTTTTTTJIIIIITTIIJT",
        ),
        copy(
            "predictions",
            "run_id, repetition, fold, unit_id, observed, predicted, residual, abs_error, squared_error",
            "run_id::text, repetition::int8, fold::int8, unit_id, observed, predicted, residual, abs_error, \
             squared_error"
                .into(),
            from("predictions", ""),
            "TIIUFFFFF",
        ),
        copy(
            "unit_errors",
            "run_id, unit_key, unit_id, observed, predicted, residual, abs_error, rmse, repetitions",
            "run_id::text, unit_key::int8, unit_id, observed, predicted, residual, abs_error, rmse, \
             repetitions::int8"
                .into(),
            from("unit_errors", ""),
            "TIUFFFFFI",
        ),
        copy(
            "fold_scores",
            "run_id, repetition, fold, n_train, n_test, rmse, mae, bias, r2",
            "run_id::text, repetition::int8, fold::int8, n_train::int8, n_test::int8, rmse, mae, bias, r2"
                .into(),
            from("fold_scores", " ORDER BY run_id, repetition, fold"),
            "TIIIIFFFF",
        ),
        copy(
            "run_scores",
            "run_id, n_predictions, rmse, mae, bias, r2, rmse_fold_mean, rmse_fold_sd, mae_fold_mean, \
             mae_fold_sd, bias_fold_mean, bias_fold_sd, r2_fold_mean, r2_fold_sd",
            format!("run_id::text, {scores}"),
            from("run_scores", ""),
            "TIFFFFFFFFFFFF",
        ),
        copy(
            "blocks",
            "run_id, repetition, block_col, block_row, fold, n_units, geom",
            "run_id::text, repetition::int8, block_col, block_row, fold::int8, n_units::int8, ST_AsBinary(geom)"
                .into(),
            from("blocks", " ORDER BY block_key"),
            "TIIIIIG",
        ),
    ]
}

/// The per-unit layer's rows: the run's unit errors joined to the source
/// geometries (`table` is the layer, already created).
fn unit_layer_copy(
    reader: &Reader<'_>,
    table: &str,
    source: &SourceTable,
    source_srid: i32,
) -> TableCopy {
    TableCopy {
        table: "the per-unit layer",
        target: table.to_string(),
        columns: "fid, unit_id, run_id, observed, predicted, residual, abs_error, rmse, repetitions, geom",
        select: format!(
            "e.unit_key::int8, e.unit_id, e.run_id::text, e.observed, e.predicted, e.residual, e.abs_error, \
             e.rmse, e.repetitions::int8, ST_AsBinary(ST_Force2D({}))",
            source.expression
        ),
        from: format!(
            "FROM {} e JOIN {} s ON s.{} = e.unit_id WHERE e.run_id = ANY($1)",
            reader.table("unit_errors"),
            source.qualified,
            quote_ident(&source.id_column)
        ),
        kinds: "IUTFFFFFIG",
        srs_id: gpkg_srs_id(source_srid),
        // A skipped source row may share its id with a used one (see the store).
        on_conflict: "IGNORE",
    }
}

/// The source table of the run, for the per-unit layer's geometries.
struct SourceTable {
    qualified: String,
    id_column: String,
    /// The geometry expression (`s."geom"`, or `ST_Multi(s."geom")` to give a
    /// typed layer), as the PostGIS job view has it.
    expression: String,
    /// The per-unit layer's geometry type.
    geometry_type: String,
}

impl SourceTable {
    fn find(
        reader: &Reader<'_>,
        table: &str,
        id_column: &str,
        geom_column: &str,
        run: &Uuid,
    ) -> Result<SourceTable, Error> {
        let (schema, name) = split_qualified(table);
        let schema = schema.unwrap_or_else(|| "public".to_string());
        let client = &reader.session.client;
        let declared = reader.block_on(
            client.query_opt(
                "SELECT upper(type) FROM geometry_columns \
                 WHERE f_table_schema = $1 AND f_table_name = $2 AND f_geometry_column = $3",
                &[&schema, &name, &geom_column],
            ),
            "looking up the source table",
        )?;
        let Some(declared) = declared else {
            return Err(Error::NotFound {
                what: format!(
                    "source table {table} (column {geom_column}) of run {run} in {}; the per-unit layer needs its geometries",
                    reader.session.description
                ),
            });
        };
        let declared: String = get(&declared, 0, "geometry_columns.type")?;
        let qualified = format!("{}.{}", quote_ident(&schema), quote_ident(&name));
        let column = format!("s.{}", quote_ident(geom_column));
        let (expression, geometry_type) = if declared == "GEOMETRY" {
            // Untyped column: the layer is typed when every unit has one family.
            let kinds = reader.block_on(
                client.query_one(
                    &format!(
                        "SELECT coalesce(bool_and(GeometryType({column}) IN ('POLYGON', 'MULTIPOLYGON')), false), \
                         coalesce(bool_and(GeometryType({column}) IN ('POINT', 'MULTIPOINT')), false) \
                         FROM {} e JOIN {qualified} s ON s.{} = e.unit_id WHERE e.run_id = $1",
                        reader.table("unit_errors"),
                        quote_ident(id_column)
                    ),
                    &[run],
                ),
                "reading the source geometry types",
            )?;
            let polygons: bool = get(&kinds, 0, "geometry types")?;
            let points: bool = get(&kinds, 1, "geometry types")?;
            match (polygons, points) {
                (true, _) => (format!("ST_Multi({column})"), "MULTIPOLYGON".to_string()),
                (_, true) => (format!("ST_Multi({column})"), "MULTIPOINT".to_string()),
                _ => (column, "GEOMETRY".to_string()),
            }
        } else {
            (column, declared)
        };
        Ok(SourceTable {
            qualified,
            id_column: id_column.to_string(),
            expression,
            geometry_type,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn run_columns_match_the_results_tables() {
        // The GeoPackage runs table has the PostGIS columns after its fid.
        let sql = include_str!("results.sql");
        let start = sql.find("CREATE TABLE runs (").unwrap();
        let body = &sql[start..sql[start..].find(");").unwrap() + start];
        let columns: Vec<&str> = body
            .lines()
            .skip(2)
            .filter_map(|line| line.split_whitespace().next())
            .collect();
        let listed: Vec<&str> = RUN_COLUMNS.split(',').map(str::trim).collect();
        assert_eq!(columns, listed);
        let postgis = include_str!("../../../sql/001_results.sql");
        for column in &listed {
            assert!(postgis.contains(&format!("    {column} ")), "{column}");
        }
    }
}
