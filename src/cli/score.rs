//! `geofold score`: load the held-out predictions of a model fitted outside
//! geofold (R, Python, SAS…) for a run made with `geofold run --assign-only`,
//! check them against the run's recorded folds and score them as a built-in
//! model's run (see [`crate::scoring`]).

use std::path::PathBuf;

use clap::Args;
use uuid::Uuid;

use crate::error::Error;
use crate::report::Summary;
use crate::scoring::{PredictionsRef, ScoreSpec};
use crate::spec::{Limits, ResultsRef};

/// `geofold score`.
///
/// The predictions table or layer has one row per unit and repetition with the columns
/// unit_id (the source id), repetition (from 1; may be left out when the run has one),
/// fold (from 1, as recorded in fold_members) and predicted (a probability of 1 for a binary
/// family, an expected count for counts). Every unit of the run must appear exactly once per
/// repetition, in its recorded fold; otherwise every problem is listed, nothing is written
/// and the run stays assigned (exit 65).
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP)]
pub struct ScoreArgs {
    /// The run made with geofold run --assign-only.
    #[arg(long, value_name = "RUN_ID")]
    pub run: Uuid,
    /// The predictions: SCHEMA.TABLE in the results database (PostGIS), or a table or
    /// layer in the results GeoPackage (or in --predictions-gpkg).
    #[arg(long, value_name = "TABLE")]
    pub predictions: String,
    /// The predictions are in this GeoPackage file rather than in the results store.
    #[arg(long, value_name = "FILE")]
    pub predictions_gpkg: Option<PathBuf>,
    /// PostgreSQL connection of the results schema (libpq URI or key=value string).
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// PostGIS schema holding the run.
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// GeoPackage file holding the run (instead of PostGIS).
    #[arg(long, value_name = "FILE")]
    pub results_gpkg: Option<PathBuf>,
    /// Print the summary as one JSON document on stdout.
    #[arg(long)]
    pub json: bool,
    /// Longest wait for a lock another session or program holds, in seconds; then exit 75.
    #[arg(long, value_name = "SECONDS", default_value_t = crate::spec::DEFAULT_LOCK_TIMEOUT_S)]
    pub lock_timeout: f64,
    /// Wait up to this many seconds for a run of the same job to finish (default: exit 2).
    #[arg(long, value_name = "SECONDS", default_value_t = 0.0)]
    pub wait: f64,
}

impl ScoreArgs {
    /// What these options ask for.
    ///
    /// # Errors
    /// [`Error::Usage`] for a bad wait.
    pub fn spec(&self) -> Result<ScoreSpec, Error> {
        for (option, value) in [("--lock-timeout", self.lock_timeout), ("--wait", self.wait)] {
            if !(value.is_finite() && (0.0..=crate::spec::MAX_WAIT_S).contains(&value)) {
                return Err(Error::Usage(format!(
                    "{option} must be a number of seconds from 0 to {}, got {value}",
                    crate::spec::MAX_WAIT_S
                )));
            }
        }
        let results = match &self.results_gpkg {
            Some(file) => ResultsRef::Gpkg { file: file.clone() },
            None => ResultsRef::Postgis {
                db: self.db.clone(),
                schema: self.results_schema.clone(),
            },
        };
        let table = self.predictions.trim().to_string();
        let predictions = match &self.predictions_gpkg {
            Some(file) => PredictionsRef::Gpkg {
                file: file.clone(),
                table,
            },
            None => PredictionsRef::InStore(table),
        };
        Ok(ScoreSpec {
            results,
            run_id: self.run,
            predictions,
            limits: Limits {
                lock_timeout_s: self.lock_timeout.max(0.001),
                statement_timeout_s: crate::spec::DEFAULT_STATEMENT_TIMEOUT_S,
                wait_s: self.wait,
            },
        })
    }
}

/// Runs `geofold score` and returns its summary.
///
/// # Errors
/// Any [`Error`]; its exit code is what the process returns.
pub fn run(args: &ScoreArgs) -> Result<Summary, Error> {
    crate::scoring::score(&args.spec()?)
}
