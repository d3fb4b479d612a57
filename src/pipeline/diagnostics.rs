//! The per-run diagnostics: Moran's I of the held-out residuals and the nearest-distance summaries,
//! computed while the rows are written.

use super::*;

/// Moran's I of each run's held-out residuals, with the same weights for
/// every run of the invocation, or why it could not be computed (constant or
/// missing residuals).
pub(super) fn held_out_morans(
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
pub(super) fn late_figures(
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
        let cells = Buckets::new(&data.points);
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
