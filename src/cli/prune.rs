//! `geofold prune`: remove runs beyond an age or a count, in one
//! transaction, and report what went and the space it freed.
//!
//! # What is never removed
//! - a job's pinned baseline run;
//! - a job's latest successful primary run (its map layers show it);
//! - a run that is still `running`.
//!
//! A comparison run (random folds on the same rows) goes with its primary
//! run; `--keep N` counts primary runs. Everything else the rule selects is
//! removed: the run's row in `runs` and every row of it in every results table.

use std::collections::BTreeSet;
use std::fmt::Write as _;

use clap::Args;
use serde::Serialize;
use time::format_description::well_known::Rfc3339;
use time::OffsetDateTime;
use uuid::Uuid;

use super::store::StoreArgs;
use crate::adapters::history::Deleted;
use crate::adapters::{check_job, StoredRun};
use crate::error::Error;

/// Largest `--older-than`: 100 years.
pub const MAX_DAYS: f64 = 36_525.0;

/// `geofold prune`.
#[derive(Debug, Clone, Args)]
#[command(group(clap::ArgGroup::new("rule").required(true).args(["older_than", "keep"])))]
pub struct PruneArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    /// Remove runs that started more than this many days ago (may be fractional; above 0, at
    /// most 36525).
    #[arg(long, value_name = "DAYS")]
    pub older_than: Option<f64>,
    /// Keep the newest N primary runs of each job (at least 1) and remove the older ones.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    pub keep: Option<u32>,
    /// Only the runs of this job.
    #[arg(long, value_name = "NAME")]
    pub job: Option<String>,
    /// Report what would be removed, and remove nothing (the deletion runs and is rolled back).
    #[arg(long)]
    pub dry_run: bool,
    /// Print the outcome as one JSON document.
    #[arg(long)]
    pub json: bool,
}

/// Which runs a rule selects.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Rule {
    /// Started more than this many days before now.
    OlderThan(f64),
    /// Beyond the newest N primary runs of each job.
    Keep(usize),
}

/// A run kept although the rule selected it, and why.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spared {
    /// The run.
    pub run_id: Uuid,
    /// Its job.
    pub job: String,
    /// Why it stays.
    pub reason: &'static str,
}

/// The runs a rule removes from a history (newest first, as stores return
/// it), and those it spares.
///
/// # Errors
/// A `started_at` that is not RFC 3339 (70: stores write it so).
pub fn select(
    history: &[StoredRun],
    rule: Rule,
    now: OffsetDateTime,
) -> Result<(Vec<Uuid>, Vec<Spared>), Error> {
    let mut latest_successful: BTreeSet<Uuid> = BTreeSet::new();
    let mut seen_jobs: BTreeSet<&str> = BTreeSet::new();
    for run in history
        .iter()
        .filter(|r| r.status == "succeeded" && r.primary_run_id.is_none())
    {
        if seen_jobs.insert(&run.job) {
            latest_successful.insert(run.run_id);
        }
    }
    let mut selected: BTreeSet<Uuid> = BTreeSet::new();
    let mut spared = Vec::new();
    let mut counts: std::collections::BTreeMap<&str, usize> = Default::default();
    let primaries = history.iter().filter(|r| {
        r.primary_run_id.is_none() || !history.iter().any(|p| Some(p.run_id) == r.primary_run_id)
    });
    for run in primaries {
        let chosen = match rule {
            Rule::OlderThan(days) => {
                let started = OffsetDateTime::parse(&run.started_at, &Rfc3339).map_err(|e| {
                    Error::Internal(format!(
                        "run {} has a start time {:?} that is not RFC 3339: {e}",
                        run.run_id, run.started_at
                    ))
                })?;
                (now - started).as_seconds_f64() > days * 86_400.0
            }
            Rule::Keep(n) => {
                let count = counts.entry(&run.job).or_default();
                *count += 1;
                *count > n
            }
        };
        if !chosen {
            continue;
        }
        let reason = if run.pinned {
            Some("the job's pinned baseline")
        } else if latest_successful.contains(&run.run_id) {
            Some("the job's latest successful run, which its map layers show")
        } else if run.status == "running" {
            Some("still running")
        } else {
            None
        };
        match reason {
            Some(reason) => spared.push(Spared {
                run_id: run.run_id,
                job: run.job.clone(),
                reason,
            }),
            None => {
                selected.insert(run.run_id);
            }
        }
    }
    let mut removed: Vec<Uuid> = Vec::new();
    for run in history {
        let goes = selected.contains(&run.run_id)
            || (run
                .primary_run_id
                .is_some_and(|primary| selected.contains(&primary))
                && run.status != "running");
        if goes {
            removed.push(run.run_id);
        }
    }
    Ok((removed, spared))
}

/// A removed run, as listed.
#[derive(Debug, Clone, Serialize)]
pub struct Removed {
    /// Its id.
    pub run_id: Uuid,
    /// Its job.
    pub job: String,
    /// When it started.
    pub started_at: String,
    /// Its status.
    pub status: String,
}

/// What `prune` did.
#[derive(Debug, Clone, Serialize)]
pub struct Pruned {
    /// The store.
    pub location: String,
    /// True for `--dry-run`: nothing was removed.
    pub dry_run: bool,
    /// The runs removed (or that would be).
    pub removed: Vec<Removed>,
    /// Runs the rule selected but that stay.
    pub spared: Vec<Spared>,
    /// Rows removed per table, bytes freed.
    pub deleted: Option<Deleted>,
}

