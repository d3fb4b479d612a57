//! `geofold demo`: write the invented demo scenario, validate it with grid and
//! random folds side by side, and say where to look.
//!
//! With no arguments everything happens in a GeoPackage (no server needed);
//! with `--db` the scenario is loaded into PostGIS and validated there.

use std::path::PathBuf;

use clap::Args;

use crate::adapters::gpkg::{self, GpkgSource, GpkgStore};
use crate::adapters::postgis::read::PostgisSource;
use crate::adapters::postgis::write::PostgisStore;
use crate::adapters::postgis::{load, Session};
use crate::adapters::{ColumnSpec, ResultStore, Source};
use crate::cli::run::{execute, SchemeName, ValidationArgs, DEFAULT_SEED};
use crate::demo::{generate, DEMO_BLOCK_SIZE_M, DEMO_FEATURES, DEMO_LAYER, DEMO_TARGET};
use crate::error::Error;
use crate::report::Summary;

/// Job label of the demo runs.
pub const DEMO_JOB: &str = "demo_nitrate";

/// `geofold demo`.
#[derive(Debug, Clone, Args)]
pub struct DemoArgs {
    /// GeoPackage to write the scenario and results to (replaced if it exists).
    #[arg(
        long,
        default_value = "geofold-demo.gpkg",
        value_name = "FILE",
        conflicts_with = "db"
    )]
    pub out: PathBuf,
    /// Load the scenario into this PostGIS database instead (table demo.subcatchments,
    /// results in schema geofold_demo).
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// Number of folds.
    #[arg(long, default_value_t = 5)]
    pub folds: u32,
    /// Seed of the fold assignment.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Print the summary as JSON.
    #[arg(long)]
    pub json: bool,
}

/// Runs the demo; returns the summary and a hint on what to open.
///
/// # Errors
/// Any [`Error`].
pub fn run(args: &DemoArgs) -> Result<(Summary, String), Error> {
    let units = generate();
    let columns = ColumnSpec {
        id: Some("id".into()),
        geom: Some("geom".into()),
        target: DEMO_TARGET.into(),
        features: DEMO_FEATURES.iter().map(|s| s.to_string()).collect(),
    };
    let validation = ValidationArgs {
        scheme: SchemeName::Grid,
        block_size: Some(DEMO_BLOCK_SIZE_M),
        grid_origin: None,
        folds: args.folds,
        repeats: 1,
        seed: args.seed,
        also_random: true,
        model: "ols".into(),
    };
    let (mut source, mut store, hint): (Box<dyn Source>, Box<dyn ResultStore>, String) = match &args
        .db
    {
        Some(db) => {
            let session = Session::connect(Some(db))?;
            load::load_demo(&session, "demo", DEMO_LAYER, &units)?;
            let table = format!("demo.{DEMO_LAYER}");
            (
                Box::new(PostgisSource::open(session, &table, &columns, None)?),
                Box::new(PostgisStore::new(
                    Session::connect(Some(db))?,
                    "geofold_demo",
                )),
                format!(
                    "open in QGIS: PostGIS layers geofold_demo.{DEMO_JOB} (per-unit errors) and \
                         geofold_demo.{DEMO_JOB}_blocks (blocks); the source is {table}"
                ),
            )
        }
        None => {
            gpkg::write_demo(&args.out, &units)?;
            (
                    Box::new(GpkgSource::open(&args.out, Some(DEMO_LAYER), &columns)?),
                    Box::new(GpkgStore::open(&args.out)?),
                    format!(
                        "open {} in QGIS or any GIS: layer {DEMO_JOB} (per-unit errors of the latest run) \
                         and {DEMO_JOB}_blocks (blocks and their folds); the source layer is {DEMO_LAYER}",
                        args.out.display()
                    ),
                )
        }
    };
    let summary = execute(
        source.as_mut(),
        store.as_mut(),
        &validation,
        Some(DEMO_JOB),
        false,
    )?;
    Ok((summary, hint))
}
