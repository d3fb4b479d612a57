//! The one pipeline: a [`RunSpec`] in, an [`Outcome`] (or an error with its
//! exit code) out. `run`, `demo` and job files all come through here; the
//! command line only parses.
//!
//! # Order, and what a failure leaves
//! 1. Check the specification (no connection used yet).
//! 2. Open the source and check its CRS against what the scheme needs.
//! 3. Open the results store and enter the job's exclusive section (a second
//!    run of the job exits busy, or waits `--wait`).
//! 4. Read and check every row (and the target and exposure against the
//!    model's family), and the prediction locations when given. With `--skip-unchanged`, stop here with
//!    [`Outcome::Unchanged`] when the input fingerprint and the settings hash
//!    match the job's last successful run. Assign every repetition's folds and
//!    check held-out levels of text features against `--unseen-levels` and
//!    that every fold keeps enough training units.
//!    Bad input stops here: nothing is written, no run is recorded.
//! 5. Create or upgrade the results tables, mark failed the runs of
//!    processes that are gone, and record the runs as `running`.
//! 6. Fit and score (with prediction locations, match the folds' nearest
//!    distances against theirs); Moran's I of the held-out residuals; write
//!    every result row in one transaction.
//!    A failure here marks the runs failed and leaves no result rows.
//!    With `--assign-only` nothing is fitted: the folds are written and the
//!    runs marked `assigned`, awaiting `geofold score` ([`crate::scoring`]).
//! 7. With gates, read the run's stored scores and the job's baseline back
//!    and judge them ([`crate::gates`]); a breach leaves the results written
//!    and sets the summary's exit code to 1.
//!
//! Progress of steps 4 and 6 goes to a [`Progress`] hook.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use serde::Serialize;
use uuid::Uuid;

use crate::adapters::gpkg::{GpkgSource, GpkgStore};
use crate::adapters::history::Store;
use crate::adapters::postgis::read::PostgisSource;
use crate::adapters::postgis::store::PostgisStore;
use crate::adapters::postgis::Session;
use crate::adapters::ColumnSpec;
use crate::adapters::{
    default_job, CrsKind, Locations, ResultStore, Source, SourceInfo, StoredInspection,
};
use crate::core::cells::Cells;
use crate::core::diagnostics::fold_distances::{fold_distances, summarise};
use crate::core::diagnostics::held_out::{HeldOutMoran, HeldOutWeights};
use crate::core::folds::random::Random;
use crate::core::folds::{FoldScheme, FoldSet, SchemeInput};
use crate::core::matching::{prediction_distances, Matching};
use crate::core::metrics::Family;
use crate::core::models::design::{unseen_levels, UnseenPolicy};
use crate::core::neighbours::NeighbourIndex;
use crate::core::units::{Dataset, UnitCollector};
use crate::core::validate::{
    assign_folds, assigned, check_training, fit_and_score, id_list, Plan, RunOutcome,
};
use crate::error::{exit, Error, Location};
use crate::progress::{Phase, Progress, Silent};
use crate::report::Summary;
use crate::results::rows::{run_rows, FinishedRun, LateFigures, RunRecord, Stage};
use crate::spec::{Limits, PredictionRef, ResultsRef, RunSpec, SourceRef};

/// Opens a source.
///
/// # Errors
/// Connection errors; a missing table, layer or column; bad column types.
pub fn open_source(
    source: &SourceRef,
    columns: &ColumnSpec,
    distance_srid: Option<i32>,
    limits: &Limits,
) -> Result<Box<dyn Source>, Error> {
    Ok(match source {
        SourceRef::Postgis { db, table } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(limits.lock_timeout(), limits.statement_timeout())?;
            Box::new(PostgisSource::open(session, table, columns, distance_srid)?)
        }
        SourceRef::Gpkg { file, layer } => {
            Box::new(GpkgSource::open(file, layer.as_deref(), columns)?)
        }
    })
}

/// Opens a results store.
///
/// # Errors
/// Connection errors; a results file that cannot be written.
pub fn open_store(results: &ResultsRef, limits: &Limits) -> Result<Box<dyn Store>, Error> {
    Ok(match results {
        ResultsRef::Postgis { db, schema } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(limits.lock_timeout(), limits.statement_timeout())?;
            Box::new(PostgisStore::new(session, schema, db.as_deref()))
        }
        ResultsRef::Gpkg { file } => Box::new(GpkgStore::open(file, limits.lock_timeout())?),
    })
}

