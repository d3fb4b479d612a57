//! `geofold export`: copy one run (with its comparison runs) from a PostGIS
//! results schema into a GeoPackage, for people who have no database.
//!
//! Every results table's rows of the runs are read through the PostGIS
//! store's reads (one read-only snapshot) and written into the GeoPackage's
//! results tables, defined by the same definitions, in one transaction. The
//! job's unit layer gets its geometries from the source table recorded with
//! the run, so the file opens in a GIS like a local run.

use std::path::PathBuf;

use clap::Args;
use serde::Serialize;
use uuid::Uuid;

use crate::adapters::gpkg::import::{import, UnitLayer};
use crate::adapters::postgis::store::PostgisStore;
use crate::adapters::postgis::Session;
use crate::adapters::readback::ReadBack;
use crate::adapters::{ResultStore, StoredRun};
use crate::core::units::IdKind;
use crate::error::{Error, Location};
use crate::results::rows::Owned;
use crate::results::{TableDef, INSPECTIONS, JOBS, RUNS, TABLES};

/// `geofold export`.
#[derive(Debug, Clone, Args)]
pub struct ExportArgs {
    /// PostgreSQL connection (libpq URI or key=value; the service file and PG* variables fill the rest).
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// PostGIS results schema to read.
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// The run to export.
    #[arg(
        long,
        value_name = "RUN_ID",
        conflicts_with = "job",
        required_unless_present = "job"
    )]
    pub run: Option<String>,
    /// Export the latest successful run of this job.
    #[arg(long, value_name = "NAME")]
    pub job: Option<String>,
    /// GeoPackage to write (created when missing; earlier runs in it are kept).
    #[arg(long, value_name = "OUT.gpkg")]
    pub to: PathBuf,
    /// Print the outcome as JSON.
    #[arg(long)]
    pub json: bool,
}

/// What an export wrote.
#[derive(Debug, Clone, Serialize)]
pub struct ExportReport {
    /// The GeoPackage written.
    pub file: String,
    /// The job.
    pub job: String,
    /// The runs copied, primary first.
    pub runs: Vec<String>,
    /// Rows written per table and layer.
    pub rows_written: Vec<(String, u64)>,
}

impl ExportReport {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut text = format!(
            "exported run {} of job {} to {}",
            self.runs.first().map(String::as_str).unwrap_or(""),
            self.job,
            self.file
        );
        if self.runs.len() > 1 {
            text.push_str(&format!(
                " with its comparison run(s) {}",
                self.runs[1..].join(", ")
            ));
        }
        text.push('\n');
        for (table, rows) in &self.rows_written {
            text.push_str(&format!("  {table}: {rows} rows\n"));
        }
        // A run without regions (random folds) has no regions layer.
        let regions = format!("{}{}", self.job, crate::results::REGIONS_SUFFIX);
        if self.rows_written.iter().any(|(table, _)| *table == regions) {
            text.push_str(&format!(
                "open {} in QGIS or any GIS: layers {} (per-unit errors) and {regions} (fold regions)",
                self.file, self.job
            ));
        } else {
            text.push_str(&format!(
                "open {} in QGIS or any GIS: layer {} (per-unit errors)",
                self.file, self.job
            ));
        }
        text
    }
}

/// The value of column `name` of a row of `table`.
fn column<'r>(table: &TableDef, row: &'r [Owned], name: &str) -> &'r Owned {
    table
        .columns
        .iter()
        .position(|c| c.name == name)
        .and_then(|i| row.get(i))
        .unwrap_or(&Owned::Null)
}

fn text(value: &Owned) -> String {
    match value {
        Owned::Text(text) => text.clone(),
        Owned::Int(number) => number.to_string(),
        _ => String::new(),
    }
}

/// The run to export: `--run`, or the latest successful primary run of `--job`.
fn chosen_run(store: &mut PostgisStore, args: &ExportArgs) -> Result<StoredRun, Error> {
    let all = store.runs(args.job.as_deref(), usize::MAX)?;
    let found = match (&args.run, &args.job) {
        (Some(text), _) => {
            let run_id = Uuid::parse_str(text.trim())
                .map_err(|_| Error::Usage(format!("--run {text:?} is not a run id (a UUID)")))?;
            let run = all.iter().find(|run| run.run_id == run_id);
            // A comparison run exports with its primary.
            match run.and_then(|r| r.primary_run_id) {
                Some(primary) => all.iter().find(|run| run.run_id == primary),
                None => run,
            }
            .cloned()
            .ok_or_else(|| Error::NotFound {
                what: format!("run {run_id} in results schema {}", store.schema()),
            })?
        }
        (None, Some(job)) => all
            .iter()
            .find(|run| run.status == "succeeded" && run.primary_run_id.is_none())
            .cloned()
            .ok_or_else(|| Error::NotFound {
                what: format!(
                    "a successful run of job {job} in results schema {}",
                    store.schema()
                ),
            })?,
        (None, None) => return Err(Error::Usage("name --run RUN_ID or --job NAME".into())),
    };
    if found.status != "succeeded" {
        return Err(Error::Input {
            problems: vec![(
                Location {
                    table: format!("{}.runs", store.schema()),
                    column: Some("status".into()),
                    row_id: Some(found.run_id.to_string()),
                },
                format!(
                    "the run has status {}; only succeeded runs are exported",
                    found.status
                ),
            )],
        });
    }
    Ok(found)
}

