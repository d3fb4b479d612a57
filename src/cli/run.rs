//! `geofold run`: read units, build folds, fit per fold, write results.
//!
//! The pipeline here is the only one: PostGIS and GeoPackage differ only in the
//! [`Source`] and [`ResultStore`] they open.

use std::path::PathBuf;
use std::time::{SystemTime, UNIX_EPOCH};

use clap::{Args, ValueEnum};
use uuid::Uuid;

use crate::adapters::gpkg::{GpkgSource, GpkgStore};
use crate::adapters::postgis::read::PostgisSource;
use crate::adapters::postgis::write::PostgisStore;
use crate::adapters::postgis::Session;
use crate::adapters::{
    check_job, default_job, ColumnSpec, FinishedRun, ResultStore, RunRecord, Source,
};
use crate::core::folds::grid::GridParams;
use crate::core::folds::random::RandomParams;
use crate::core::folds::SchemeSpec;
use crate::core::models::ModelKind;
use crate::core::units::UnitCollector;
use crate::core::validate::{cross_validate, Plan, RunOutcome};
use crate::error::Error;
use crate::report::Summary;

/// Default seed of fold assignment; always recorded with the run.
pub const DEFAULT_SEED: u64 = 1;

/// Where the units come from.
#[derive(Debug, Clone, Args)]
pub struct SourceArgs {
    /// PostgreSQL connection: a libpq URI (postgresql://user@host:port/db) or key=value string.
    /// Missing parts come from PGHOST, PGPORT, PGDATABASE, PGUSER, PGPASSWORD, PGSSLMODE, PGAPPNAME.
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// Source table in PostGIS, as SCHEMA.TABLE (or TABLE on the search path).
    #[arg(long, value_name = "SCHEMA.TABLE", conflicts_with_all = ["gpkg", "layer"])]
    pub table: Option<String>,
    /// Source GeoPackage file.
    #[arg(long, value_name = "FILE")]
    pub gpkg: Option<PathBuf>,
    /// Feature table (layer) in the GeoPackage; may be left out when the file has one.
    #[arg(long, value_name = "NAME", requires = "gpkg")]
    pub layer: Option<String>,
    /// Id column (integer or text, unique). Default: the table's primary key.
    #[arg(long, value_name = "COLUMN")]
    pub id: Option<String>,
    /// Geometry column. Default: the table's only geometry column.
    #[arg(long, value_name = "COLUMN")]
    pub geom: Option<String>,
    /// Target column (numeric): what the model predicts.
    #[arg(long, value_name = "COLUMN")]
    pub target: String,
    /// Feature columns (numeric), comma-separated.
    #[arg(long, value_name = "A,B,C", value_delimiter = ',', required = true)]
    pub features: Vec<String>,
    /// Transform geometries to this projected SRID (metres) before building blocks
    /// (PostGIS ST_Transform). Needed when the source SRID is longitude/latitude.
    #[arg(long, value_name = "SRID")]
    pub distance_srid: Option<i32>,
    /// Fail instead of skipping rows with a missing geometry, target or feature.
    #[arg(long)]
    pub strict: bool,
}

/// The fold schemes offered on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SchemeName {
    /// Square spatial blocks of --block-size, dealt to folds.
    Grid,
    /// Plain random k-fold over units (ignores space).
    Random,
}

/// How to validate.
#[derive(Debug, Clone, Args)]
pub struct ValidationArgs {
    /// Fold scheme.
    #[arg(long, value_enum, default_value = "grid")]
    pub scheme: SchemeName,
    /// Block side for --scheme grid, in metres (CRS units of the distance CRS).
    #[arg(long, value_name = "METRES")]
    pub block_size: Option<f64>,
    /// Grid origin X,Y in CRS units (default 0,0); cells are [x0 + i·size, x0 + (i+1)·size).
    #[arg(long, value_name = "X,Y", allow_hyphen_values = true)]
    pub grid_origin: Option<String>,
    /// Number of folds.
    #[arg(long, default_value_t = 5)]
    pub folds: u32,
    /// Repetitions, each with its own fold assignment (seeds derived from --seed).
    #[arg(long, default_value_t = 1)]
    pub repeats: u32,
    /// Seed of the fold assignment; the same seed gives the same folds on any machine.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Also run random k-fold on the same rows, recorded as a comparison run, and report both.
    #[arg(long)]
    pub also_random: bool,
    /// Model family.
    #[arg(long, default_value = "ols", value_parser = ["ols"])]
    pub model: String,
}