/// The job label: the one given, or the default for the source (a layer's
/// name with `_cv` when results go into the source's own GeoPackage, so the
/// source layer is never replaced).
pub fn job_of(
    job: Option<&str>,
    source: &SourceRef,
    results: &ResultsRef,
    info: &SourceInfo,
) -> String {
    if let Some(job) = job {
        return job.to_string();
    }
    let job = default_job(&info.table);
    match (source, results) {
        (SourceRef::Gpkg { file, .. }, ResultsRef::Gpkg { file: results }) if file == results => {
            let mut job = job;
            job.truncate(crate::adapters::MAX_JOB_LEN - 3);
            format!("{job}_cv")
        }
        _ => job,
    }
}

/// Opens the source and checks that its CRS gives distances when
/// `needs_distances` (see [`check_crs`]); returns the source and what was
/// found when it was opened, with the CRS unit settled.
///
/// # Errors
/// As [`open_source`] and [`check_crs`].
pub fn open_checked(
    source: &SourceRef,
    columns: &ColumnSpec,
    distance_srid: Option<i32>,
    limits: &Limits,
    needs_distances: bool,
    assume_metres: bool,
) -> Result<(Box<dyn Source>, SourceInfo), Error> {
    let source = open_source(source, columns, distance_srid, limits)?;
    let mut info = source.info().clone();
    check_crs(needs_distances, assume_metres, &mut info)?;
    Ok((source, info))
}

/// Refuses distances (`needed`) on a CRS in degrees or without units,
/// saying how to fix the data; with `assume_metres`, a CRS without units is
/// taken as metres.
pub fn check_crs(needed: bool, assume_metres: bool, info: &mut SourceInfo) -> Result<(), Error> {
    if !needed {
        return Ok(());
    }
    let what = format!("{}.{}", info.table, info.geom_column);
    match info.crs {
        CrsKind::Projected => Ok(()),
        CrsKind::Geographic => {
            let fix = if info.store == "gpkg" {
                "reproject the layer to a projected CRS in metres first (for example \
                 ogr2ogr -t_srs EPSG:N out.gpkg in.gpkg LAYER), or use --scheme random"
            } else {
                "pass --distance-srid N with a projected CRS in metres (PostGIS transforms the geometries), \
                 or use --scheme random"
            };
            Err(Error::Usage(format!(
                "{what} has SRID {}, a longitude/latitude CRS (degrees), but distances and block sizes are in \
                 metres; {fix}",
                info.source_srid
            )))
        }
        CrsKind::Undefined if assume_metres => {
            info.length_unit = Some("metre".into());
            Ok(())
        }
        CrsKind::Undefined => {
            let assign = if info.store == "gpkg" {
                "assign one with ogr2ogr -a_srs EPSG:N out.gpkg in.gpkg"
            } else {
                "assign one with UPDATE … SET geom = ST_SetSRID(geom, N)"
            };
            Err(Error::Usage(format!(
                "{what} has no CRS defined (SRID {}), so its coordinates have no known unit and block sizes and \
                 distances cannot be read in metres; {assign}, or pass --assume-metres if the coordinates are \
                 metres",
                info.source_srid
            )))
        }
    }
}

/// Reads and checks every row of the source, showing the count as it grows
/// when the progress display is live.
///
/// # Errors
/// Bad rows (every one listed), duplicate ids, no usable row.
pub fn read_units(
    source: &mut dyn Source,
    info: &SourceInfo,
    job: &str,
    strict: bool,
    keep_geometries: bool,
    progress: &dyn Progress,
) -> Result<Dataset, Error> {
    let clock = std::time::Instant::now();
    let counter = Arc::new(AtomicU64::new(0));
    let mut collector = UnitCollector::new(
        &info.table,
        &info.target_column,
        &info.feature_columns,
        strict,
    )
    .with_group(info.group_column.as_deref())
    .with_exposure(info.exposure_column.as_deref())
    .with_text_features(&info.text_features)
    .with_geometries(keep_geometries)
    .with_row_counter(Arc::clone(&counter));
    progress.start(Phase::Read, None);
    let read = read_rows(source, &mut collector, &counter, progress);
    progress.finish(counter.load(Ordering::Relaxed));
    read?;
    let data = collector.finish(&info.id_column)?;
    if data.is_empty() {
        let reasons = data.skipped.describe();
        return Err(Error::input(
            &info.table,
            None,
            None,
            format!(
                "no usable rows: {} rows read{}",
                data.rows_read,
                if reasons.is_empty() {
                    String::new()
                } else {
                    format!(", all skipped ({reasons})")
                }
            ),
        ));
    }
    tracing::info!(
        job,
        phase = "read",
        units = data.len(),
        skipped = data.skipped.total(),
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "read units"
    );
    Ok(data)
}

