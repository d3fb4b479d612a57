//! `geofold score`: the held-out predictions of a model fitted outside
//! geofold, checked against a run's recorded folds and scored like a
//! built-in model's.
//!
//! # The loop
//! 1. `geofold run … --assign-only` records a run (model `external`, status
//!    `assigned`): its folds as `held_out` rows without predictions (the view
//!    `fold_members` lists them), its exclusions and regions, and how to read
//!    the source again (`runs.parameters.assignment`).
//! 2. The analyst fits each fold elsewhere and loads the held-out predictions
//!    into a table or layer with the columns `unit_id`, `repetition` (may be
//!    left out when the run has one repetition), `fold` and `predicted`.
//! 3. [`score`] reads the run's source again and refuses it when its units
//!    changed (the input fingerprint differs), reads the recorded folds and
//!    the predictions, and checks that every unit of the run has exactly one
//!    prediction per repetition, in its recorded fold, with no unknown ids and
//!    a value that fits the family (a probability for binary, a non-negative
//!    expected count for counts). Every problem is listed (exit 65), nothing
//!    is written and the run stays `assigned`.
//! 4. It then writes what the run would have had (the scored `held_out` rows
//!    replacing the unscored ones, per-unit summaries, fold and run scores
//!    with the training-mean baseline) and marks it `succeeded`, in one
//!    transaction; the job's map layers show it as they show a built-in
//!    model's run.

use std::collections::HashMap;
use std::path::PathBuf;

use uuid::Uuid;

use self::assigned::AssignedRun;

use crate::adapters::gpkg::scoring::read_predictions_file;
use crate::adapters::history::Store;
use crate::adapters::{ColumnSpec, PredictionRow};
use crate::core::buckets::Buckets;
use crate::core::folds::{build_scheme, FoldSet, Region};
use crate::core::matching::Matching;
use crate::core::metrics::Family;
use crate::core::models::design::UnseenPolicy;
use crate::core::options::Options;
use crate::core::units::Dataset;
use crate::core::validate::{score_predictions, Predicted};
use crate::error::{Error, Location};
use crate::pipeline::{attach_held_out_moran, distance_summaries, open_source, read_units};
use crate::readback::load::nearest_distances;
use crate::report::Summary;
use crate::results::rows::{FinishedRun, RunRecord, Stage};
use crate::spec::{Limits, ResultsRef, RunSpec, SourceRef, DEFAULT_RESIDUAL_WEIGHTS};

/// Where the predictions are.
#[derive(Debug, Clone, PartialEq)]
pub enum PredictionsRef {
    /// A table in the results store's database or file (`schema.table` in
    /// PostGIS, a table or layer name in the GeoPackage).
    InStore(String),
    /// A table or layer of another GeoPackage file.
    Gpkg {
        /// The file.
        file: PathBuf,
        /// The table or layer.
        table: String,
    },
}

impl PredictionsRef {
    fn display(&self) -> String {
        match self {
            PredictionsRef::InStore(table) => table.clone(),
            PredictionsRef::Gpkg { file, table } => format!("{}:{table}", file.display()),
        }
    }
}

/// What `geofold score` does.
#[derive(Debug, Clone)]
pub struct ScoreSpec {
    /// The results store holding the run.
    pub results: ResultsRef,
    /// The run.
    pub run_id: Uuid,
    /// The held-out predictions.
    pub predictions: PredictionsRef,
    /// Bounds on waits.
    pub limits: Limits,
}

fn open_store(spec: &ScoreSpec) -> Result<Box<dyn Store>, Error> {
    if let ResultsRef::Gpkg { file } = &spec.results {
        if !file.exists() {
            return Err(Error::NotFound {
                what: format!("results file {}", file.display()),
            });
        }
    }
    crate::pipeline::open_store(&spec.results, &spec.limits)
}

