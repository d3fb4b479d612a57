//! `geofold demo`: write the invented demo scenario, inspect its spatial
//! structure, validate it with grid blocks of the advised size beside random
//! folds and with a leave-one-out buffered by the advised radius, say what
//! that shows, and where to look.
//!
//! With no arguments everything happens in a GeoPackage (no server needed);
//! with `--db` the scenario is loaded into PostGIS and validated there. Both
//! build a run specification and go through the one pipeline.

use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use crate::adapters::postgis::Session;
use crate::adapters::ColumnSpec;
use crate::cli::output::RunArgs as RunChoiceArgs;
use crate::cli::report::{ReportArgs, ReportWritten};
use crate::cli::run::DEFAULT_SEED;
use crate::cli::store::StoreArgs;
use crate::core::options::Options;
use crate::demo::{generate, DEMO_BLOCK_SIZE_M, DEMO_FEATURES, DEMO_LAYER, DEMO_TARGET};
use crate::error::Error;
use crate::inspect::{inspect, InspectSpec, Inspection};
use crate::report::Summary;
use crate::spec::{Limits, ResultsRef, RunSpec, SourceRef};

/// Job label of the demo's blocked runs (and its inspection).
pub const DEMO_JOB: &str = "demo_nitrate";

/// Job label of the demo's buffered leave-one-out run.
pub const BUFFERED_JOB: &str = "demo_nitrate_buffered";

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
    /// The HTML report of the blocked run (default: next to the GeoPackage, with .html; with
    /// --db, geofold-demo.html in the current directory).
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Print the summary as JSON.
    #[arg(long)]
    pub json: bool,
}

/// What the demo did: the inspection, the blocked run with its random
/// comparison, the buffered leave-one-out run, and what to take from them.
#[derive(Debug, Clone, Serialize)]
pub struct DemoOutcome {
    /// The process exit code.
    pub exit_code: i32,
    /// Spatial autocorrelation and the advice on block size and radius.
    pub inspection: Inspection,
    /// Grid blocks of the advised size, with random folds on the same units.
    pub blocks: Summary,
    /// Leave-one-out with an exclusion buffer of the advised radius.
    pub buffered: Summary,
    /// What a reader should take from the comparison, in plain words.
    pub takeaway: Vec<String>,
    /// The HTML report of the blocked run.
    pub report: ReportWritten,
    /// What to open.
    pub hint: String,
}

impl DemoOutcome {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        out.push_str(&self.inspection.to_text());
        out.push('\n');
        out.push_str(&self.blocks.to_text());
        out.push('\n');
        out.push_str(&self.buffered.to_text());
        out.push_str("\nwhat this shows:\n");
        for sentence in &self.takeaway {
            out.push_str("  ");
            out.push_str(sentence);
            out.push('\n');
        }
        out.push('\n');
        out.push_str(&self.hint);
        out.push('\n');
        out.push_str(&format!(
            "open {} in a web browser: the report of the blocked run, with its maps, the comparison with \
             random folds and the inspection (no network needed)\n",
            self.report.file
        ));
        out
    }
}

