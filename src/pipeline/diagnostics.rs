//! The per-run diagnostics: Moran's I of the held-out residuals and the nearest-distance summaries,
//! computed while the rows are written.

use super::*;

/// The weights of the held-out Moran's I, the same for every run of the
/// invocation, or why they could not be built.
fn held_out_weights(
    data: &Dataset,
    rule: &crate::spec::WeightsRule,
    seed: u64,
) -> Result<HeldOutWeights, String> {
    rule.for_points()
        .map_err(|e| e.to_string())
        .and_then(|point_rule| {
            HeldOutWeights::new(&data.points, point_rule, &rule.name(), seed)
                .map_err(|e| e.to_string())
        })
}

/// Moran's I of one run's held-out residuals, or why it could not be
/// computed (no weights, constant or missing residuals).
fn held_out_moran(
    weights: &Result<HeldOutWeights, String>,
    outcome: &RunOutcome,
    data: &Dataset,
) -> Result<HeldOutMoran, String> {
    weights.as_ref().map_err(Clone::clone).and_then(|w| {
        w.moran(&outcome.held_out_residuals(&data.target))
            .map_err(|e| e.to_string())
    })
}

/// Moran's I of each run's held-out residuals (see [`held_out_moran`]).
pub(super) fn held_out_morans(
    outcomes: &[RunOutcome],
    data: &Dataset,
    rule: &crate::spec::WeightsRule,
    seed: u64,
) -> Vec<Result<HeldOutMoran, String>> {
    let weights = held_out_weights(data, rule, seed);
    outcomes
        .iter()
        .map(|outcome| held_out_moran(&weights, outcome, data))
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

/// A run's nearest-distance summaries (`fold_distances` rows): each fold's
/// test-to-training distances in its first repetition, and the prediction
/// locations' distances to the data when the run has them.
pub(crate) fn distance_summaries(
    outcome: &RunOutcome,
    points: &[[f64; 2]],
    buckets: &Buckets,
    seed: u64,
    prediction: Option<&[f64]>,
) -> Vec<DistanceSummary> {
    let mut summaries = outcome
        .repetitions
        .first()
        .map(|first| fold_distances(&first.folds, points, buckets, seed))
        .unwrap_or_default();
    summaries.extend(prediction.and_then(|p| summarise("prediction", None, p, None)));
    summaries
}

/// Fills every run's [`LateFigures`] (both cells, always: the write waits
/// for them) and returns, per run, why its Moran's I could not be computed.
pub(super) fn late_figures(
    context: &Context<'_>,
    outcomes: &[RunOutcome],
    late: &[LateFigures],
) -> Vec<Option<String>> {
    let (spec, data) = (context.spec, context.data);
    // Run by run, so the first run's rows are ready while the next run's
    // figures are computed.
    let computed = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        let (mut moran_time, mut distance_time) = (Duration::ZERO, Duration::ZERO);
        let clock = std::time::Instant::now();
        let weights = if spec.assign_only {
            Err(String::new())
        } else {
            held_out_weights(data, &context.checked.residual_weights, spec.seed)
        };
        moran_time += clock.elapsed();
        // The weights go once the last Moran's I is computed, and the buckets
        // come after the first: the two never need to be held at once for
        // a single run.
        let mut weights = Some(weights);
        let mut buckets: Option<Buckets> = None;
        let mut problems = Vec::with_capacity(outcomes.len());
        for (index, (outcome, cell)) in outcomes.iter().zip(late).enumerate() {
            let clock = std::time::Instant::now();
            let moran = match &weights {
                Some(weights) => held_out_moran(weights, outcome, data),
                None => Err(String::new()),
            };
            if index + 1 == outcomes.len() {
                weights = None;
            }
            match moran {
                Ok(moran) => {
                    let _ = cell.held_out_moran.set(vec![moran]);
                    problems.push(None);
                }
                Err(problem) => {
                    let _ = cell.held_out_moran.set(Vec::new());
                    problems.push((!problem.is_empty()).then_some(problem));
                }
            }
            moran_time += clock.elapsed();
            let clock = std::time::Instant::now();
            let buckets = buckets.get_or_insert_with(|| Buckets::new(&data.points));
            let summaries = distance_summaries(
                outcome,
                &data.points,
                buckets,
                spec.seed,
                context.prediction,
            );
            let _ = cell.fold_distances.set(summaries);
            distance_time += clock.elapsed();
        }
        tracing::info!(
            phase = "diagnostics",
            elapsed_ms = moran_time.as_millis() as u64,
            "held-out residual Moran's I"
        );
        tracing::info!(
            phase = "diagnostics",
            elapsed_ms = distance_time.as_millis() as u64,
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
