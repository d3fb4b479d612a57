//! Step 6 of the pipeline: fit and score every planned run, then write everything in one transaction.

use super::*;

/// What step 6 works from.
pub(super) struct Context<'a> {
    pub(super) spec: &'a RunSpec,
    pub(super) checked: &'a crate::spec::Checked,
    pub(super) info: &'a SourceInfo,
    pub(super) data: &'a Dataset,
    pub(super) locations: Option<&'a Locations>,
    /// Prediction distances (each location to its nearest unit).
    pub(super) prediction: Option<&'a [f64]>,
    pub(super) progress: &'a dyn Progress,
}

/// Step 6 of the module doc.
pub(super) fn fit_and_write(
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
        let plan = plan_of(spec, checked, scheme);
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
