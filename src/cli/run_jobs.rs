//! `geofold run --config FILE`: every job of a job file in order (or the
//! one `--job` names). A job that fails does not stop the others; the exit
//! code is the worst outcome ([`crate::error::exit::SEVERITY`]).

use std::fmt::Write as _;

use serde::Serialize;

use super::run::RunArgs;
use crate::error::{exit, Error};
use crate::jobs::{JobFile, Overrides};
use crate::pipeline::{Outcome, Unchanged};
use crate::progress::Progress;
use crate::report::Summary;

/// One job's outcome.
#[derive(Debug, Serialize)]
pub struct JobReport {
    /// The job.
    pub job: String,
    /// `succeeded`, `gate_breached`, `unchanged`, `busy` or `failed`.
    pub outcome: &'static str,
    /// Its exit code alone.
    pub exit_code: i32,
    /// The run's summary, when results were written.
    pub summary: Option<Box<Summary>>,
    /// Why nothing ran, with `--skip-unchanged`.
    pub unchanged: Option<Unchanged>,
    /// What went wrong.
    pub error: Option<serde_json::Value>,
}

/// Every job's outcome.
#[derive(Debug, Serialize)]
pub struct JobsReport {
    /// Layout version of this document.
    pub schema_version: u32,
    /// The job file.
    pub file: String,
    /// The worst exit code of the jobs.
    pub exit_code: i32,
    /// The jobs, in file order.
    pub jobs: Vec<JobReport>,
}

/// The JSON error object of `--json` outputs.
pub fn error_json(error: &Error) -> serde_json::Value {
    let sqlstate = match error {
        Error::Database { sqlstate, .. } => sqlstate.clone(),
        _ => None,
    };
    serde_json::json!({
        "kind": error.kind(),
        "message": error.to_string(),
        "sqlstate": sqlstate,
    })
}

/// Runs the jobs of `--config`.
///
/// # Errors
/// Only a job file that cannot be read or parsed at all, or a `--job` it
/// lacks; a job's own failure is its outcome.
pub fn run(
    args: &RunArgs,
    overrides: &Overrides,
    progress: &dyn Progress,
) -> Result<JobsReport, Error> {
    let path = args
        .schedule
        .config
        .as_deref()
        .ok_or_else(|| Error::Internal("run_jobs without --config".into()))?;
    let file = JobFile::load(path)?;
    let jobs = match &args.output.job {
        Some(name) => vec![file.job(name)?],
        None => file.jobs.iter().collect(),
    };
    let mut reports = Vec::new();
    for job in jobs {
        let span = tracing::info_span!("job", job = %job.name);
        let _entered = span.enter();
        let outcome = file
            .spec(job, overrides)
            .and_then(|spec| crate::pipeline::run_with(&spec, progress));
        let report = match outcome {
            Ok(Outcome::Finished(summary)) => JobReport {
                job: job.name.clone(),
                outcome: if summary.exit_code == exit::GATE_BREACHED {
                    "gate_breached"
                } else {
                    "succeeded"
                },
                exit_code: summary.exit_code,
                summary: Some(summary),
                unchanged: None,
                error: None,
            },
            Ok(Outcome::Unchanged(unchanged)) => JobReport {
                job: job.name.clone(),
                outcome: "unchanged",
                exit_code: exit::OK,
                summary: None,
                unchanged: Some(unchanged),
                error: None,
            },
            Err(error) => {
                let code = error.exit_code();
                tracing::error!(exit_code = code, kind = error.kind(), "{error}");
                JobReport {
                    job: job.name.clone(),
                    outcome: if code == exit::BUSY { "busy" } else { "failed" },
                    exit_code: code,
                    summary: None,
                    unchanged: None,
                    error: Some(error_json(&error)),
                }
            }
        };
        tracing::info!(
            outcome = report.outcome,
            exit_code = report.exit_code,
            "job finished"
        );
        reports.push(report);
    }
    Ok(JobsReport {
        schema_version: crate::report::JSON_SCHEMA_VERSION,
        file: path.display().to_string(),
        exit_code: exit::worst(reports.iter().map(|r| r.exit_code)),
        jobs: reports,
    })
}

impl JobsReport {
    /// The human summary: each job's, then one line per job.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        for job in &self.jobs {
            let _ = writeln!(
                out,
                "=== job {}: {} (exit {})",
                job.job,
                job.outcome.replace('_', " "),
                job.exit_code
            );
            if let Some(summary) = &job.summary {
                let _ = writeln!(out, "{}", summary.to_text());
            }
            if let Some(unchanged) = &job.unchanged {
                let _ = writeln!(out, "{}\n", unchanged.to_text());
            }
            if let Some(error) = &job.error {
                let _ = writeln!(out, "error: {}\n", error["message"].as_str().unwrap_or(""));
            }
        }
        let outcomes: Vec<String> = self
            .jobs
            .iter()
            .map(|j| {
                format!(
                    "{} {} ({})",
                    j.job,
                    j.outcome.replace('_', " "),
                    j.exit_code
                )
            })
            .collect();
        let _ = writeln!(
            out,
            "{}: {} job(s): {}; exit {} (the worst)",
            self.file,
            self.jobs.len(),
            outcomes.join(", "),
            self.exit_code
        );
        out
    }
}
