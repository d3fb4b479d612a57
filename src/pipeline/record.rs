//! What a run checks against the job's stored history: the skip-unchanged check against the
//! job's last successful run, and the drift gates against the job's baseline.

use super::*;

/// The unchanged outcome, when the job's last successful run read the same
/// input with the same settings.
pub(super) fn unchanged(
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
pub(super) fn judge_gates(
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
