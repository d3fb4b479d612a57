//! Reading one stored run and what belongs to it through
//! [`ReadBack`](crate::adapters::readback::ReadBack): the same reads, in the
//! same order, from PostGIS and from a GeoPackage.

use std::collections::BTreeMap;

use super::{
    DistanceSummaryRecord, FoldRecord, InspectionRecord, MoranRecord, Row, RunRecord, StoredRun,
    UnitRecord,
};
use crate::adapters::history::Store;
use crate::adapters::readback::UnitSource;
use crate::error::{exit, Error, Location};
use crate::results::rows::Owned;
use crate::results::{
    TableDef, COEFFICIENTS, CORRELOGRAM, DIAGNOSTICS, FOLDS, FOLD_DISTANCES, FOLD_EXCLUSIONS,
    FOLD_REGIONS, FOLD_SCORE_VALUES, HELD_OUT, INSPECTIONS, NEAREST_DISTANCES, RUNS,
    RUN_SCORE_VALUES, SEMIVARIOGRAM, UNIT_SUMMARIES, VARIOGRAM_FITS,
};

/// Which run to read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RunChoice {
    /// This run.
    Run(uuid::Uuid),
    /// The job's latest successful primary run.
    Job(String),
}

/// What to read besides the run's record and scores.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Reading {
    /// Per-unit values, exclusions, regions and geometries (for maps).
    pub units: bool,
    /// The job's history and inspection (for the report).
    pub job: bool,
}

/// Every row of `table` whose `key` is among `values`.
fn rows(
    store: &mut dyn Store,
    table: &'static TableDef,
    key: &str,
    values: &[String],
) -> Result<Vec<Vec<Owned>>, Error> {
    let mut out = Vec::new();
    store.read_rows(table, key, values, &mut |row| {
        out.push(row);
        Ok(())
    })?;
    Ok(out)
}

/// Finds the run asked for.
fn choose(store: &mut dyn Store, choice: &RunChoice) -> Result<RunRecord, Error> {
    let location = store.location();
    let found = match choice {
        RunChoice::Run(id) => rows(store, &RUNS, "run_id", &[id.to_string()])?
            .first()
            .map(|values| RunRecord::from_row(&Row::new(&RUNS, values)))
            .ok_or_else(|| Error::NotFound {
                what: format!("run {id} in {location}"),
            })?,
        RunChoice::Job(job) => {
            let mut runs: Vec<RunRecord> = rows(store, &RUNS, "job", std::slice::from_ref(job))?
                .iter()
                .map(|values| RunRecord::from_row(&Row::new(&RUNS, values)))
                .filter(RunRecord::is_primary_success)
                .collect();
            runs.sort_by(|a, b| {
                a.started_at
                    .cmp(&b.started_at)
                    .then(a.run_id.cmp(&b.run_id))
            });
            runs.pop().ok_or_else(|| Error::NotFound {
                what: format!("a successful run of job {job} in {location}"),
            })?
        }
    };
    if found.status != "succeeded" {
        return Err(Error::Input {
            problems: vec![(
                Location {
                    table: format!("{location}: runs"),
                    column: Some("status".into()),
                    row_id: Some(found.run_id.clone()),
                },
                format!(
                    "the run has status {}; only a run that succeeded has results to show",
                    found.status
                ),
            )],
        });
    }
    Ok(found)
}