/// Runs the demo.
///
/// # Errors
/// Any [`Error`].
pub fn run(args: &DemoArgs) -> Result<DemoOutcome, Error> {
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
                    "open in QGIS: PostGIS layers geofold_demo.{DEMO_JOB} (per-unit errors of the blocked run), \
                     geofold_demo.{DEMO_JOB}_regions (blocks coloured by fold) and geofold_demo.{BUFFERED_JOB} \
                     (the buffered leave-one-out run); the source is demo.{DEMO_LAYER}"
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
                    "open {} in QGIS or any GIS: layers {DEMO_JOB} (per-unit errors of the blocked run), \
                     {DEMO_JOB}_regions (blocks coloured by fold) and {BUFFERED_JOB} (the buffered leave-one-out \
                     run); the source layer is {DEMO_LAYER}",
                    args.out.display()
                ),
            )
        }
    };
    let columns = ColumnSpec {
        id: Some("id".into()),
        geom: Some("geom".into()),
        target: DEMO_TARGET.into(),
        features: DEMO_FEATURES.iter().map(|s| s.to_string()).collect(),
        group: None,
        exposure: None,
    };
    let inspection = inspect(&InspectSpec {
        source: source.clone(),
        columns: columns.clone(),
        distance_srid: None,
        assume_metres: false,
        strict: false,
        model: "ols".into(),
        model_options: Options::new(),
        weights: None,
        permutations: 999,
        seed: args.seed,
        cutoff: None,
        lag_width: None,
        lags: 15,
        folds: args.folds,
        results: results.clone(),
        job: Some(DEMO_JOB.into()),
        limits: Limits::default(),
    })?;
    // The advice sets the sizes; without one (no spatial structure found),
    // the scenario's own 4 km.
    let block = inspection.advice.block_size.unwrap_or(DEMO_BLOCK_SIZE_M);
    let radius = inspection.advice.buffer_radius.unwrap_or(DEMO_BLOCK_SIZE_M);
    let mut scheme_options = Options::new();
    scheme_options.insert("block-size".into(), serde_json::json!(block));
    scheme_options.insert("folds".into(), args.folds.into());
    let base = RunSpec {
        seed: args.seed,
        ..RunSpec::new(source, columns, results)
    };
    let blocks = crate::pipeline::run(&RunSpec {
        scheme: "grid".into(),
        scheme_options,
        compare_random: true,
        job: Some(DEMO_JOB.into()),
        ..base.clone()
    })?;
    let buffered = crate::pipeline::run(&RunSpec {
        scheme: "loo".into(),
        exclusion_radius: Some(radius),
        job: Some(BUFFERED_JOB.into()),
        ..base
    })?;
    let takeaway = takeaway(&blocks, &buffered);
    let report_file = args.report.clone().unwrap_or_else(|| match &args.db {
        Some(_) => PathBuf::from("geofold-demo.html"),
        None => args.out.with_extension("html"),
    });
    let report = crate::cli::report::run(&ReportArgs {
        store: StoreArgs {
            db: args.db.clone(),
            results_schema: "geofold_demo".into(),
            results_gpkg: args.db.is_none().then(|| args.out.clone()),
            config: None,
        },
        run: RunChoiceArgs {
            run: blocks.runs.first().map(|r| r.run_id.clone()),
            job: None,
        },
        to: report_file,
        target_unit: "mg/L".into(),
        fold: None,
        json: false,
    })?;
    Ok(DemoOutcome {
        exit_code: crate::error::exit::OK,
        inspection,
        blocks,
        buffered,
        takeaway,
        report,
        hint,
    })
}

/// Two sentences on what the runs show, from their numbers as they came
/// out (nothing here is tuned toward a result).
fn takeaway(blocks: &Summary, buffered: &Summary) -> Vec<String> {
    let rmse = |run: &crate::report::RunSummary| run.pooled.get("rmse").unwrap_or(f64::NAN);
    let near = |run: &crate::report::RunSummary| {
        run.fold_distances
            .iter()
            .find(|d| d.kind == "cv" && d.fold.is_none())
            .map_or(f64::NAN, |d| d.median())
    };
    let length = |v: f64| blocks.source.length(v);
    let (Some(grid), Some(random), Some(loo)) = (
        blocks.runs.first(),
        blocks.runs.get(1),
        buffered.runs.first(),
    ) else {
        return Vec::new();
    };
    let first = if rmse(random) < rmse(grid) {
        format!(
            "Random folds test each unit a median {} from a training unit and score RMSE {:.3} mg/L; blocks keep \
             test units {} away (RMSE {:.3}) and the buffered leave-one-out {} (RMSE {:.3}), so random folds \
             understate the error of predicting an unsampled sub-catchment by {:.1}%.",
            length(near(random)),
            rmse(random),
            length(near(grid)),
            rmse(grid),
            length(near(loo)),
            rmse(loo),
            100.0 * (rmse(grid) - rmse(random)) / rmse(grid)
        )
    } else {
        format!(
            "Here random folds (RMSE {:.3} mg/L, test units a median {} from training) did not score better than \
             blocks (RMSE {:.3}, {} away) or the buffered leave-one-out (RMSE {:.3}): with these data the \
             spatial folds did not reveal an optimistic bias.",
            rmse(random),
            length(near(random)),
            rmse(grid),
            length(near(grid)),
            rmse(loo)
        )
    };
    let clustered = grid.held_out_moran.as_ref().is_some_and(|h| {
        h.moran.randomisation.p_two_sided < 0.05
            && h.moran.statistic > h.moran.randomisation.expected
    });
    let second = if clustered {
        "The held-out errors stay spatially clustered, so the model misses something that varies smoothly in \
         space and the features do not measure: read the blocked and buffered scores as the guide to how it will \
         do away from the sampled sub-catchments, and the maps for where it errs."
            .to_string()
    } else {
        "The held-out errors show no spatial clustering, so what the features miss looks like noise rather than \
         an unmeasured spatial pattern."
            .to_string()
    };
    vec![first, second]
}