/// Runs `geofold export`.
///
/// # Errors
/// Exit 64 for a `--run` that is not a UUID; 66 for a missing run, job or
/// source table; 65 for a run that did not succeed or is already in the
/// file; database and file errors.
pub fn run(args: &ExportArgs) -> Result<ExportReport, Error> {
    crate::adapters::sql::check_identifier("--results-schema", &args.results_schema)?;
    let session = Session::connect(args.db.as_deref())?;
    let mut store = PostgisStore::new(session, &args.results_schema, args.db.as_deref());
    let primary = chosen_run(&mut store, args)?;
    let mut run_ids = vec![primary.run_id];
    run_ids.extend(
        store
            .runs(Some(&primary.job), usize::MAX)?
            .iter()
            .filter(|run| run.primary_run_id == Some(primary.run_id) && run.status == "succeeded")
            .map(|run| run.run_id),
    );
    store.begin_reading()?;
    let exported = copy(&mut store, args, &primary, &run_ids);
    store.end_reading();
    exported
}

fn copy(
    store: &mut PostgisStore,
    args: &ExportArgs,
    primary: &StoredRun,
    run_ids: &[Uuid],
) -> Result<ExportReport, Error> {
    let ids: Vec<String> = run_ids.iter().map(Uuid::to_string).collect();
    let mut run_rows = Vec::new();
    store.read_rows(&RUNS, "run_id", &ids[..1], &mut |row| {
        run_rows.push(row);
        Ok(())
    })?;
    let record = run_rows
        .first()
        .ok_or_else(|| Error::Internal(format!("run {} vanished", primary.run_id)))?;
    let source_table = text(column(&RUNS, record, "source_table"));
    let id_column = text(column(&RUNS, record, "id_column"));
    let geometry_column = text(column(&RUNS, record, "geometry_column"));
    let int = |name: &str| match column(&RUNS, record, name) {
        Owned::Int(value) => *value as i32,
        _ => 0,
    };
    let (source_srid, distance_srid) = (int("source_srid"), int("distance_srid"));
    let mut job_row = None;
    store.read_rows(
        &JOBS,
        "job",
        std::slice::from_ref(&primary.job),
        &mut |row| {
            job_row = Some(row);
            Ok(())
        },
    )?;
    let (id_kind, geometry_type) = match &job_row {
        Some(row) => (
            if text(column(&JOBS, row, "id_type")) == "text" {
                IdKind::Text
            } else {
                IdKind::Integer
            },
            text(column(&JOBS, row, "geometry_type")).to_ascii_uppercase(),
        ),
        None => (IdKind::Integer, "GEOMETRY".to_string()),
    };
    let source_srs = store.srs(source_srid)?;
    let distance_srs = store.srs(distance_srid)?;
    let layer = UnitLayer {
        id_kind,
        geometry_type,
        srs_id: source_srs.srs_id,
    };
    // The job's inspections travel with it (their figures advise its runs).
    let mut owners = ids.clone();
    store.read_rows(
        &INSPECTIONS,
        "job",
        std::slice::from_ref(&primary.job),
        &mut |row| {
            if let Owned::Text(id) = column(&INSPECTIONS, &row, "inspection_id") {
                owners.push(id.clone());
            }
            Ok(())
        },
    )?;
    let rows_written = import(&args.to, &[source_srs, distance_srs], &ids, |sink| {
        // Every table but jobs, by what its rows belong to: runs (run_id),
        // runs and inspections (analysis_id), inspections (inspection_id).
        for table in TABLES {
            let Some(key) = table.owner_column() else {
                continue;
            };
            sink.table(table)?;
            store.read_rows(table, key, &owners, &mut |row| sink.row(row))?;
        }
        let mut units = Vec::new();
        store.unit_layer_rows(
            primary.run_id,
            &source_table,
            &id_column,
            &geometry_column,
            id_kind == IdKind::Integer,
            (layer.geometry_type.starts_with("MULTI"), source_srid),
            |row| {
                units.push(row);
                Ok(())
            },
        )?;
        sink.unit_layer(&primary.job, &layer, units)?;
        let regions = store.region_layer_rows(primary.run_id)?;
        sink.region_layer(&primary.job, distance_srid.max(-1), &regions)
    })?;
    Ok(ExportReport {
        file: args.to.display().to_string(),
        job: primary.job.clone(),
        runs: ids,
        rows_written,
    })
}