/// Scores run `spec.run_id` with the predictions of `spec.predictions`.
///
/// # Errors
/// [`Error::NotFound`] for an unknown run or table; [`Error::Usage`] for a
/// run not awaiting predictions; [`Error::Input`] for a changed source or
/// predictions that miss, repeat or misplace units (every problem listed);
/// database and file errors. Nothing is written on error.
pub fn score(spec: &ScoreSpec) -> Result<Summary, Error> {
    let mut store = open_store(spec)?;
    let job = assigned::run_record(store.as_mut(), spec.run_id)?.job;
    store.lock_job(&job, spec.limits.wait())?;
    // Read again under the lock: another session may have scored it meanwhile.
    let run = assigned::assigned_run(store.as_mut(), spec.run_id)?;
    if run.record.status != "assigned" {
        return Err(Error::Usage(format!(
            "run {} has status {}: only a run made with geofold run --assign-only, not yet scored, takes \
             predictions",
            spec.run_id, run.record.status
        )));
    }
    let family = Family::from_name(&run.record.family).ok_or_else(|| {
        Error::Internal(format!(
            "run {} has an unknown family {}",
            run.run_id, run.record.family
        ))
    })?;
    let run_spec = source_spec(&run, spec)?;
    let mut source = open_source(
        &run_spec.source,
        &run_spec.columns,
        run_spec.distance_srid,
        &run_spec.limits,
    )?;
    let info = source.info().clone();
    let data = read_units(
        source.as_mut(),
        &info,
        &job,
        run_spec.strict,
        false,
        &crate::progress::Silent,
    )?;
    drop(source);
    let fingerprint = data.fingerprint();
    if run.record.input_fingerprint.as_deref() != Some(fingerprint.as_str()) {
        return Err(Error::input(
            &info.table,
            None,
            None,
            format!(
                "the units changed since run {} assigned its folds (input fingerprint differs): the predictions \
                 cannot be checked against the recorded folds; assign the folds again",
                run.run_id
            ),
        ));
    }
    let sets = recorded_folds(&run, &data)?;
    let rows = match &spec.predictions {
        PredictionsRef::InStore(table) => store.read_predictions(table)?,
        PredictionsRef::Gpkg { file, table } => read_predictions_file(file, table)?,
    };
    let predicted = check_predictions(&spec.predictions.display(), &data, &sets, family, &rows)?;
    let predicted: Vec<Predicted> = sets
        .into_iter()
        .zip(predicted)
        .map(|(folds, predicted)| Predicted {
            coefficients: vec![Vec::new(); folds.k as usize],
            folds,
            predicted,
        })
        .collect();
    let mut outcome = score_predictions(&data, family, predicted);
    // The distance match of a run given prediction locations, from the
    // distances stored when its folds were assigned.
    let (cv, prediction) = nearest_distances(store.as_mut(), &run.run_id.to_string())?;
    // For the summary, the test-to-training distances as the assignment
    // stored them (the same seeded figures; the scored write keeps its rows).
    outcome.fold_distances = distance_summaries(
        &outcome,
        &data.points,
        &Buckets::new(&data.points),
        run.record.seed as u64,
        (!prediction.is_empty()).then_some(prediction.as_slice()),
    );
    if !prediction.is_empty() {
        let cv: Vec<&[f64]> = cv.iter().map(Vec::as_slice).collect();
        outcome.matching = Some(Matching::new(prediction, &cv));
    }
    attach_held_out_moran(
        std::slice::from_mut(&mut outcome),
        &data,
        &DEFAULT_RESIDUAL_WEIGHTS,
        run.record.seed as u64,
    );
    let record = RunRecord {
        run_id: run.run_id,
        job: run.record.job.clone(),
        primary_run_id: run.primary_run_id,
        started_at_micros: 0,
        scheme: run.record.scheme.clone(),
        model: run.record.model.clone(),
        family: family.name(),
        parameters: run.record.parameters.clone(),
        seed: run.record.seed as u64,
        repeats: run.record.repeats as u32,
        folds: run.record.folds as u32,
        tool_version: run.record.tool_version.clone(),
        session: String::new(),
        input_fingerprint: fingerprint.clone(),
    };
    store.prepare(&info)?;
    let finished = [FinishedRun {
        record: &record,
        outcome: &outcome,
        stage: Stage::Scored,
        late: None,
    }];
    let report = store.commit(&info, &data, &finished)?;
    let scheme_options: Options = run.record.parameters["scheme"]
        .as_object()
        .cloned()
        .unwrap_or_default();
    let described = build_scheme(&run.record.scheme, &scheme_options)
        .map(|scheme| scheme.describe(&|value| info.length(value)))
        .unwrap_or_else(|_| run.record.scheme.clone());
    Ok(Summary::new(
        &info,
        &data,
        std::slice::from_ref(&record),
        std::slice::from_ref(&outcome),
        &[described],
        &format!(
            "a model fitted outside geofold (held-out predictions from {})",
            spec.predictions.display()
        ),
        run.record.parameters["exclusion-radius"].as_f64(),
        report,
    ))
}

