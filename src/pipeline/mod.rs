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
//!    distances against theirs), then write every result row in one
//!    transaction. Moran's I of the held-out residuals and the fold distances
//!    are computed on a second thread while the per-unit rows are written,
//!    and their rows go last in the same transaction (`pipeline/diagnostics.rs`).
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
use crate::core::buckets::Buckets;
use crate::core::diagnostics::fold_distances::{fold_distances, summarise, DistanceSummary};
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

mod diagnostics;
mod open;
mod parameters;
mod read;
mod record;
mod write;

use diagnostics::*;
pub(crate) use diagnostics::{attach_held_out_moran, distance_summaries};
pub use open::*;
pub use parameters::*;
pub use read::*;
use record::*;
use write::*;

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

/// The core's plan of one scheme's run under `spec`.
fn plan_of<'a>(
    spec: &RunSpec,
    checked: &'a crate::spec::Checked,
    scheme: &'a dyn FoldScheme,
) -> Plan<'a> {
    Plan {
        scheme,
        model: checked.model.as_ref(),
        repeats: spec.repeats,
        seed: spec.seed,
        exclusion_radius: spec.exclusion_radius,
    }
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
        if checked.model.needs_distances()
            || spec.exclusion_radius.is_some()
            || spec.prediction.is_some()
        {
            Distances::Needed
        } else if checked.scheme.needs_distances() {
            Distances::ByScheme
        } else {
            Distances::Unused
        },
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
        let plan = plan_of(spec, &checked, scheme);
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