/// At most this many bad target or exposure values are listed.
const MAX_LISTED: usize = 1000;

/// Checks every unit's target (and exposure) against the model's family:
/// 0/1 for binary, non-negative whole numbers for counts, positive exposures.
///
/// # Errors
/// [`Error::Input`] naming each row.
pub fn check_family(info: &SourceInfo, data: &Dataset, family: Family) -> Result<(), Error> {
    let mut problems = Vec::new();
    let mut more = 0usize;
    let mut add = |column: &str, i: usize, problem: String| {
        if problems.len() < MAX_LISTED {
            problems.push((
                Location {
                    table: info.table.clone(),
                    column: Some(column.to_string()),
                    row_id: Some(data.ids[i].to_string()),
                },
                problem,
            ));
        } else {
            more += 1;
        }
    };
    for i in 0..data.len() {
        if let Err(problem) = family.check_observed(data.target[i]) {
            add(&info.target_column, i, problem);
        }
        if let (Family::Count, Some(exposure), Some(column)) =
            (family, &data.exposure, &info.exposure_column)
        {
            let value = exposure[i];
            if value.is_nan() || value <= 0.0 {
                add(
                    column,
                    i,
                    format!(
                        "exposure is {value}; it must be positive (its logarithm is the offset)"
                    ),
                );
            }
        }
    }
    if problems.is_empty() {
        return Ok(());
    }
    if more > 0 {
        problems.push((
            Location {
                table: info.table.clone(),
                column: None,
                row_id: None,
            },
            format!("{more} further rows not listed"),
        ));
    }
    Err(Error::Input { problems })
}

/// Held-out levels of text features that their fold's training units never
/// had: an error naming fold, column, level and rows under the `error`
/// policy; otherwise `(note, units)` for the summary.
fn check_unseen(
    info: &SourceInfo,
    data: &Dataset,
    sets: &[FoldSet],
    policy: UnseenPolicy,
) -> Result<Vec<(String, usize)>, Error> {
    let mut notes: Vec<(String, usize)> = Vec::new();
    let mut problems = Vec::new();
    for (repetition, folds) in sets.iter().enumerate() {
        for unseen in unseen_levels(data, folds) {
            match policy {
                UnseenPolicy::Error => problems.push((
                    Location {
                        table: info.table.clone(),
                        column: Some(unseen.column.clone()),
                        row_id: Some(id_list(data, &unseen.units, 5)),
                    },
                    format!(
                        "level {:?} is held out in fold {} (repetition {}) but no training unit of that fold has it; \
                         pass --unseen-levels zero to predict such units as the fold's reference level, or use folds \
                         that keep the level in training",
                        unseen.level,
                        unseen.fold + 1,
                        repetition + 1
                    ),
                )),
                UnseenPolicy::Zero => {
                    let note = format!(
                        "{}={} unseen in training: all-zero indicators (the fold's reference level)",
                        unseen.column, unseen.level
                    );
                    match notes.iter_mut().find(|(n, _)| *n == note) {
                        Some(entry) => entry.1 += unseen.units.len(),
                        None => notes.push((note, unseen.units.len())),
                    }
                }
            }
        }
    }
    if problems.is_empty() {
        Ok(notes)
    } else {
        Err(Error::Input { problems })
    }
}

/// Reads every row into the collector, updating the display from a second
/// thread while the display is live.
fn read_rows(
    source: &mut dyn Source,
    collector: &mut UnitCollector,
    counter: &AtomicU64,
    progress: &dyn Progress,
) -> Result<(), Error> {
    if !progress.live() {
        return source.read(collector);
    }
    let (stop, stopped) = std::sync::mpsc::channel::<()>();
    std::thread::scope(|scope| {
        scope.spawn(move || {
            while let Err(std::sync::mpsc::RecvTimeoutError::Timeout) =
                stopped.recv_timeout(Duration::from_millis(100))
            {
                progress.update(counter.load(Ordering::Relaxed));
            }
        });
        let result = source.read(collector);
        let _ = stop.send(());
        result
    })
}

