//! The one pipeline: a [`RunSpec`] in, a [`Summary`] (or an error with its
//! exit code) out. `run`, `demo` and job files all come through here; the
//! command line only parses.
//!
//! # Order, and what a failure leaves
//! 1. Check the specification (no connection used yet).
//! 2. Open the source and check its CRS against what the scheme needs.
//! 3. Open the results store and enter the job's exclusive section (a second
//!    run of the job exits busy, or waits `--wait`).
//! 4. Read and check every row; assign every repetition's folds.
//!    Bad input stops here: nothing is written, no run is recorded.
//! 5. Create or upgrade the results tables, mark failed the runs of
//!    processes that are gone, and record the runs as `running`.
//! 6. Fit and score; write every result row in one transaction.
//!    A failure here marks the runs failed and leaves no result rows.

use std::time::{SystemTime, UNIX_EPOCH};

use uuid::Uuid;

use crate::adapters::gpkg::{GpkgSource, GpkgStore};
use crate::adapters::postgis::read::PostgisSource;
use crate::adapters::postgis::store::PostgisStore;
use crate::adapters::postgis::Session;
use crate::adapters::{default_job, CrsKind, Locations, ResultStore, Source, SourceInfo};
use crate::core::folds::random::Random;
use crate::core::folds::{FoldScheme, FoldSet, SchemeInput};
use crate::core::matching::{prediction_distances, Matching};
use crate::core::neighbours::NeighbourIndex;
use crate::core::units::{Dataset, UnitCollector};
use crate::core::validate::{assign_folds, check_training, fit_and_score, Plan, RunOutcome};
use crate::error::Error;
use crate::report::Summary;
use crate::results::rows::{FinishedRun, RunRecord};
use crate::spec::{PredictionRef, ResultsRef, RunSpec, SourceRef};

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
fn check_crs(spec: &RunSpec, info: &mut SourceInfo, scheme: &dyn FoldScheme) -> Result<(), Error> {
    if !(scheme.needs_distances() || spec.exclusion_radius.is_some() || spec.prediction.is_some()) {
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
}

/// Runs a specification.
///
/// # Errors
/// Any [`Error`]; see the module doc for what each leaves behind.
pub fn run(spec: &RunSpec) -> Result<Summary, Error> {
    let checked = spec.check()?;
    let mut source = open_source(spec)?;
    let mut info = source.info().clone();
    check_crs(spec, &mut info, checked.scheme.as_ref())?;
    let job = job_of(spec, &info);
    crate::adapters::check_job(&job)?;
    let mut store = open_store(spec)?;
    store.lock_job(&job, spec.limits.wait())?;

    let clock = std::time::Instant::now();
    let mut collector = UnitCollector::new(
        &info.table,
        &info.target_column,
        &info.feature_columns,
        spec.strict,
    )
    .with_group(info.group_column.as_deref())
    .with_exposure(info.exposure_column.as_deref())
    .with_geometries(checked.scheme.requirements().geometries);
    source.read(&mut collector)?;
    let locations: Option<Locations> = match &spec.prediction {
        Some(PredictionRef::Postgis { table, geom }) => {
            Some(source.read_locations(table, geom.as_deref(), spec.distance_srid)?)
        }
        Some(PredictionRef::Gpkg { layer }) => Some(source.read_locations(layer, None, None)?),
        None => None,
    };
    drop(source);
    let mut data = collector.finish(&info.id_column)?;
    let geometries = data.geometries.take();
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
        let record = RunRecord {
            run_id: Uuid::new_v4(),
            job: job.clone(),
            primary_run_id: planned.first().map(|p| p.record.run_id),
            started_at_micros,
            scheme: scheme.name().to_string(),
            model: checked.model.name().to_string(),
            family: checked.model.family().name(),
            parameters: serde_json::json!({
                "scheme": scheme.parameters(),
                "model": checked.model.parameters(),
                "exclusion-radius": spec.exclusion_radius,
            }),
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
        });
    }

    drop(geometries);
    let prediction = locations
        .as_ref()
        .map(|l| prediction_distances(&l.points, &index));
    store.prepare(&info)?;
    let records: Vec<RunRecord> = planned.iter().map(|p| p.record.clone()).collect();
    store.begin(&info, &records)?;
    let context = Context {
        spec,
        checked: &checked,
        info: &info,
        data: &data,
        locations: locations.as_ref(),
        prediction: prediction.as_deref(),
    };
    let result = fit_and_write(&context, planned, store.as_mut());
    if let Err(error) = &result {
        store.fail(&records, &error.to_string());
    }
    result
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
        ..
    } = *context;
    let clock = std::time::Instant::now();
    let mut records = Vec::new();
    let mut outcomes: Vec<RunOutcome> = Vec::new();
    let mut descriptions = Vec::new();
    for Planned {
        scheme,
        record,
        folds,
    } in planned
    {
        let plan = Plan {
            scheme,
            model: checked.model.as_ref(),
            repeats: spec.repeats,
            seed: spec.seed,
            exclusion_radius: spec.exclusion_radius,
        };
        let mut outcome = fit_and_score(data, &plan, folds)?;
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
    tracing::info!(elapsed_ms = clock.elapsed().as_millis() as u64, "validated");
    let clock = std::time::Instant::now();
    let finished: Vec<FinishedRun<'_>> = records
        .iter()
        .zip(&outcomes)
        .map(|(record, outcome)| FinishedRun { record, outcome })
        .collect();
    let report = store.commit(info, data, &finished)?;
    tracing::info!(
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
    Ok(summary)
}