/// Where the results go.
#[derive(Debug, Clone, Args)]
pub struct OutputArgs {
    /// Job label: names the run history and the per-unit view/layer. Default: the table name;
    /// for results written into the source GeoPackage, the layer name with _cv appended.
    #[arg(long)]
    pub job: Option<String>,
    /// PostGIS schema for results (created when missing).
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// Write results into this GeoPackage (created when missing; earlier runs are kept).
    #[arg(long, value_name = "FILE")]
    pub results_gpkg: Option<PathBuf>,
    /// Print the summary as one JSON document on stdout.
    #[arg(long)]
    pub json: bool,
}

/// `geofold run`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP)]
pub struct RunArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub source: SourceArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub validation: ValidationArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub output: OutputArgs,
}

/// Runs `geofold run` and returns its summary.
///
/// # Errors
/// Any [`Error`]; its exit code is what the process returns.
pub fn run(args: &RunArgs) -> Result<Summary, Error> {
    let columns = ColumnSpec {
        id: args.source.id.clone(),
        geom: args.source.geom.clone(),
        target: args.source.target.clone(),
        features: args.source.features.clone(),
    };
    let mut source: Box<dyn Source> = match (&args.source.table, &args.source.gpkg) {
        (Some(table), None) => {
            let session = Session::connect(args.source.db.as_deref())?;
            Box::new(PostgisSource::open(
                session,
                table,
                &columns,
                args.source.distance_srid,
            )?)
        }
        (None, Some(file)) => {
            if args.source.distance_srid.is_some() {
                return Err(Error::Usage(
                    "--distance-srid needs PostGIS to transform; for a GeoPackage, reproject the file first \
                     (for example ogr2ogr -t_srs EPSG:N out.gpkg in.gpkg)"
                        .into(),
                ));
            }
            Box::new(GpkgSource::open(
                file,
                args.source.layer.as_deref(),
                &columns,
            )?)
        }
        _ => {
            return Err(Error::Usage(
                "name a source: --table SCHEMA.TABLE (with --db) or --gpkg FILE".into(),
            ))
        }
    };
    let mut store: Box<dyn ResultStore> = match (&args.output.results_gpkg, &args.source.gpkg) {
        (Some(file), _) => Box::new(GpkgStore::open(file)?),
        (None, Some(file)) => Box::new(GpkgStore::open(file)?),
        (None, None) => Box::new(PostgisStore::new(
            Session::connect(args.source.db.as_deref())?,
            &args.output.results_schema,
        )),
    };
    // Results written into the source GeoPackage share its namespace: a job
    // named like the layer would have its per-unit layer replace the source.
    let job = match (
        &args.output.job,
        &args.source.gpkg,
        &args.output.results_gpkg,
    ) {
        (None, Some(_), None) => {
            let mut layer = default_job(&source.info().table);
            layer.truncate(57);
            Some(format!("{layer}_cv"))
        }
        (job, _, _) => job.clone(),
    };
    execute(
        source.as_mut(),
        store.as_mut(),
        &args.validation,
        job.as_deref(),
        args.source.strict,
    )
}