/// `host:pid` of this process, recorded with its runs.
pub fn session_name() -> String {
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|h| h.trim().to_string())
        .unwrap_or_else(|_| "localhost".into());
    format!("geofold process {} on {host}", std::process::id())
}

/// One plan of a run: the primary scheme, or the random comparison.
struct Planned<'a> {
    scheme: &'a dyn FoldScheme,
    record: RunRecord,
    folds: Vec<FoldSet>,
    /// Held-out units given all-zero indicators (`--unseen-levels zero`).
    unseen: Vec<(String, usize)>,
}

/// What a run came to.
#[derive(Debug)]
pub enum Outcome {
    /// Results written (gates, if any, judged in the summary).
    Finished(Box<Summary>),
    /// `--skip-unchanged` found nothing new: nothing written.
    Unchanged(Unchanged),
}

/// A run skipped because its input and settings match the job's last successful run.
#[derive(Debug, Clone, Serialize)]
pub struct Unchanged {
    /// The job.
    pub job: String,
    /// Rows read.
    pub units_read: u64,
    /// The input fingerprint both runs share.
    pub input_fingerprint: String,
    /// The settings hash both runs share.
    pub settings_hash: String,
    /// The job's last successful run.
    pub last_run_id: Uuid,
    /// When it finished.
    pub last_finished_at: Option<String>,
}

impl Unchanged {
    /// The human summary.
    pub fn to_text(&self) -> String {
        format!(
            "job {}: unchanged: the {} rows read and the settings match run {} (finished {}); \
             nothing was run or written (--skip-unchanged)",
            self.job,
            self.units_read,
            self.last_run_id,
            self.last_finished_at.as_deref().unwrap_or("-")
        )
    }
}

/// The key of `runs.parameters` that holds [`RunSpec::settings_hash`].
pub const SETTINGS_HASH_KEY: &str = "settings-hash";
/// The key of `runs.parameters` that holds the run's drift gates (as written,
/// `rmse<=1.25`), so that a report can draw them over the job's history.
pub const GATES_KEY: &str = "gates";
/// The key of `runs.parameters` that holds `--baseline-runs`.
pub const BASELINE_RUNS_KEY: &str = "baseline-runs";

/// Runs a specification with no progress display; an unchanged input (only
/// possible with `skip_unchanged`) is an internal error here.
///
/// # Errors
/// Any [`Error`]; see the module doc for what each leaves behind.
pub fn run(spec: &RunSpec) -> Result<Summary, Error> {
    match run_with(spec, &Silent)? {
        Outcome::Finished(summary) => Ok(*summary),
        Outcome::Unchanged(_) => Err(Error::Internal(
            "pipeline::run was given skip_unchanged; use run_with".into(),
        )),
    }
}

