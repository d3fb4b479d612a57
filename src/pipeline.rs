//! The one pipeline: a [`RunSpec`] in, a [`Summary`] (or an error with its
//! exit code) out. `run`, `demo` and job files all come through here; the
//! command line only parses.
//!
//! # Order, and what a failure leaves
//! 1. Check the specification (no connection used yet).
//! 2. Open the source and check its CRS against what the scheme needs.
//! 3. Open the results store and enter the job's exclusive section (a second
//!    run of the job exits busy, or waits `--wait`).
//! 4. Read and check every row (and the target and exposure against the
//!    model's family); assign every repetition's folds and check held-out
//!    levels of text features against `--unseen-levels`.
//!    Bad input stops here: nothing is written, no run is recorded.
//! 5. Create or upgrade the results tables, mark failed the runs of
//!    processes that are gone, and record the runs as `running`.
//! 6. Fit and score; write every result row in one transaction.
//!    A failure here marks the runs failed and leaves no result rows.
//!    With `--assign-only` nothing is fitted: the folds are written and the
//!    runs marked `assigned`, awaiting `geofold score` ([`crate::scoring`]).

use std::time::{SystemTime, UNIX_EPOCH};

use uuid::Uuid;

use crate::adapters::gpkg::{GpkgSource, GpkgStore};
use crate::adapters::postgis::read::PostgisSource;
use crate::adapters::postgis::store::PostgisStore;
use crate::adapters::postgis::Session;
use crate::adapters::{default_job, CrsKind, ResultStore, Source, SourceInfo};
use crate::core::folds::random::Random;
use crate::core::folds::{FoldScheme, FoldSet, SchemeInput};
use crate::core::metrics::Family;
use crate::core::models::design::{unseen_levels, UnseenPolicy};
use crate::core::neighbours::NeighbourIndex;
use crate::core::units::{Dataset, UnitCollector};
use crate::core::validate::{assign_folds, assigned, fit_and_score, id_list, Plan, RunOutcome};
use crate::error::{Error, Location};
use crate::report::Summary;
use crate::results::rows::{FinishedRun, RunRecord, Stage};
use crate::spec::{ResultsRef, RunSpec, SourceRef};

/// Opens the source a specification names.
///
/// # Errors
/// Connection errors; a missing table, layer or column; bad column types.
pub fn open_source(spec: &RunSpec) -> Result<Box<dyn Source>, Error> {
    Ok(match &spec.source {
        SourceRef::Postgis { db, table } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(spec.limits.lock_timeout(), spec.limits.statement_timeout())?;
            Box::new(PostgisSource::open(
                session,
                table,
                &spec.columns,
                spec.distance_srid,
            )?)
        }
        SourceRef::Gpkg { file, layer } => {
            Box::new(GpkgSource::open(file, layer.as_deref(), &spec.columns)?)
        }
    })
}

/// Opens the results store a specification names.
///
/// # Errors
/// Connection errors; a results file that cannot be written.
pub fn open_store(spec: &RunSpec) -> Result<Box<dyn ResultStore>, Error> {
    Ok(match &spec.results {
        ResultsRef::Postgis { db, schema } => {
            let session = Session::connect(db.as_deref())?;
            session.limit_waits(spec.limits.lock_timeout(), spec.limits.statement_timeout())?;
            Box::new(PostgisStore::new(session, schema, db.as_deref()))
        }
        ResultsRef::Gpkg { file } => Box::new(GpkgStore::open(file, spec.limits.lock_timeout())?),
    })
}

/// The job label: the one given, or the default for the source (a layer's
/// name with `_cv` when results go into the source's own GeoPackage, so the
/// source layer is never replaced).
pub fn job_of(spec: &RunSpec, info: &SourceInfo) -> String {
    if let Some(job) = &spec.job {
        return job.clone();
    }
    let job = default_job(&info.table);
    match (&spec.source, &spec.results) {
        (SourceRef::Gpkg { file, .. }, ResultsRef::Gpkg { file: results }) if file == results => {
            let mut job = job;
            job.truncate(crate::adapters::MAX_JOB_LEN - 3);
            format!("{job}_cv")
        }
        _ => job,
    }
}