/// The pipeline: check, record, read, validate, write. Shared by `run` and `demo`.
///
/// # Errors
/// Any [`Error`]. Once the runs are recorded, a failure marks them failed and
/// leaves no result rows.
pub fn execute(
    source: &mut dyn Source,
    store: &mut dyn ResultStore,
    validation: &ValidationArgs,
    job: Option<&str>,
    strict: bool,
) -> Result<Summary, Error> {
    let info = source.info().clone();
    let plan = plan_of(validation)?;
    if matches!(plan.scheme, SchemeSpec::Grid(_))
        && info.geographic
        && info.srid == info.source_srid
    {
        // A GeoPackage has no PostGIS to transform with (run() refuses
        // --distance-srid for it), so the file must be reprojected first.
        let fix = if info.store == "gpkg" {
            "reproject the layer to a projected CRS in metres first (for example \
             ogr2ogr -t_srs EPSG:N out.gpkg in.gpkg LAYER), or use --scheme random"
        } else {
            "pass --distance-srid N with a projected CRS in metres (PostGIS transforms the geometries)"
        };
        return Err(Error::Usage(format!(
            "{}.{} has SRID {}, a longitude/latitude CRS (degrees), but --block-size is in metres; {fix}",
            info.table, info.geom_column, info.source_srid
        )));
    }
    let job = match job {
        Some(job) => job.to_string(),
        None => default_job(&info.table),
    };
    check_job(&job)?;
    let model = validation.model.parse::<ModelKind>()?.build();
    let started_at_micros = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_micros() as i64)
        .unwrap_or(0);
    let record_of = |plan: &Plan, primary: Option<Uuid>| RunRecord {
        run_id: Uuid::new_v4(),
        job: job.clone(),
        primary_run_id: primary,
        started_at_micros,
        scheme: plan.scheme.name().to_string(),
        parameters: serde_json::json!({
            "scheme": plan.scheme,
            "model": model.parameters(),
            "repeats": plan.repeats,
            "seed": plan.seed,
        }),
        seed: plan.seed,
        repeats: plan.repeats,
        folds: plan.scheme.folds(),
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
    };
    let mut plans = vec![plan.clone()];
    if validation.also_random && plan.scheme.name() != "random" {
        plans.push(Plan {
            scheme: SchemeSpec::Random(RandomParams {
                folds: plan.scheme.folds(),
            }),
            repeats: plan.repeats,
            seed: plan.seed,
        });
    }
    let primary = record_of(&plans[0], None);
    let mut records = vec![primary.clone()];
    for extra in &plans[1..] {
        records.push(record_of(extra, Some(primary.run_id)));
    }
    // Read and check every row before anything is written: bad input leaves
    // no trace in the results store.
    let clock = std::time::Instant::now();
    let mut collector = UnitCollector::new(
        &info.table,
        &info.target_column,
        &info.feature_columns,
        strict,
    );
    source.read(&mut collector)?;
    let dataset = collector.finish(&info.id_column)?;
    if dataset.is_empty() {
        let reasons = dataset.skipped.describe();
        return Err(Error::input(
            &info.table,
            None,
            None,
            format!(
                "no usable rows: {} rows read{}",
                dataset.rows_read,
                if reasons.is_empty() {
                    String::new()
                } else {
                    format!(", all skipped ({reasons})")
                }
            ),
        ));
    }
    tracing::info!(
        units = dataset.len(),
        skipped = dataset.skipped.total(),
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "read units"
    );
    store.prepare(&info)?;
    store.begin(&info, &records)?;
    let result: Result<Summary, Error> = (|| {
        let clock = std::time::Instant::now();
        let outcomes = plans
            .iter()
            .map(|plan| cross_validate(&dataset, plan, model.as_ref()))
            .collect::<Result<Vec<RunOutcome>, Error>>()?;
        tracing::info!(elapsed_ms = clock.elapsed().as_millis() as u64, "validated");
        let clock = std::time::Instant::now();
        let finished: Vec<FinishedRun<'_>> = records
            .iter()
            .zip(&plans)
            .zip(&outcomes)
            .map(|((record, plan), outcome)| FinishedRun {
                record,
                plan,
                outcome,
            })
            .collect();
        let report = store.commit(&info, &dataset, &finished)?;
        tracing::info!(
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "wrote results"
        );
        Ok(Summary::new(&info, &dataset, &records, &outcomes, report))
    })();
    if let Err(error) = &result {
        store.fail(&records, &error.to_string());
    }
    result
}

fn plan_of(validation: &ValidationArgs) -> Result<Plan, Error> {
    let scheme = match validation.scheme {
        SchemeName::Grid => {
            let block_size = validation
                .block_size
                .ok_or_else(|| Error::Usage("--scheme grid needs --block-size METRES".into()))?;
            let origin = match &validation.grid_origin {
                None => [0.0, 0.0],
                Some(text) => parse_origin(text)?,
            };
            SchemeSpec::Grid(GridParams {
                block_size,
                origin,
                folds: validation.folds,
            })
        }
        SchemeName::Random => SchemeSpec::Random(RandomParams {
            folds: validation.folds,
        }),
    };
    if validation.repeats == 0 {
        return Err(Error::Usage("--repeats must be at least 1".into()));
    }
    if validation.folds < 2 {
        return Err(Error::Usage(format!(
            "--folds must be at least 2, got {}",
            validation.folds
        )));
    }
    Ok(Plan {
        scheme,
        repeats: validation.repeats,
        seed: validation.seed,
    })
}

fn parse_origin(text: &str) -> Result<[f64; 2], Error> {
    let parts: Vec<Option<f64>> = text
        .split(',')
        .map(|part| part.trim().parse::<f64>().ok().filter(|v| v.is_finite()))
        .collect();
    match parts.as_slice() {
        [Some(x), Some(y)] => Ok([*x, *y]),
        _ => Err(Error::Usage(format!(
            "--grid-origin takes X,Y (two numbers), got {text:?}"
        ))),
    }
}