/// Reads the run asked for and what `reading` names.
///
/// # Errors
/// [`Error::NotFound`] (66) for an unknown run or a job without a successful
/// run, or a store with no results tables; [`Error::Input`] (65) for a run
/// that did not succeed; database and file errors.
pub fn load(
    store: &mut dyn Store,
    choice: &RunChoice,
    reading: Reading,
) -> Result<StoredRun, Error> {
    if !store.initialised()? {
        return Err(Error::NotFound {
            what: format!(
                "results tables in {}: no run has been written there",
                store.location()
            ),
        });
    }
    let run = choose(store, choice)?;
    let id = vec![run.run_id.clone()];
    let mut job_runs: Vec<RunRecord> = rows(store, &RUNS, "job", std::slice::from_ref(&run.job))?
        .iter()
        .map(|values| RunRecord::from_row(&Row::new(&RUNS, values)))
        .collect();
    job_runs.sort_by(|a, b| {
        a.started_at
            .cmp(&b.started_at)
            .then(a.run_id.cmp(&b.run_id))
    });
    let wanted: Vec<String> = if reading.job {
        job_runs
            .iter()
            .filter(|r| r.status == "succeeded")
            .map(|r| r.run_id.clone())
            .collect()
    } else {
        job_runs
            .iter()
            .filter(|r| {
                r.run_id == run.run_id
                    || (r.primary_run_id.as_deref() == Some(run.run_id.as_str())
                        && r.status == "succeeded")
            })
            .map(|r| r.run_id.clone())
            .collect()
    };
    let mut run_scores: BTreeMap<String, Vec<(String, String, Option<f64>)>> = BTreeMap::new();
    for values in rows(store, &RUN_SCORE_VALUES, "run_id", &wanted)? {
        let row = Row::new(&RUN_SCORE_VALUES, &values);
        run_scores
            .entry(row.text_or_empty("run_id"))
            .or_default()
            .push((
                row.text_or_empty("score"),
                row.text_or_empty("statistic"),
                row.float("value"),
            ));
    }
    let mut folds: Vec<FoldRecord> = rows(store, &FOLDS, "run_id", &id)?
        .iter()
        .map(|values| {
            let row = Row::new(&FOLDS, values);
            FoldRecord {
                repetition: row.int("repetition").unwrap_or(0) as u32,
                fold: row.int("fold").unwrap_or(0) as u32,
                n_train: row.int("n_train").unwrap_or(0).max(0) as u64,
                n_test: row.int("n_test").unwrap_or(0).max(0) as u64,
                scores: Vec::new(),
            }
        })
        .collect();
    folds.sort_by_key(|f| (f.repetition, f.fold));
    for values in rows(store, &FOLD_SCORE_VALUES, "run_id", &id)? {
        let row = Row::new(&FOLD_SCORE_VALUES, &values);
        let key = (
            row.int("repetition").unwrap_or(0) as u32,
            row.int("fold").unwrap_or(0) as u32,
        );
        if let Some(fold) = folds.iter_mut().find(|f| (f.repetition, f.fold) == key) {
            fold.scores
                .push((row.text_or_empty("score"), row.float("value")));
        }
    }
    let diagnostics = moran_rows(store, &id)?;
    let (inspection, coefficients, nearest_distances, fold_distances) = if reading.job {
        let mut partners = id.clone();
        partners.extend(
            job_runs
                .iter()
                .filter(|r| r.primary_run_id.as_deref() == Some(run.run_id.as_str()))
                .map(|r| r.run_id.clone()),
        );
        (
            latest_inspection(store, &run.job)?,
            coefficient_rows(store, &id)?,
            distance_rows(store, &id)?,
            distance_summaries(store, &partners)?,
        )
    } else {
        (None, Vec::new(), (Vec::new(), Vec::new()), Vec::new())
    };
    let mut stored = StoredRun {
        crs: store.crs(run.distance_srid)?,
        run,
        job_runs,
        run_scores,
        folds,
        units: Vec::new(),
        units_without_geometry: 0,
        geometry_origin: None,
        geometry_problem: None,
        regions: Vec::new(),
        diagnostics,
        coefficients,
        nearest_distances,
        fold_distances,
        inspection,
    };
    if reading.units {
        read_units(store, &mut stored)?;
    }
    Ok(stored)
}

/// `nearest_distances` of a run: cv distances of repetition 1 and prediction
/// distances, each ascending, without the NULLs of folds with no training unit.
fn distance_rows(store: &mut dyn Store, run: &[String]) -> Result<(Vec<f64>, Vec<f64>), Error> {
    let (cv, prediction) = nearest_distances(store, &run[0])?;
    let ascending = |values: Vec<f64>| {
        let mut values: Vec<f64> = values.into_iter().filter(|d| d.is_finite()).collect();
        values.sort_by(f64::total_cmp);
        values
    };
    Ok((
        ascending(cv.into_iter().next().unwrap_or_default()),
        ascending(prediction),
    ))
}