/// Runs a specification, reporting progress.
///
/// # Errors
/// Any [`Error`]; see the module doc for what each leaves behind.
pub fn run_with(spec: &RunSpec, progress: &dyn Progress) -> Result<Outcome, Error> {
    let checked = spec.check()?;
    let (mut source, info) = open_checked(
        &spec.source,
        &spec.columns,
        spec.distance_srid,
        &spec.limits,
        checked.scheme.needs_distances()
            || checked.model.needs_distances()
            || spec.exclusion_radius.is_some()
            || spec.prediction.is_some(),
        spec.assume_metres,
    )?;
    let job = job_of(spec.job.as_deref(), &spec.source, &spec.results, &info);
    crate::adapters::check_job(&job)?;
    let mut store = open_store(&spec.results, &spec.limits)?;
    store.lock_job(&job, spec.limits.wait())?;
    let mut data = read_units(
        source.as_mut(),
        &info,
        &job,
        spec.strict,
        checked.scheme.requirements().geometries,
        progress,
    )?;
    let locations: Option<Locations> = match &spec.prediction {
        Some(PredictionRef::Postgis { table, geom }) => {
            Some(source.read_locations(table, geom.as_deref(), spec.distance_srid)?)
        }
        Some(PredictionRef::Gpkg { layer }) => Some(source.read_locations(layer, None, None)?),
        None => None,
    };
    drop(source);
    let geometries = data.geometries.take();
    check_family(&info, &data, checked.model.family())?;

    let settings_hash = spec.settings_hash();
    if spec.skip_unchanged {
        if let Some(unchanged) = unchanged(store.as_mut(), &job, &data, &settings_hash)? {
            tracing::info!(job, phase = "read", last_run_id = %unchanged.last_run_id, "input and settings unchanged");
            return Ok(Outcome::Unchanged(unchanged));
        }
    }

    let index = NeighbourIndex::new(&data.points);
    let input = SchemeInput {
        points: &data.points,
        index: &index,
        groups: data.groups.as_ref(),
        prediction_points: locations.as_ref().map(|l| l.points.as_slice()),
        geometries: geometries.as_deref(),
        exclusion_radius: spec.exclusion_radius,
    };
    let random = Random::new(
        checked
            .scheme
            .parameters()
            .get("folds")
            .and_then(serde_json::Value::as_u64)
            .and_then(|f| u32::try_from(f).ok())
            .unwrap_or(5),
    )?;
    let mut schemes: Vec<&dyn FoldScheme> = vec![checked.scheme.as_ref()];
    if spec.compare_random && checked.scheme.name() != "random" {
        schemes.push(&random);
    }
    let started_at_micros = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_micros() as i64)
        .unwrap_or(0);
    let session = session_name();
    let fingerprint = data.fingerprint();
    let mut planned: Vec<Planned<'_>> = Vec::new();
    for scheme in schemes {
        let plan = Plan {
            scheme,
            model: checked.model.as_ref(),
            repeats: spec.repeats,
            seed: spec.seed,
            exclusion_radius: spec.exclusion_radius,
        };
        let folds = assign_folds(&input, &plan)?;
        check_training(
            &folds,
            data.len(),
            checked.model.min_training_units(data.n_features()),
            &checked.model.describe(),
            spec.exclusion_radius,
        )?;
        let unseen = check_unseen(&info, &data, &folds, spec.unseen_levels)?;
        let record = RunRecord {
            run_id: Uuid::new_v4(),
            job: job.clone(),
            primary_run_id: planned.first().map(|p| p.record.run_id),
            started_at_micros,
            scheme: scheme.name().to_string(),
            model: checked.model.name().to_string(),
            family: checked.model.family().name(),
            parameters: {
                let mut parameters = parameters(spec, &info, &data, scheme, checked.model.as_ref());
                parameters[SETTINGS_HASH_KEY] = serde_json::json!(settings_hash);
                parameters
            },
            seed: spec.seed,
            repeats: spec.repeats,
            folds: folds.first().map_or(0, |f| f.k),
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            session: session.clone(),
            input_fingerprint: fingerprint.clone(),
        };
        planned.push(Planned {
            scheme,
            record,
            folds,
            unseen,
        });
    }

    drop(geometries);
    let prediction = locations
        .as_ref()
        .map(|l| prediction_distances(&l.points, &index));
    store.prepare(&info)?;
    if let (Some(inspection), Some(primary)) = (store.last_inspection(&job)?, planned.first_mut()) {
        let warnings = scale_warnings(&primary.record.parameters, &inspection, &|v| info.length(v));
        for folds in &mut primary.folds {
            folds.warnings.extend(warnings.iter().cloned());
        }
    }
    let records: Vec<RunRecord> = planned.iter().map(|p| p.record.clone()).collect();
    store.begin(&info, &records)?;
    let context = Context {
        spec,
        checked: &checked,
        info: &info,
        data: &data,
        locations: locations.as_ref(),
        prediction: prediction.as_deref(),
        progress,
    };
    let result = fit_and_write(&context, planned, store.as_mut());
    let mut summary = match result {
        Ok(summary) => summary,
        Err(error) => {
            store.fail(&records, &error.to_string());
            return Err(error);
        }
    };
    if !spec.gates.is_empty() {
        judge_gates(spec, store.as_mut(), &job, &records, &mut summary)?;
    }
    Ok(Outcome::Finished(Box::new(summary)))
}