/// Runs `geofold prune`.
///
/// # Errors
/// Bad bounds (64); connection and database errors (nothing removed then).
pub fn run(args: &PruneArgs) -> Result<Pruned, Error> {
    let rule = match (args.older_than, args.keep) {
        (Some(days), None) => {
            if !(days.is_finite() && days > 0.0 && days <= MAX_DAYS) {
                return Err(Error::Usage(format!(
                    "--older-than must be a number of days above 0 and at most {MAX_DAYS}, got {days}"
                )));
            }
            Rule::OlderThan(days)
        }
        (None, Some(n)) => Rule::Keep(n as usize),
        _ => {
            return Err(Error::Usage(
                "give one of --older-than DAYS and --keep N".into(),
            ))
        }
    };
    if let Some(job) = &args.job {
        check_job(job)?;
    }
    let mut store = args.store.open(args.job.as_deref())?;
    let location = store.location();
    if !store.initialised()? {
        return Ok(Pruned {
            location,
            dry_run: args.dry_run,
            removed: Vec::new(),
            spared: Vec::new(),
            deleted: None,
        });
    }
    let history = store.runs(args.job.as_deref(), usize::MAX)?;
    let (ids, spared) = select(&history, rule, OffsetDateTime::now_utc())?;
    let deleted = store.delete_runs(&ids, !args.dry_run)?;
    let removed = history
        .iter()
        .filter(|run| deleted.run_ids.contains(&run.run_id))
        .map(|run| Removed {
            run_id: run.run_id,
            job: run.job.clone(),
            started_at: run.started_at.clone(),
            status: run.status.clone(),
        })
        .collect();
    tracing::info!(
        runs = deleted.run_ids.len(),
        bytes = deleted.bytes,
        dry_run = args.dry_run,
        "pruned runs"
    );
    Ok(Pruned {
        location,
        dry_run: args.dry_run,
        removed,
        spared,
        deleted: Some(deleted),
    })
}

impl Pruned {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let verb = if self.dry_run {
            "would remove"
        } else {
            "removed"
        };
        let _ = writeln!(
            out,
            "{}: {verb} {} run(s)",
            self.location,
            self.removed.len()
        );
        for run in &self.removed {
            let _ = writeln!(
                out,
                "  {} {} {} ({})",
                run.started_at, run.job, run.run_id, run.status
            );
        }
        if let Some(deleted) = &self.deleted {
            let rows: Vec<String> = deleted
                .rows
                .iter()
                .filter(|(_, n)| *n > 0)
                .map(|(table, n)| format!("{table} {n}"))
                .collect();
            if !rows.is_empty() {
                let _ = writeln!(out, "rows: {}", rows.join(", "));
            }
            let _ = writeln!(
                out,
                "space freed: {} bytes ({})",
                deleted.bytes, deleted.bytes_meaning
            );
        }
        for spared in &self.spared {
            let _ = writeln!(
                out,
                "kept {} of job {}: {}",
                spared.run_id, spared.job, spared.reason
            );
        }
        if self.dry_run {
            let _ = writeln!(out, "dry run: nothing was removed");
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(id: u128, job: &str, day: u32, status: &str) -> StoredRun {
        StoredRun {
            run_id: Uuid::from_u128(id),
            job: job.into(),
            primary_run_id: None,
            status: status.into(),
            started_at: format!("2026-03-{day:02}T01:00:00.000Z"),
            finished_at: None,
            scheme: "grid".into(),
            model: "ols".into(),
            units_used: None,
            input_fingerprint: None,
            parameters: serde_json::Value::Null,
            error_message: None,
            pinned: false,
            scores: Vec::new(),
        }
    }

    fn ids(list: &[u128]) -> Vec<Uuid> {
        list.iter().map(|&i| Uuid::from_u128(i)).collect()
    }

    /// Newest first, as stores return it: job a on days 9..1, job b on days 8, 2.
    fn history() -> Vec<StoredRun> {
        let mut comparison = run(71, "a", 7, "succeeded");
        comparison.primary_run_id = Some(Uuid::from_u128(7));
        let mut pinned = run(3, "a", 3, "succeeded");
        pinned.pinned = true;
        vec![
            run(9, "a", 9, "failed"),
            run(8, "b", 8, "running"),
            run(7, "a", 7, "succeeded"),
            comparison,
            run(5, "a", 5, "succeeded"),
            pinned,
            run(2, "b", 2, "succeeded"),
            run(1, "a", 1, "failed"),
        ]
    }

    #[test]
    fn keep_counts_primary_runs_per_job_and_spares_what_must_stay() {
        let now = OffsetDateTime::parse("2026-03-10T00:00:00Z", &Rfc3339).unwrap();
        let (removed, spared) = select(&history(), Rule::Keep(1), now).unwrap();
        // a keeps 9 (newest); 7 is its latest success (spared), 3 pinned (spared);
        // b keeps 8; 2 is b's latest success (spared).
        assert_eq!(removed, ids(&[5, 1]));
        let reasons: Vec<(Uuid, &str)> = spared.iter().map(|s| (s.run_id, s.reason)).collect();
        assert_eq!(reasons.len(), 3);
        assert!(reasons[0].1.contains("latest successful"));
        assert_eq!(
            reasons[1],
            (Uuid::from_u128(3), "the job's pinned baseline")
        );
    }

    #[test]
    fn older_than_goes_by_start_time_and_takes_comparison_runs_along() {
        let now = OffsetDateTime::parse("2026-03-10T01:00:00Z", &Rfc3339).unwrap();
        let mut history = history();
        history.insert(0, run(10, "a", 10, "succeeded"));
        // Older than 2.5 days: started before 2026-03-07T13:00.
        let (removed, _) = select(&history, Rule::OlderThan(2.5), now).unwrap();
        assert_eq!(
            removed,
            ids(&[7, 71, 5, 1]),
            "8 running, 3 pinned, 2 b's latest"
        );
        let (removed, _) = select(&history, Rule::OlderThan(30.0), now).unwrap();
        assert!(removed.is_empty());
    }
}
