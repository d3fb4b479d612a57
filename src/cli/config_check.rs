//! `geofold config-check FILE`: check a job file without connecting to
//! anything: its TOML, every key of every job, and every job's options as
//! `run` would check them. Every problem is listed, each with its line.

use std::fmt::Write as _;
use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use crate::error::{exit, Error};
use crate::jobs::{JobFile, Overrides};
use crate::spec::{ResultsRef, RunSpec, SourceRef};

/// `geofold config-check`.
#[derive(Debug, Clone, Args)]
pub struct ConfigCheckArgs {
    /// The job file.
    #[arg(value_name = "FILE")]
    pub file: PathBuf,
    /// Print the outcome as one JSON document.
    #[arg(long)]
    pub json: bool,
}

/// One job as checked.
#[derive(Debug, Clone, Serialize)]
pub struct JobCheck {
    /// The job.
    pub job: String,
    /// The line of its table.
    pub line: usize,
    /// What it would do, when it is good.
    pub plan: Option<String>,
    /// What is wrong, when it is not (with file, line and key).
    pub error: Option<String>,
}

/// The outcome of the check.
#[derive(Debug, Clone, Serialize)]
pub struct ConfigCheck {
    /// The file.
    pub file: String,
    /// Each job.
    pub jobs: Vec<JobCheck>,
    /// 0 when every job is good, 78 otherwise.
    pub exit_code: i32,
}

fn plan(spec: &RunSpec) -> String {
    let source = match &spec.source {
        SourceRef::Postgis { table, .. } => format!("PostGIS table {table}"),
        SourceRef::Gpkg { file, layer } => format!(
            "{}{}",
            file.display(),
            layer.as_ref().map_or_else(String::new, |l| format!(":{l}"))
        ),
    };
    let results = match &spec.results {
        ResultsRef::Postgis { schema, .. } => format!("PostGIS schema {schema}"),
        ResultsRef::Gpkg { file } => file.display().to_string(),
    };
    let gates: Vec<String> = spec.gates.iter().map(|g| g.to_string()).collect();
    format!(
        "{source} → {results}; {} folds, {} model{}{}",
        spec.scheme,
        spec.model,
        if gates.is_empty() {
            String::new()
        } else {
            format!("; gates {}", gates.join(", "))
        },
        if spec.skip_unchanged {
            "; skips unchanged input"
        } else {
            ""
        }
    )
}

/// Runs `geofold config-check`.
///
/// # Errors
/// A file that cannot be read (66, 74) or that is not a job file at all (78).
pub fn run(args: &ConfigCheckArgs) -> Result<ConfigCheck, Error> {
    let file = JobFile::load(&args.file)?;
    let jobs: Vec<JobCheck> = file
        .jobs
        .iter()
        .map(|job| match file.spec(job, &Overrides::default()) {
            Ok(spec) => JobCheck {
                job: job.name.clone(),
                line: job.line,
                plan: Some(plan(&spec)),
                error: None,
            },
            Err(error) => JobCheck {
                job: job.name.clone(),
                line: job.line,
                plan: None,
                error: Some(error.to_string()),
            },
        })
        .collect();
    let exit_code = if jobs.iter().any(|j| j.error.is_some()) {
        exit::CONFIG
    } else {
        exit::OK
    };
    Ok(ConfigCheck {
        file: args.file.display().to_string(),
        jobs,
        exit_code,
    })
}

impl ConfigCheck {
    /// The human summary: one line per job, problems first on stderr's terms.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        for job in &self.jobs {
            match (&job.plan, &job.error) {
                (_, Some(error)) => {
                    let _ = writeln!(out, "{error}");
                }
                (Some(plan), None) => {
                    let _ = writeln!(
                        out,
                        "{}:{}: job {}: ok: {plan}",
                        self.file, job.line, job.job
                    );
                }
                (None, None) => {}
            }
        }
        let bad = self.jobs.iter().filter(|j| j.error.is_some()).count();
        let _ = writeln!(
            out,
            "{}: {} job(s), {}",
            self.file,
            self.jobs.len(),
            if bad == 0 {
                "all good (nothing was connected to)".to_string()
            } else {
                format!("{bad} with problems")
            }
        );
        out
    }
}