/// The unchanged outcome, when the job's last successful run read the same
/// input with the same settings.
fn unchanged(
    store: &mut dyn Store,
    job: &str,
    data: &Dataset,
    settings_hash: &str,
) -> Result<Option<Unchanged>, Error> {
    if !store.initialised()? {
        return Ok(None);
    }
    let store: &mut dyn ResultStore = store;
    let Some(last) = store.last_successful(job)? else {
        return Ok(None);
    };
    let fingerprint = data.fingerprint();
    let same_input = last.input_fingerprint.as_deref() == Some(fingerprint.as_str());
    let same_settings = last
        .parameters
        .get(SETTINGS_HASH_KEY)
        .and_then(serde_json::Value::as_str)
        == Some(settings_hash);
    Ok((same_input && same_settings).then(|| Unchanged {
        job: job.to_string(),
        units_read: data.rows_read,
        input_fingerprint: fingerprint,
        settings_hash: settings_hash.to_string(),
        last_run_id: last.run_id,
        last_finished_at: last.finished_at.clone(),
    }))
}

/// Step 7: judges the gates on the stored scores of the primary run.
fn judge_gates(
    spec: &RunSpec,
    store: &mut dyn ResultStore,
    job: &str,
    records: &[RunRecord],
    summary: &mut Summary,
) -> Result<(), Error> {
    let Some(primary) = records.first().map(|r| r.run_id) else {
        return Ok(());
    };
    let history = store.runs(Some(job), usize::MAX)?;
    let current = history
        .iter()
        .find(|run| run.run_id == primary)
        .ok_or_else(|| {
            Error::Internal(format!(
                "run {primary} is not in the history after it was written"
            ))
        })?;
    let baseline = crate::gates::choose_baseline(&history, primary, spec.baseline_runs);
    summary.gates = crate::gates::evaluate(&spec.gates, &current.scores, baseline.as_ref());
    for result in &summary.gates {
        tracing::info!(job, phase = "gates", gate = %result.gate, verdict = ?result.verdict, value = ?result.value, limit = ?result.limit, "gate judged");
    }
    if crate::gates::any_breached(&summary.gates) {
        summary.exit_code = exit::GATE_BREACHED;
    }
    Ok(())
}

/// What step 6 works from.
struct Context<'a> {
    spec: &'a RunSpec,
    checked: &'a crate::spec::Checked,
    info: &'a SourceInfo,
    data: &'a Dataset,
    locations: Option<&'a Locations>,
    /// Prediction distances (each location to its nearest unit).
    prediction: Option<&'a [f64]>,
    progress: &'a dyn Progress,
}

