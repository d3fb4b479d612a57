//! `geofold history`: the runs of a job (or of every job) with their status
//! and pooled scores, newest first.

use std::fmt::Write as _;

use clap::Args;
use serde::Serialize;

use super::store::{number, StoreArgs};
use crate::adapters::{check_job, StoredRun};
use crate::core::metrics::ALL_SCORES;
use crate::error::Error;

/// `geofold history`.
#[derive(Debug, Clone, Args)]
pub struct HistoryArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    /// Only the runs of this job.
    #[arg(long, value_name = "NAME")]
    pub job: Option<String>,
    /// At most this many runs, newest first.
    #[arg(long, value_name = "N", default_value_t = 20,
          value_parser = clap::value_parser!(u32).range(1..=100_000))]
    pub limit: u32,
    /// Print the runs as one JSON document.
    #[arg(long)]
    pub json: bool,
}

/// The runs found.
#[derive(Debug, Clone, Serialize)]
pub struct History {
    /// The store.
    pub location: String,
    /// The job asked for.
    pub job: Option<String>,
    /// The runs, newest first, with every stored run score (score, statistic, value).
    pub runs: Vec<StoredRun>,
}

/// Runs `geofold history`.
///
/// # Errors
/// Connection and read errors; a bad job label (64).
pub fn run(args: &HistoryArgs) -> Result<History, Error> {
    if let Some(job) = &args.job {
        check_job(job)?;
    }
    let mut store = args.store.open(args.job.as_deref())?;
    let runs = if store.initialised()? {
        store.runs(args.job.as_deref(), args.limit as usize)?
    } else {
        Vec::new()
    };
    Ok(History {
        location: store.location(),
        job: args.job.clone(),
        runs,
    })
}

/// A run's pooled value of `score`.
pub fn pooled(run: &StoredRun, score: &str) -> Option<f64> {
    crate::gates::pooled(&run.scores, score)
}

impl History {
    /// The human table.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let whose = self
            .job
            .as_ref()
            .map_or_else(|| "every job".to_string(), |job| format!("job {job}"));
        if self.runs.is_empty() {
            let _ = writeln!(out, "no runs of {whose} in {}", self.location);
            return out;
        }
        let _ = writeln!(
            out,
            "runs of {whose} in {}, newest first (* = the job's pinned baseline)",
            self.location
        );
        let scores: Vec<&str> = ALL_SCORES
            .iter()
            .map(|s| s.name)
            .filter(|name| self.runs.iter().any(|run| pooled(run, name).is_some()))
            .collect();
        let job_width = self
            .runs
            .iter()
            .map(|r| r.job.len())
            .max()
            .unwrap_or(3)
            .max(3);
        let mut header = format!(
            "  {:<24} {:<job_width$} {:<37} {:<9} {:<7} {:<5} {:>8}",
            "started (UTC)", "job", "run", "status", "scheme", "model", "units"
        );
        for name in &scores {
            let _ = write!(header, " {:>10}", name);
        }
        let _ = writeln!(out, "{header}");
        for run in &self.runs {
            let mut line = format!(
                "{} {:<24} {:<job_width$} {:<37} {:<9} {:<7} {:<5} {:>8}",
                if run.pinned { "*" } else { " " },
                run.started_at,
                run.job,
                run.run_id,
                run.status,
                run.scheme,
                run.model,
                run.units_used.map_or_else(|| "-".into(), |n| n.to_string())
            );
            for name in &scores {
                let _ = write!(line, " {:>10}", number(pooled(run, name)));
            }
            let _ = writeln!(out, "{}", line.trim_end());
            if let Some(primary) = run.primary_run_id {
                let _ = writeln!(out, "    comparison run of {primary}");
            }
            if let Some(message) = &run.error_message {
                let _ = writeln!(out, "    failed: {message}");
            }
        }
        out
    }
}