/// `nearest_distances` of run `run`: the cv distances of each repetition
/// (index 0 is repetition 1) and the prediction distances, in no particular
/// order; NaN where the stored distance is NULL (a fold with no training
/// unit). Both empty for a run given no prediction locations.
///
/// # Errors
/// Database and file errors.
pub fn nearest_distances(
    store: &mut dyn Store,
    run: &str,
) -> Result<(Vec<Vec<f64>>, Vec<f64>), Error> {
    let (mut cv, mut prediction): (Vec<Vec<f64>>, Vec<f64>) = (Vec::new(), Vec::new());
    store.read_rows(
        &NEAREST_DISTANCES,
        "run_id",
        &[run.to_string()],
        &mut |values| {
            let row = Row::new(&NEAREST_DISTANCES, &values);
            let distance = row.float("distance").unwrap_or(f64::NAN);
            match (row.text("kind").as_deref(), row.int("repetition")) {
                (Some("cv"), Some(repetition)) if repetition >= 1 => {
                    let slot = (repetition - 1) as usize;
                    if cv.len() <= slot {
                        cv.resize_with(slot + 1, Vec::new);
                    }
                    cv[slot].push(distance);
                }
                (Some("prediction"), _) => prediction.push(distance),
                _ => {}
            }
            Ok(())
        },
    )?;
    Ok((cv, prediction))
}

/// `fold_distances` rows of `runs`, in the order of `runs`, then by kind
/// (cv first) and fold (all folds together first).
fn distance_summaries(
    store: &mut dyn Store,
    runs: &[String],
) -> Result<Vec<DistanceSummaryRecord>, Error> {
    let mut found: Vec<DistanceSummaryRecord> = rows(store, &FOLD_DISTANCES, "run_id", runs)?
        .iter()
        .filter_map(|values| {
            let row = Row::new(&FOLD_DISTANCES, values);
            Some(DistanceSummaryRecord {
                run_id: row.text("run_id")?,
                kind: row.text("kind")?,
                fold: row.int("fold").and_then(|f| u32::try_from(f).ok()),
                n: u64::try_from(row.int("n")?).ok()?,
                sampled_from: row.int("sampled_from").and_then(|n| u64::try_from(n).ok()),
                minimum: row.float("minimum")?,
                p10: row.float("p10")?,
                median: row.float("median")?,
                p90: row.float("p90")?,
                maximum: row.float("maximum")?,
            })
        })
        .collect();
    let rank = |run_id: &str| runs.iter().position(|r| r == run_id).unwrap_or(usize::MAX);
    found.sort_by(|a, b| {
        (rank(&a.run_id), a.kind != "cv", a.fold).cmp(&(rank(&b.run_id), b.kind != "cv", b.fold))
    });
    Ok(found)
}

/// `coefficients` rows of a run, by repetition, fold and term.
fn coefficient_rows(
    store: &mut dyn Store,
    run: &[String],
) -> Result<Vec<(u32, u32, String, f64)>, Error> {
    let mut found: Vec<(u32, u32, String, f64)> = rows(store, &COEFFICIENTS, "run_id", run)?
        .iter()
        .filter_map(|values| {
            let row = Row::new(&COEFFICIENTS, values);
            Some((
                u32::try_from(row.int("repetition")?).ok()?,
                u32::try_from(row.int("fold")?).ok()?,
                row.text("term")?,
                row.float("estimate")?,
            ))
        })
        .collect();
    found.sort_by(|a, b| (a.0, a.1, &a.2).cmp(&(b.0, b.1, &b.2)));
    Ok(found)
}

/// `diagnostics` rows of an analysis (a run or an inspection).
fn moran_rows(store: &mut dyn Store, analysis: &[String]) -> Result<Vec<MoranRecord>, Error> {
    let mut found: Vec<MoranRecord> = rows(store, &DIAGNOSTICS, "analysis_id", analysis)?
        .iter()
        .map(|values| {
            let row = Row::new(&DIAGNOSTICS, values);
            MoranRecord {
                subject: row.text_or_empty("subject"),
                weights: row.text_or_empty("weights"),
                n: row.int("n").unwrap_or(0),
                sampled_from: row.int("sampled_from"),
                value: row.float("value").unwrap_or(f64::NAN),
                expected: row.float("expected_random"),
                z: row.float("z_random"),
                p: row.float("p_random"),
            }
        })
        .collect();
    found.sort_by(|a, b| (&a.subject, &a.weights).cmp(&(&b.subject, &b.weights)));
    Ok(found)
}