/// Step 6 of the module doc.
fn fit_and_write(
    context: &Context<'_>,
    planned: Vec<Planned<'_>>,
    store: &mut dyn ResultStore,
) -> Result<Summary, Error> {
    let Context {
        spec,
        checked,
        info,
        data,
        progress,
        ..
    } = *context;
    let clock = std::time::Instant::now();
    let mut records = Vec::new();
    let mut outcomes: Vec<RunOutcome> = Vec::new();
    let mut descriptions = Vec::new();
    let total_folds: u64 = planned
        .iter()
        .map(|p| p.folds.iter().map(|f| u64::from(f.k)).sum::<u64>())
        .sum();
    let mut folds_done = 0;
    progress.start(Phase::Fit, Some(total_folds));
    for Planned {
        scheme,
        record,
        folds,
        unseen,
    } in planned
    {
        let plan = Plan {
            scheme,
            model: checked.model.as_ref(),
            repeats: spec.repeats,
            seed: spec.seed,
            exclusion_radius: spec.exclusion_radius,
        };
        let run_folds: u64 = folds.iter().map(|f| u64::from(f.k)).sum();
        let outcome = if spec.assign_only {
            Ok(assigned(data, checked.model.family(), folds))
        } else {
            fit_and_score(data, &plan, folds)
        };
        folds_done += run_folds;
        progress.update(folds_done);
        let mut outcome = outcome?;
        outcome.notes.extend(unseen);
        if let Some(prediction) = context.prediction {
            let cv: Vec<&[f64]> = outcome
                .repetitions
                .iter()
                .filter_map(|r| r.folds.cv_distances.as_deref())
                .collect();
            outcome.matching = Some(Matching::new(prediction.to_vec(), &cv));
        }
        outcomes.push(outcome);
        descriptions.push(scheme.describe(&|value| info.length(value)));
        records.push(record);
    }
    progress.finish(folds_done);
    tracing::info!(
        phase = "fit",
        folds = folds_done,
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "validated"
    );
    // The per-run diagnostics are computed on another thread while the
    // per-unit rows are written; the write takes them last, in the same
    // transaction.
    let clock = std::time::Instant::now();
    let late: Vec<LateFigures> = outcomes.iter().map(|_| LateFigures::default()).collect();
    let finished: Vec<FinishedRun<'_>> = records
        .iter()
        .zip(&outcomes)
        .zip(&late)
        .map(|((record, outcome), late)| FinishedRun {
            record,
            outcome,
            stage: if spec.assign_only {
                Stage::Assigned
            } else {
                Stage::Complete
            },
            late: Some(late),
        })
        .collect();
    let rows: u64 = finished
        .iter()
        .flat_map(|run| run_rows(data, run, info.srid))
        .filter(|rows| !rows.is_late())
        .map(|rows| rows.len() as u64)
        .sum();
    progress.start(Phase::Write, Some(rows));
    let (report, moran_problems) = std::thread::scope(|scope| {
        let figures = scope.spawn(|| late_figures(context, &outcomes, &late));
        let report = store.commit(info, data, &finished);
        // A thread that panicked set nothing; the write has waited for it
        // only if it got as far as these rows.
        let problems = figures.join().unwrap_or_default();
        (report, problems)
    });
    progress.finish(if report.is_ok() { rows } else { 0 });
    drop(finished);
    for ((outcome, late), problem) in outcomes.iter_mut().zip(late).zip(moran_problems) {
        outcome.held_out_moran = late
            .held_out_moran
            .into_inner()
            .and_then(|m| m.into_iter().next());
        outcome.fold_distances = late.fold_distances.into_inner().unwrap_or_default();
        if let (Some(problem), Some(rep)) = (problem, outcome.repetitions.first_mut()) {
            rep.folds.warnings.push(format!(
                "Moran's I of the held-out residuals was not computed: {problem}"
            ));
        }
    }
    let report = report?;
    tracing::info!(
        phase = "write",
        rows,
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "wrote results"
    );
    let mut summary = Summary::new(
        info,
        data,
        &records,
        &outcomes,
        &descriptions,
        &checked.model.describe(),
        spec.exclusion_radius,
        report,
    );
    summary.prediction_locations = context.locations.cloned();
    Ok(match (spec.assign_only, checked.model.uses_features()) {
        (true, _) => summary.assigned(),
        (false, false) => summary.location_only(),
        (false, true) => summary,
    })
}

/// What `runs.parameters` records: the scheme's and the model's options, the
/// exclusion radius, the unseen-level policy when there are text features,
/// and for `--assign-only` how to read the source again (`assignment`: the
/// source without its connection string, the columns, the distance SRID), so
/// `geofold score` reads the same units.
fn parameters(
    spec: &RunSpec,
    info: &SourceInfo,
    data: &Dataset,
    scheme: &dyn FoldScheme,
    model: &dyn crate::core::models::Model,
) -> serde_json::Value {
    let mut parameters = serde_json::json!({
        "scheme": scheme.parameters(),
        "model": model.parameters(),
        "exclusion-radius": spec.exclusion_radius,
        GATES_KEY: spec.gates,
        BASELINE_RUNS_KEY: spec.baseline_runs,
    });
    if !data.categorical.is_empty() {
        parameters["unseen-levels"] = serde_json::json!(spec.unseen_levels);
    }
    if spec.assign_only {
        let source = match &spec.source {
            SourceRef::Postgis { .. } => SourceRef::Postgis {
                db: None,
                table: info.table.clone(),
            },
            SourceRef::Gpkg { file, .. } => SourceRef::Gpkg {
                file: file.canonicalize().unwrap_or_else(|_| file.clone()),
                layer: Some(info.qualified_table.clone()),
            },
        };
        parameters["assignment"] = serde_json::json!({
            "source": source,
            "columns": spec.columns,
            "distance_srid": spec.distance_srid,
            "strict": spec.strict,
        });
    }
    parameters
}

/// A block size or exclusion radius below this share of the residual
/// autocorrelation range of the job's last inspection is warned about.
pub const WELL_BELOW_RANGE: f64 = 0.5;