/// The specification that reads the run's source again, from what
/// `--assign-only` recorded (a PostGIS source in the results' database).
fn source_spec(run: &AssignedRun, spec: &ScoreSpec) -> Result<RunSpec, Error> {
    let recorded = &run.record.parameters["assignment"];
    let missing = || Error::Store {
        store: format!("run {}", run.run_id),
        problem: "it records no source to read again (runs.parameters.assignment)".into(),
    };
    let mut source: SourceRef =
        serde_json::from_value(recorded["source"].clone()).map_err(|_| missing())?;
    let columns: ColumnSpec =
        serde_json::from_value(recorded["columns"].clone()).map_err(|_| missing())?;
    if let (SourceRef::Postgis { db, .. }, ResultsRef::Postgis { db: results_db, .. }) =
        (&mut source, &spec.results)
    {
        db.clone_from(results_db);
    }
    Ok(RunSpec {
        source,
        columns,
        distance_srid: recorded["distance_srid"]
            .as_i64()
            .and_then(|v| i32::try_from(v).ok()),
        assume_metres: false,
        strict: recorded["strict"].as_bool().unwrap_or(false),
        scheme: run.record.scheme.clone(),
        scheme_options: Options::new(),
        model: run.record.model.clone(),
        model_options: Options::new(),
        exclusion_radius: None,
        prediction: None,
        repeats: run.record.repeats as u32,
        seed: run.record.seed as u64,
        compare_random: false,
        results: spec.results.clone(),
        job: Some(run.record.job.clone()),
        limits: spec.limits,
        assign_only: true,
        unseen_levels: UnseenPolicy::default(),
        residual_weights: None,
        gates: Vec::new(),
        baseline_runs: crate::gates::DEFAULT_BASELINE_RUNS,
        skip_unchanged: false,
    })
}

/// The fold sets of every repetition from the recorded `held_out` rows,
/// exclusions and regions (regions kept for repetition 1, for the maps).
fn recorded_folds(run: &AssignedRun, data: &Dataset) -> Result<Vec<FoldSet>, Error> {
    let index = id_index(data);
    let repeats = run.record.repeats.max(1) as usize;
    let k = u32::try_from(run.record.folds).unwrap_or(0);
    let broken = |what: String| Error::Store {
        store: format!("run {}", run.run_id),
        problem: format!("its recorded folds do not match its units: {what}"),
    };
    let mut fold_of = vec![vec![u32::MAX; data.len()]; repeats];
    for (unit_id, repetition, fold) in &run.assignments {
        let unit = *index
            .get(unit_id)
            .ok_or_else(|| broken(format!("unit {unit_id} is not among them")))?;
        let slot = fold_of
            .get_mut((*repetition - 1) as usize)
            .ok_or_else(|| broken(format!("repetition {repetition}")))?;
        slot[unit] = (*fold - 1) as u32;
    }
    let mut sets = Vec::with_capacity(repeats);
    for (repetition, fold_of) in fold_of.into_iter().enumerate() {
        if fold_of.iter().any(|&f| f >= k) {
            return Err(broken(format!(
                "repetition {} leaves units without a fold",
                repetition + 1
            )));
        }
        let mut set = FoldSet::plain(k, fold_of);
        set.excluded = vec![Vec::new(); k as usize];
        sets.push(set);
    }
    for (repetition, fold, unit_id) in &run.exclusions {
        let unit = *index
            .get(unit_id)
            .ok_or_else(|| broken(format!("excluded unit {unit_id} is not among them")))?;
        if let Some(list) = sets
            .get_mut((*repetition - 1) as usize)
            .and_then(|s| s.excluded.get_mut((*fold - 1) as usize))
        {
            list.push(unit as u32);
        }
    }
    let mut kinds: HashMap<String, &'static str> = HashMap::new();
    for set in &mut sets {
        for list in &mut set.excluded {
            list.sort_unstable();
        }
    }
    if let Some(first) = sets.first_mut() {
        for region in &run.regions {
            // Region kinds are static names in the core; the few distinct kinds
            // read back are leaked once each for this short-lived process.
            let kind = *kinds
                .entry(region.kind.clone())
                .or_insert_with(|| Box::leak(region.kind.clone().into_boxed_str()));
            first.regions.push(Region {
                fold: (region.fold - 1) as u32,
                kind,
                label: region.label.clone(),
                units: region.units as u32,
                geometry: region.geometry.clone(),
            });
        }
    }
    Ok(sets)
}

