//! `geofold pin RUN_ID`: make a successful run its job's baseline for
//! relative drift gates (instead of the median of recent runs).

use clap::Args;
use serde::Serialize;

use super::store::{run_id, StoreArgs};
use crate::adapters::StoredRun;
use crate::error::Error;

/// `geofold pin`.
#[derive(Debug, Clone, Args)]
pub struct PinArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    /// With --config: the job whose results store holds the run.
    #[arg(long, value_name = "NAME", requires = "config")]
    pub job: Option<String>,
    /// The run to pin: a successful primary run (geofold history lists them). Its job's other
    /// runs are unpinned; prune never removes it.
    #[arg(value_name = "RUN_ID")]
    pub run: String,
    /// Print the pinned run as JSON.
    #[arg(long)]
    pub json: bool,
}

/// The run pinned.
#[derive(Debug, Clone, Serialize)]
pub struct Pinned {
    /// The store.
    pub location: String,
    /// The run, as stored now.
    pub run: StoredRun,
}

impl Pinned {
    /// The human summary.
    pub fn to_text(&self) -> String {
        format!(
            "pinned run {} (started {}) as the baseline of job {} in {}; relative gates of the job now \
             compare with it",
            self.run.run_id, self.run.started_at, self.run.job, self.location
        )
    }
}

/// Runs `geofold pin`.
///
/// # Errors
/// A bad run id (64); a run that is unknown, failed or a comparison run (64);
/// connection errors.
pub fn run(args: &PinArgs) -> Result<Pinned, Error> {
    let id = run_id(&args.run)?;
    let mut store = args.store.open(args.job.as_deref())?;
    if !store.initialised()? {
        return Err(Error::Usage(format!(
            "run {id}: {} holds no runs",
            store.location()
        )));
    }
    let run = store.pin(id)?;
    Ok(Pinned {
        location: store.location(),
        run,
    })
}