/// Warnings when the run's block size or exclusion radius (from its stored
/// parameters) is well below the range found by the job's last inspection.
fn scale_warnings(
    parameters: &serde_json::Value,
    inspection: &StoredInspection,
    length: &dyn Fn(f64) -> String,
) -> Vec<String> {
    let range = inspection.fitted_range;
    let sizes = [
        ("block size", parameters["scheme"]["block-size"].as_f64()),
        ("exclusion radius", parameters["exclusion-radius"].as_f64()),
    ];
    sizes
        .into_iter()
        .filter_map(|(what, size)| {
            let size = size?;
            (size < WELL_BELOW_RANGE * range).then(|| {
                format!(
                    "the {what} {} is well below the {} range of residual autocorrelation that the job's last \
                     inspection found ({}, {}): held-out units sit close to units they resemble, so the scores \
                     may be optimistic; see geofold inspect",
                    length(size),
                    length(range),
                    inspection.inspection_id,
                    inspection.started_at
                )
            })
        })
        .collect()
}

/// Moran's I of each run's held-out residuals, with the same weights for
/// every run of the invocation, or why it could not be computed (constant or
/// missing residuals).
fn held_out_morans(
    outcomes: &[RunOutcome],
    data: &Dataset,
    rule: &crate::spec::WeightsRule,
    seed: u64,
) -> Vec<Result<HeldOutMoran, String>> {
    let weights = rule
        .for_points()
        .map_err(|e| e.to_string())
        .and_then(|point_rule| {
            HeldOutWeights::new(&data.points, point_rule, &rule.name(), seed)
                .map_err(|e| e.to_string())
        });
    outcomes
        .iter()
        .map(|outcome| {
            weights.as_ref().map_err(Clone::clone).and_then(|w| {
                w.moran(&outcome.held_out_residuals(&data.target))
                    .map_err(|e| e.to_string())
            })
        })
        .collect()
}

/// [`held_out_morans`] into the outcomes, a warning where it failed.
pub(crate) fn attach_held_out_moran(
    outcomes: &mut [RunOutcome],
    data: &Dataset,
    rule: &crate::spec::WeightsRule,
    seed: u64,
) {
    let found = held_out_morans(outcomes, data, rule, seed);
    for (outcome, result) in outcomes.iter_mut().zip(found) {
        match result {
            Ok(moran) => outcome.held_out_moran = Some(moran),
            Err(problem) => {
                if let Some(rep) = outcome.repetitions.first_mut() {
                    rep.folds.warnings.push(format!(
                        "Moran's I of the held-out residuals was not computed: {problem}"
                    ));
                }
            }
        }
    }
}

/// Fills every run's [`LateFigures`] (both cells, always: the write waits
/// for them) and returns, per run, why its Moran's I could not be computed.
fn late_figures(
    context: &Context<'_>,
    outcomes: &[RunOutcome],
    late: &[LateFigures],
) -> Vec<Option<String>> {
    let (spec, data) = (context.spec, context.data);
    let computed = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        let clock = std::time::Instant::now();
        let morans = if spec.assign_only {
            vec![Err(String::new()); outcomes.len()]
        } else {
            held_out_morans(outcomes, data, &context.checked.residual_weights, spec.seed)
        };
        let mut problems = Vec::with_capacity(outcomes.len());
        for (result, cell) in morans.into_iter().zip(late) {
            match result {
                Ok(moran) => {
                    let _ = cell.held_out_moran.set(vec![moran]);
                    problems.push(None);
                }
                Err(problem) => {
                    let _ = cell.held_out_moran.set(Vec::new());
                    problems.push((!problem.is_empty()).then_some(problem));
                }
            }
        }
        tracing::info!(
            phase = "diagnostics",
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "held-out residual Moran's I"
        );
        let clock = std::time::Instant::now();
        let cells = Cells::new(&data.points);
        for (outcome, cell) in outcomes.iter().zip(late) {
            let mut summaries = outcome
                .repetitions
                .first()
                .map(|first| fold_distances(&first.folds, &data.points, &cells, spec.seed))
                .unwrap_or_default();
            summaries.extend(
                context
                    .prediction
                    .and_then(|p| summarise("prediction", None, p, None)),
            );
            let _ = cell.fold_distances.set(summaries);
        }
        tracing::info!(
            phase = "diagnostics",
            elapsed_ms = clock.elapsed().as_millis() as u64,
            "test-to-training distances"
        );
        problems
    }));
    // Whatever happened, no cell stays empty.
    for cell in late {
        let _ = cell.held_out_moran.set(Vec::new());
        let _ = cell.fold_distances.set(Vec::new());
    }
    computed.unwrap_or_else(|_| vec![Some("the computation failed".into()); outcomes.len()])
}