/// The job's latest inspection and its residual semivariogram, chosen fit
/// and correlogram.
fn latest_inspection(store: &mut dyn Store, job: &str) -> Result<Option<InspectionRecord>, Error> {
    let inspections = rows(store, &INSPECTIONS, "job", &[job.to_string()])?;
    let Some(latest) = inspections
        .iter()
        .map(|values| Row::new(&INSPECTIONS, values))
        .max_by(|a, b| {
            (
                a.text_or_empty("started_at"),
                a.text_or_empty("inspection_id"),
            )
                .cmp(&(
                    b.text_or_empty("started_at"),
                    b.text_or_empty("inspection_id"),
                ))
        })
    else {
        return Ok(None);
    };
    let id = vec![latest.text_or_empty("inspection_id")];
    let mut semivariogram: Vec<(i64, f64, f64, u64)> =
        rows(store, &SEMIVARIOGRAM, "analysis_id", &id)?
            .iter()
            .filter_map(|values| {
                let row = Row::new(&SEMIVARIOGRAM, values);
                (row.text_or_empty("subject") == "residuals").then_some(())?;
                Some((
                    row.int("lag")?,
                    row.float("mean_distance")?,
                    row.float("semivariance")?,
                    row.int("pairs").unwrap_or(0).max(0) as u64,
                ))
            })
            .collect();
    semivariogram.sort_by_key(|l| l.0);
    let fit = rows(store, &VARIOGRAM_FITS, "analysis_id", &id)?
        .iter()
        .find_map(|values| {
            let row = Row::new(&VARIOGRAM_FITS, values);
            (row.text_or_empty("subject") == "residuals" && row.int("chosen") == Some(1))
                .then_some(())?;
            Some((
                row.text_or_empty("model"),
                row.float("nugget")?,
                row.float("partial_sill")?,
                row.float("effective_range")?,
            ))
        });
    let mut correlogram: Vec<(i64, f64, f64, u64, Option<f64>)> =
        rows(store, &CORRELOGRAM, "analysis_id", &id)?
            .iter()
            .filter_map(|values| {
                let row = Row::new(&CORRELOGRAM, values);
                (row.text_or_empty("subject") == "residuals").then_some(())?;
                Some((
                    row.int("class")?,
                    row.float("mean_distance").or_else(|| row.float("upper"))?,
                    row.float("morans_i")?,
                    row.int("pairs").unwrap_or(0).max(0) as u64,
                    row.float("z_random"),
                ))
            })
            .collect();
    correlogram.sort_by_key(|c| c.0);
    Ok(Some(InspectionRecord {
        inspection_id: id[0].clone(),
        started_at: latest.text_or_empty("started_at"),
        model: latest.text_or_empty("model"),
        weights: latest.text_or_empty("weights"),
        units: latest.int("units").unwrap_or(0),
        advice: latest.text_or_empty("advice"),
        semivariogram: semivariogram.into_iter().map(|l| (l.1, l.2, l.3)).collect(),
        fit,
        correlogram: correlogram
            .into_iter()
            .map(|c| (c.1, c.2, c.3, c.4))
            .collect(),
    }))
}

