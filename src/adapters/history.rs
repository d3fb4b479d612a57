//! Reading a job's history back out of a results store, and removing old
//! runs: what `history`, `compare`, `pin` and `prune` need beyond
//! [`ResultStore`]. Both stores implement [`RunHistory`] (in their
//! `history` modules); [`Store`] is these two traits and
//! [`ReadBack`] together.

use serde::Serialize;
use uuid::Uuid;

use super::readback::ReadBack;
use super::ResultStore;
use crate::error::Error;
use crate::results::{TableDef, RUNS, TABLES};

/// One score of one fold.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FoldScore {
    /// Repetition, from 1.
    pub repetition: i64,
    /// Fold, from 1.
    pub fold: i64,
    /// Held-out units of the fold.
    pub n_test: i64,
    /// The score's name.
    pub score: String,
    /// Its value; None where undefined.
    pub value: Option<f64>,
}

/// The error of one unit in one run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnitError {
    /// The source id, as text.
    pub unit_id: String,
    /// Mean absolute error of its held-out predictions (over repetitions).
    pub mean_abs_error: f64,
}

/// What deleting runs removed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Deleted {
    /// The runs removed (a subset of those asked for: pinned and running
    /// runs are never removed).
    pub run_ids: Vec<Uuid>,
    /// Rows removed per table.
    pub rows: Vec<(String, u64)>,
    /// Bytes freed, as [`Deleted::bytes_meaning`] says.
    pub bytes: u64,
    /// What `bytes` measures in this store.
    pub bytes_meaning: &'static str,
    /// False when the deletion was rolled back (a dry run).
    pub committed: bool,
}

/// History reads and retention of a results store.
pub trait RunHistory {
    /// True once the store holds the results tables (a new schema or file
    /// has no history yet).
    ///
    /// # Errors
    /// Database or file errors.
    fn initialised(&mut self) -> Result<bool, Error>;
    /// Every fold score of a run, by repetition, fold and score.
    ///
    /// # Errors
    /// Database or file errors.
    fn fold_scores(&mut self, run_id: Uuid) -> Result<Vec<FoldScore>, Error>;
    /// Each unit's mean absolute held-out error in a run, by unit id.
    ///
    /// # Errors
    /// Database or file errors.
    fn unit_errors(&mut self, run_id: Uuid) -> Result<Vec<UnitError>, Error>;
    /// Deletes the runs and every row of theirs in one transaction, except
    /// runs that are pinned or still running when the transaction looks;
    /// with `commit` false, rolls back and reports what it would remove.
    ///
    /// # Errors
    /// Database or file errors (nothing is removed then).
    fn delete_runs(&mut self, run_ids: &[Uuid], commit: bool) -> Result<Deleted, Error>;
}

/// A results store with its history and its read-back.
pub trait Store: ResultStore + RunHistory + ReadBack {}

impl<T: ResultStore + RunHistory + ReadBack> Store for T {}

/// The tables holding rows of runs (by `run_id`, or by `analysis_id` for a
/// run's diagnostics), children first, `runs` last; delete by each table's
/// [`TableDef::owner_column`].
pub fn tables_by_run() -> Vec<&'static TableDef> {
    let mut tables: Vec<&'static TableDef> = TABLES
        .iter()
        .copied()
        .filter(|t| {
            t.name != RUNS.name && matches!(t.owner_column(), Some("run_id" | "analysis_id"))
        })
        .collect();
    tables.reverse();
    tables.push(&RUNS);
    tables
}