/// Refuses a scheme that needs distances on a CRS in degrees or without
/// units, saying how to fix the data.
fn check_crs(spec: &RunSpec, info: &mut SourceInfo, needs_distances: bool) -> Result<(), Error> {
    if !(needs_distances || spec.exclusion_radius.is_some()) {
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
        CrsKind::Undefined if spec.assume_metres => {
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

/// Reads every row of the source through the collector (the input-hygiene
/// rules, with the group, exposure and text features the source has).
///
/// # Errors
/// As [`Source::read`] and [`UnitCollector::finish`].
pub fn read_units(
    source: &mut dyn Source,
    info: &SourceInfo,
    strict: bool,
) -> Result<Dataset, Error> {
    let mut collector = UnitCollector::new(
        &info.table,
        &info.target_column,
        &info.feature_columns,
        strict,
    )
    .with_group(info.group_column.as_deref())
    .with_exposure(info.exposure_column.as_deref())
    .with_text_features(&info.text_features);
    source.read(&mut collector)?;
    collector.finish(&info.id_column)
}

/// `host:pid` of this process, recorded with its runs.
fn session_name() -> String {
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

/// Runs a specification.
///
/// # Errors
/// Any [`Error`]; see the module doc for what each leaves behind.
pub fn run(spec: &RunSpec) -> Result<Summary, Error> {
    let checked = spec.check()?;
    let mut source = open_source(spec)?;
    let mut info = source.info().clone();
    let needs_distances = checked.scheme.needs_distances() || checked.model.needs_distances();
    check_crs(spec, &mut info, needs_distances)?;
    let job = job_of(spec, &info);
    crate::adapters::check_job(&job)?;
    let mut store = open_store(spec)?;
    store.lock_job(&job, spec.limits.wait())?;

    let clock = std::time::Instant::now();
    let data = read_units(source.as_mut(), &info, spec.strict)?;
    drop(source);
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
        units = data.len(),
        skipped = data.skipped.total(),
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "read units"
    );
    check_family(&info, &data, checked.model.family())?;

    let index = NeighbourIndex::new(&data.points);
    let input = SchemeInput {
        points: &data.points,
        index: &index,
        groups: data.groups.as_ref(),
        prediction_points: None,
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
        let unseen = check_unseen(&info, &data, &folds, spec.unseen_levels)?;
        let record = RunRecord {
            run_id: Uuid::new_v4(),
            job: job.clone(),
            primary_run_id: planned.first().map(|p| p.record.run_id),
            started_at_micros,
            scheme: scheme.name().to_string(),
            model: checked.model.name().to_string(),
            family: checked.model.family().name(),
            parameters: parameters(spec, &info, &data, scheme, checked.model.as_ref()),
            seed: spec.seed,
            repeats: spec.repeats,
            folds: folds.first().map_or(0, |f| f.k),
            tool_version: env!("CARGO_PKG_VERSION").to_string(),
            session: session.clone(),
        };
        planned.push(Planned {
            scheme,
            record,
            folds,
            unseen,
        });
    }

    store.prepare(&info)?;
    let records: Vec<RunRecord> = planned.iter().map(|p| p.record.clone()).collect();
    store.begin(&info, &records)?;
    let result = fit_and_write(spec, &checked, &info, &data, planned, store.as_mut());
    if let Err(error) = &result {
        store.fail(&records, &error.to_string());
    }
    result
}

/// Step 6 of the module doc.
fn fit_and_write(
    spec: &RunSpec,
    checked: &crate::spec::Checked,
    info: &SourceInfo,
    data: &Dataset,
    planned: Vec<Planned<'_>>,
    store: &mut dyn ResultStore,
) -> Result<Summary, Error> {
    let clock = std::time::Instant::now();
    let mut records = Vec::new();
    let mut outcomes: Vec<RunOutcome> = Vec::new();
    let mut descriptions = Vec::new();
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
        let mut outcome = if spec.assign_only {
            assigned(data, checked.model.family(), folds)
        } else {
            fit_and_score(data, &plan, folds)?
        };
        outcome.notes.extend(unseen);
        outcomes.push(outcome);
        descriptions.push(scheme.describe(&|value| info.length(value)));
        records.push(record);
    }
    tracing::info!(elapsed_ms = clock.elapsed().as_millis() as u64, "validated");
    let clock = std::time::Instant::now();
    let finished: Vec<FinishedRun<'_>> = records
        .iter()
        .zip(&outcomes)
        .map(|(record, outcome)| FinishedRun {
            record,
            outcome,
            stage: if spec.assign_only {
                Stage::Assigned
            } else {
                Stage::Complete
            },
        })
        .collect();
    let report = store.commit(info, data, &finished)?;
    tracing::info!(
        elapsed_ms = clock.elapsed().as_millis() as u64,
        "wrote results"
    );
    let summary = Summary::new(
        info,
        data,
        &records,
        &outcomes,
        &descriptions,
        &checked.model.describe(),
        spec.exclusion_radius,
        report,
    );
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