/// Per-unit values of repetition 1 (or the summaries over repetitions),
/// exclusions, regions and geometries.
fn read_units(store: &mut dyn Store, stored: &mut StoredRun) -> Result<(), Error> {
    let run = &stored.run;
    let id = vec![run.run_id.clone()];
    let mut units: BTreeMap<String, UnitRecord> = BTreeMap::new();
    let blank = |unit_id: String| UnitRecord {
        unit_id,
        fold: None,
        excluded_from: Vec::new(),
        observed: None,
        predicted: None,
        residual: None,
        abs_error: None,
        geometry: None,
    };
    // As the view unit_errors: one repetition from held_out, several from unit_summaries.
    let several = run.repeats > 1;
    store.read_rows(&HELD_OUT, "run_id", &id, &mut |values| {
        let row = Row::new(&HELD_OUT, &values);
        if row.int("repetition") != Some(1) {
            return Ok(());
        }
        let unit_id = row.text_or_empty("unit_id");
        let unit = units
            .entry(unit_id.clone())
            .or_insert_with(|| blank(unit_id));
        unit.fold = row.int("fold").and_then(|f| u32::try_from(f).ok());
        if !several {
            let (observed, predicted) = (row.float("observed"), row.float("predicted"));
            unit.observed = observed;
            unit.predicted = predicted;
            let residual = observed.zip(predicted).map(|(o, p)| o - p);
            unit.residual = residual;
            unit.abs_error = residual.map(f64::abs);
        }
        Ok(())
    })?;
    if several {
        store.read_rows(&UNIT_SUMMARIES, "run_id", &id, &mut |values| {
            let row = Row::new(&UNIT_SUMMARIES, &values);
            let unit_id = row.text_or_empty("unit_id");
            let unit = units
                .entry(unit_id.clone())
                .or_insert_with(|| blank(unit_id));
            let (observed, predicted) = (row.float("observed"), row.float("mean_predicted"));
            unit.observed = observed;
            unit.predicted = predicted;
            unit.residual = observed.zip(predicted).map(|(o, p)| o - p);
            unit.abs_error = row.float("mae");
            Ok(())
        })?;
    }
    store.read_rows(&FOLD_EXCLUSIONS, "run_id", &id, &mut |values| {
        let row = Row::new(&FOLD_EXCLUSIONS, &values);
        if row.int("repetition") != Some(1) {
            return Ok(());
        }
        if let (Some(unit), Some(fold)) = (
            units.get_mut(&row.text_or_empty("unit_id")),
            row.int("fold").and_then(|f| u32::try_from(f).ok()),
        ) {
            unit.excluded_from.push(fold);
        }
        Ok(())
    })?;
    let mut regions: BTreeMap<u32, geo_types::MultiPolygon<f64>> = BTreeMap::new();
    for values in rows(store, &FOLD_REGIONS, "run_id", &id)? {
        let row = Row::new(&FOLD_REGIONS, &values);
        if row.int("repetition") != Some(1) {
            continue;
        }
        if let (Some(fold), Some(shape)) = (
            row.int("fold").and_then(|f| u32::try_from(f).ok()),
            row.geometry("geom"),
        ) {
            regions
                .entry(fold)
                .or_insert_with(|| geo_types::MultiPolygon::new(Vec::new()))
                .0
                .extend(shape.0.iter().cloned());
        }
    }
    let source = UnitSource {
        run_id: run.run_id.clone(),
        job: run.job.clone(),
        source_store: run.source_store.clone(),
        source_table: run.source_table.clone(),
        id_column: run.id_column.clone(),
        geometry_column: run.geometry_column.clone(),
        source_srid: run.source_srid,
        distance_srid: run.distance_srid,
    };
    // Shapes go straight into the units (sorted by id), so no second map of a
    // million ids is held.
    let mut records: Vec<UnitRecord> = units.into_values().collect();
    let read = store.unit_geometries(&source, &mut |unit_id, shape| {
        if let (Ok(at), Some(shape)) = (
            records.binary_search_by(|u| u.unit_id.as_str().cmp(&unit_id)),
            shape,
        ) {
            records[at].geometry.get_or_insert(shape);
        }
        Ok(())
    });
    // A source that is gone leaves the units without shapes: said, not fatal
    // (the report is still worth having without its maps).
    let origin = match read {
        Ok(origin) => Some(origin),
        Err(error) if error.exit_code() == exit::NO_INPUT => {
            tracing::warn!(run_id = %stored.run.run_id, %error, "the unit geometries cannot be read");
            stored.geometry_problem = Some(error.to_string());
            None
        }
        Err(error) => return Err(error),
    };
    let mut missing = 0u64;
    for unit in &mut records {
        unit.excluded_from.sort_unstable();
        unit.excluded_from.dedup();
        if unit.geometry.is_none() {
            missing += 1;
        }
    }
    if let (true, Some(origin)) = (missing > 0, &origin) {
        tracing::warn!(
            run_id = %stored.run.run_id,
            units = missing,
            read_from = %origin.read_from,
            "units without a geometry are left off the maps"
        );
    }
    if let Some(origin) = origin
        .as_ref()
        .filter(|o| o.srid != stored.run.distance_srid)
    {
        // The regions are in the distance CRS and the shapes are not: draw the
        // shapes in their own CRS, without the regions.
        stored.crs = store.crs(origin.srid)?;
        regions.clear();
    }
    stored.units = records;
    stored.units_without_geometry = missing;
    stored.geometry_origin = origin;
    stored.regions = regions.into_iter().collect();
    Ok(())
}