/// Each unit's position by its id as text (how results tables store ids).
fn id_index(data: &Dataset) -> HashMap<String, usize> {
    data.ids
        .iter()
        .enumerate()
        .map(|(i, id)| (id.to_string(), i))
        .collect()
}

/// At most this many problems of a predictions table are listed.
const MAX_PROBLEMS: usize = 1000;

/// Checks the loaded predictions against the recorded folds (see the module
/// doc) and returns each repetition's predictions in dataset order.
///
/// # Errors
/// [`Error::Input`] listing every problem, each with the unit and repetition.
pub fn check_predictions(
    table: &str,
    data: &Dataset,
    sets: &[FoldSet],
    family: Family,
    rows: &[PredictionRow],
) -> Result<Vec<Vec<f64>>, Error> {
    let index = id_index(data);
    let repeats = sets.len();
    let mut predicted = vec![vec![f64::NAN; data.len()]; repeats];
    let mut seen = vec![vec![false; data.len()]; repeats];
    let mut problems: Vec<(Location, String)> = Vec::new();
    let mut unlisted = 0usize;
    let mut add = |column: &str, row: String, problem: String| {
        if problems.len() < MAX_PROBLEMS {
            problems.push((
                Location {
                    table: table.to_string(),
                    column: Some(column.to_string()),
                    row_id: Some(row),
                },
                problem,
            ));
        } else {
            unlisted += 1;
        }
    };
    for row in rows {
        let Some(unit_id) = &row.unit_id else {
            add("unit_id", "?".into(), "unit_id is NULL".into());
            continue;
        };
        let repetition = match (row.repetition, repeats) {
            (Some(r), _) => r,
            (None, 1) => 1,
            (None, _) => {
                add(
                    "repetition",
                    format!("unit_id={unit_id}"),
                    format!("repetition is missing, and the run has {repeats} repetitions"),
                );
                continue;
            }
        };
        let at = format!("unit_id={unit_id}, repetition {repetition}");
        let Some(&unit) = index.get(unit_id.as_str()) else {
            add(
                "unit_id",
                at,
                "unknown unit: not one of the run's units".into(),
            );
            continue;
        };
        if repetition < 1 || repetition as usize > repeats {
            add(
                "repetition",
                at,
                format!("the run has repetitions 1 to {repeats}"),
            );
            continue;
        }
        let r = (repetition - 1) as usize;
        let recorded = i64::from(sets[r].fold_of[unit]) + 1;
        if row.fold != Some(recorded) {
            let found = row.fold.map_or("NULL".to_string(), |f| f.to_string());
            add(
                "fold",
                at.clone(),
                format!("fold {found}, but the unit is held out in fold {recorded} of this run"),
            );
        }
        if seen[r][unit] {
            add(
                "unit_id",
                at,
                "a second prediction for the same unit and repetition".into(),
            );
            continue;
        }
        seen[r][unit] = true;
        match row.predicted {
            None => add("predicted", at, "predicted is NULL".into()),
            Some(value) => match family.check_predicted(value) {
                Ok(()) => predicted[r][unit] = value,
                Err(problem) => add("predicted", at, problem),
            },
        }
    }
    for (r, seen) in seen.iter().enumerate() {
        let missing: Vec<u32> = (0..data.len() as u32)
            .filter(|&u| !seen[u as usize])
            .collect();
        if !missing.is_empty() {
            add(
                "unit_id",
                format!("repetition {}", r + 1),
                format!(
                    "{} of the run's units have no prediction: {}",
                    missing.len(),
                    crate::core::validate::id_list(data, &missing, 10)
                ),
            );
        }
    }
    if problems.is_empty() {
        return Ok(predicted);
    }
    if unlisted > 0 {
        problems.push((
            Location {
                table: table.to_string(),
                column: None,
                row_id: None,
            },
            format!("{unlisted} further problems not listed"),
        ));
    }
    Err(Error::Input { problems })
}

mod assigned;
#[cfg(test)]
mod tests;
