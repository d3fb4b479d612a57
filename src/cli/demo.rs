//! `geofold demo`: write the invented demo scenario, validate it with grid and
//! random folds side by side, and say where to look.
//!
//! With no arguments everything happens in a GeoPackage (no server needed);
//! with `--db` the scenario is loaded into PostGIS and validated there. Both
//! build a run specification and go through the one pipeline.

use std::path::PathBuf;

use clap::Args;

use crate::adapters::postgis::Session;
use crate::adapters::ColumnSpec;
use crate::cli::run::DEFAULT_SEED;
use crate::core::options::Options;
use crate::demo::{generate, DEMO_BLOCK_SIZE_M, DEMO_FEATURES, DEMO_LAYER, DEMO_TARGET};
use crate::error::Error;
use crate::report::Summary;
use crate::spec::{Limits, ResultsRef, RunSpec, SourceRef};

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
    let (source, results, hint) = match &args.db {
        Some(db) => {
            let session = Session::connect(Some(db))?;
            crate::demo::postgis::load_demo(&session, "demo", DEMO_LAYER, &units)?;
            (
                SourceRef::Postgis {
                    db: Some(db.clone()),
                    table: format!("demo.{DEMO_LAYER}"),
                },
                ResultsRef::Postgis {
                    db: Some(db.clone()),
                    schema: "geofold_demo".into(),
                },
                format!(
                    "open in QGIS: PostGIS layers geofold_demo.{DEMO_JOB} (per-unit errors) and \
                     geofold_demo.{DEMO_JOB}_regions (blocks coloured by fold); the source is demo.{DEMO_LAYER}"
                ),
            )
        }
        None => {
            crate::demo::gpkg::write_demo(&args.out, &units)?;
            (
                SourceRef::Gpkg {
                    file: args.out.clone(),
                    layer: Some(DEMO_LAYER.into()),
                },
                ResultsRef::Gpkg {
                    file: args.out.clone(),
                },
                format!(
                    "open {} in QGIS or any GIS: layer {DEMO_JOB} (per-unit errors of the latest run) \
                     and {DEMO_JOB}_regions (blocks coloured by fold); the source layer is {DEMO_LAYER}",
                    args.out.display()
                ),
            )
        }
    };
    let mut scheme_options = Options::new();
    scheme_options.insert("block-size".into(), serde_json::json!(DEMO_BLOCK_SIZE_M));
    scheme_options.insert("folds".into(), args.folds.into());
    let spec = RunSpec {
        source,
        columns: ColumnSpec {
            id: Some("id".into()),
            geom: Some("geom".into()),
            target: DEMO_TARGET.into(),
            features: DEMO_FEATURES.iter().map(|s| s.to_string()).collect(),
            group: None,
            exposure: None,
        },
        distance_srid: None,
        assume_metres: false,
        strict: false,
        scheme: "grid".into(),
        scheme_options,
        model: "ols".into(),
        model_options: Options::new(),
        exclusion_radius: None,
        prediction: None,
        repeats: 1,
        seed: args.seed,
        compare_random: true,
        results,
        job: Some(DEMO_JOB.into()),
        limits: Limits::default(),
        residual_weights: None,
        gates: Vec::new(),
        baseline_runs: crate::gates::DEFAULT_BASELINE_RUNS,
        skip_unchanged: false,
        assign_only: false,
        unseen_levels: Default::default(),
    };
    let summary = crate::pipeline::run(&spec)?;
    Ok((summary, hint))
}
