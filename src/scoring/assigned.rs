//! A run made with `--assign-only`, read back for `geofold score` through the
//! store-neutral [`ReadBack::read_rows`](crate::adapters::readback::ReadBack::read_rows),
//! so both stores give the same record from one piece of code.

use uuid::Uuid;

use crate::adapters::history::Store;
use crate::error::Error;
use crate::readback::{Row, RunRecord};
use crate::results::{FOLD_EXCLUSIONS, FOLD_REGIONS, HELD_OUT, RUNS};

/// A fold region of repetition 1, as recorded (for the job's map layers).
pub struct RecordedRegion {
    /// Fold, from 1.
    pub fold: i64,
    /// Kind (block, hexagon, cluster…).
    pub kind: String,
    /// Label.
    pub label: String,
    /// Units in it.
    pub units: i64,
    /// Outline.
    pub geometry: geo_types::MultiPolygon<f64>,
}

/// A run with its recorded folds.
pub struct AssignedRun {
    /// Its `runs` row.
    pub record: RunRecord,
    /// Its id.
    pub run_id: Uuid,
    /// The primary run of a comparison run.
    pub primary_run_id: Option<Uuid>,
    /// `(unit_id, repetition, fold)` of each held-out row, 1-based.
    pub assignments: Vec<(String, i64, i64)>,
    /// `(repetition, fold, unit_id)` of each exclusion, 1-based.
    pub exclusions: Vec<(i64, i64, String)>,
    /// The fold regions of repetition 1, in the order recorded.
    pub regions: Vec<RecordedRegion>,
}

/// The `runs` row of `run_id`.
///
/// # Errors
/// [`Error::NotFound`] for an unknown run; database and file errors.
pub fn run_record(store: &mut dyn Store, run_id: Uuid) -> Result<RunRecord, Error> {
    let mut found = None;
    store.read_rows(&RUNS, "run_id", &[run_id.to_string()], &mut |values| {
        found = Some(RunRecord::from_row(&Row::new(&RUNS, &values)));
        Ok(())
    })?;
    found.ok_or_else(|| Error::NotFound {
        what: format!("run {run_id} in {}", store.location()),
    })
}

/// The run `run_id` with its `held_out` folds, exclusions and the regions of
/// repetition 1.
///
/// # Errors
/// As [`run_record`].
pub fn assigned_run(store: &mut dyn Store, run_id: Uuid) -> Result<AssignedRun, Error> {
    let record = run_record(store, run_id)?;
    let key = [record.run_id.clone()];
    let mut run = AssignedRun {
        primary_run_id: record
            .primary_run_id
            .as_deref()
            .and_then(|id| Uuid::parse_str(id).ok()),
        record,
        run_id,
        assignments: Vec::new(),
        exclusions: Vec::new(),
        regions: Vec::new(),
    };
    store.read_rows(&HELD_OUT, "run_id", &key, &mut |values| {
        let row = Row::new(&HELD_OUT, &values);
        run.assignments.push((
            row.text_or_empty("unit_id"),
            row.int("repetition").unwrap_or(0),
            row.int("fold").unwrap_or(0),
        ));
        Ok(())
    })?;
    store.read_rows(&FOLD_EXCLUSIONS, "run_id", &key, &mut |values| {
        let row = Row::new(&FOLD_EXCLUSIONS, &values);
        run.exclusions.push((
            row.int("repetition").unwrap_or(0),
            row.int("fold").unwrap_or(0),
            row.text_or_empty("unit_id"),
        ));
        Ok(())
    })?;
    store.read_rows(&FOLD_REGIONS, "run_id", &key, &mut |values| {
        let row = Row::new(&FOLD_REGIONS, &values);
        if let (Some(1), Some(geometry)) = (row.int("repetition"), row.geometry("geom")) {
            run.regions.push(RecordedRegion {
                fold: row.int("fold").unwrap_or(0),
                kind: row.text_or_empty("kind"),
                label: row.text_or_empty("label"),
                units: row.int("units").unwrap_or(0),
                geometry: geometry.clone(),
            });
        }
        Ok(())
    })?;
    Ok(run)
}
