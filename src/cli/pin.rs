//! `geofold pin RUN_ID`: make a successful run its job's baseline for
//! relative drift gates (instead of the median of recent runs);
//! `geofold pin --unpin RUN_ID` undoes it.

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
    /// Unpin the run instead: its job's relative gates go back to the median of its last
    /// --baseline-runs successful runs, and prune may remove it. A run that was not pinned is
    /// left as it is (exit 0).
    #[arg(long)]
    pub unpin: bool,
    /// Print the run as JSON.
    #[arg(long)]
    pub json: bool,
}

/// The run pinned or unpinned.
#[derive(Debug, Clone, Serialize)]
pub struct Pinned {
    /// The store.
    pub location: String,
    /// The run, as stored now.
    pub run: StoredRun,
    /// Whether the command changed its pin.
    pub changed: bool,
}

impl Pinned {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let run = &self.run;
        match (run.pinned, self.changed) {
            (true, _) => format!(
                "pinned run {} (started {}) as the baseline of job {} in {}; relative gates of the job now \
                 compare with it",
                run.run_id, run.started_at, run.job, self.location
            ),
            (false, true) => format!(
                "unpinned run {} of job {} in {}; relative gates of the job now compare with the median of \
                 its recent successful runs",
                run.run_id, run.job, self.location
            ),
            (false, false) => format!(
                "run {} of job {} in {} was not pinned; nothing changed",
                run.run_id, run.job, self.location
            ),
        }
    }
}

/// Runs `geofold pin`.
///
/// # Errors
/// A bad run id (64); a run that is unknown, or (to pin) failed or a
/// comparison run (64); connection errors.
pub fn run(args: &PinArgs) -> Result<Pinned, Error> {
    let id = run_id(&args.run)?;
    let mut store = args.store.open(args.job.as_deref())?;
    let location = store.location();
    if !store.initialised()? {
        return Err(Error::Usage(format!("run {id}: {location} holds no runs")));
    }
    let changed = store.set_pinned(id, !args.unpin)?;
    let run = store
        .runs(None, usize::MAX)?
        .into_iter()
        .find(|run| run.run_id == id);
    match run {
        Some(run) if changed || args.unpin => Ok(Pinned {
            location,
            run,
            changed,
        }),
        Some(_) => Err(Error::Usage(format!(
            "run {id} is not a successful primary run in {location}: only those can be pinned"
        ))),
        None => Err(Error::Usage(format!("run {id} is not in {location}"))),
    }
}
