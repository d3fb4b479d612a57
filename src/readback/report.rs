//! A stored run → [`ReportInput`]: its settings in plain words with units,
//! its scores (pooled, per fold, the training-mean baseline), the comparison
//! run, Moran's I of its held-out residuals, the job's latest inspection
//! (semivariogram with the chosen model, correlogram, advice) and the job's
//! score history with the run's gates. Pure.
//!
//! # Gates over the history
//! A run stores the gates it was judged by in `runs.parameters` (`gates`,
//! `baseline-runs`). A point of the history is marked breached when one of
//! that run's own gates is breached by its pooled score, judged as
//! [`crate::gates::evaluate`] judges it against the baseline
//! [`crate::gates::choose_baseline`] finds among the runs that started before
//! it. The pinned run is the one pinned now: a pin moved since the run
//! changes its baseline (the verdict the run printed is not stored).

use std::collections::BTreeMap;

use super::{length, DistanceSummaryRecord, RunRecord, StoredRun};
use crate::adapters::readback::CrsFacts;
use crate::adapters::CrsKind;
use crate::core::folds::build_scheme;
use crate::core::metrics::{score_def, Better as ScoreBetter, Family, ALL_SCORES};
use crate::core::models::build_model;
use crate::gates::{choose_baseline, evaluate, Gate as GateRule, Limit, Verdict};
use crate::pipeline::{BASELINE_RUNS_KEY, GATES_KEY};
use crate::render::report::input::{
    Better, Comparison, Correlogram, CorrelogramBin, DistanceRow, FittedVariogram, FoldCoefficient,
    FoldScores, Gate, HistoryPoint, NearestDistances, ReportInput, ResidualMoran, RunFacts, Score,
    ScoreDefinition, ScoreHistory, ScoreTable, Semivariogram, Setting, SkipReason, TestDistances,
    VariogramBin, VariogramModel,
};
use crate::results::rows::MATCH_SCORE;

/// How a stored score name is shown: `rmse` → `RMSE`, `r2` → `R²`.
pub fn score_label(name: &str) -> String {
    match name {
        "rmse" => "RMSE".to_string(),
        "mae" => "MAE".to_string(),
        "r2" => "R\u{00b2}".to_string(),
        "log_loss" => "log-loss".to_string(),
        "brier" => "Brier score".to_string(),
        "roc_auc" => "ROC AUC".to_string(),
        "poisson_deviance" => "Poisson deviance".to_string(),
        MATCH_SCORE => "W (nearest-distance match)".to_string(),
        other => other.to_string(),
    }
}

/// The unit of a score: the target's for error scores and bias, none for R².
fn score_unit(name: &str, target_unit: &str) -> String {
    match name {
        "rmse" | "mae" | "bias" => target_unit.to_string(),
        _ => String::new(),
    }
}

/// A stored timestamp (`2026-01-01T00:00:02.345Z`) in words: `2026-01-01 00:00:02 UTC`.
pub fn timestamp(stored: &str) -> String {
    match stored.split_once('T') {
        Some((date, time)) => {
            let time = time.trim_end_matches('Z');
            let time = time.split('.').next().unwrap_or(time);
            format!("{date} {time} UTC")
        }
        None => stored.to_string(),
    }
}

/// The CRS in words: `SRID 32631: WGS 84 / UTM zone 31N (unit: metre)`.
pub fn crs_words(crs: &CrsFacts) -> String {
    match crs.kind {
        CrsKind::Undefined => format!(
            "none defined (SRID {}): coordinates are plain numbers, lengths in coordinate units",
            crs.srid
        ),
        kind => format!(
            "SRID {}: {} ({}, unit: {})",
            crs.srid,
            crs.name.as_deref().unwrap_or("unnamed"),
            if kind == CrsKind::Geographic {
                "longitude and latitude"
            } else {
                "projected"
            },
            crs.unit_name.as_deref().unwrap_or("not stated")
        ),
    }
}

/// The short distance unit of charts: `m` for metres, else the unit's name.
fn distance_unit(crs: &CrsFacts) -> String {
    match crs.unit_name.as_deref() {
        Some(u) if ["metre", "meter", "m"].contains(&u.to_ascii_lowercase().as_str()) => {
            "m".to_string()
        }
        Some(u) if crs.kind != CrsKind::Undefined => u.to_string(),
        _ => "coordinate units".to_string(),
    }
}

/// A weights rule in words: "the 8 nearest units as neighbours (knn:8, weights row-standardised)".
fn weights_words(rule: &str) -> String {
    let words = match rule.split_once(':') {
        Some(("knn", k)) => format!("the {k} nearest units as neighbours"),
        Some(("band", d)) => format!("units within {d} CRS units as neighbours"),
        _ if rule == "queen" => "units sharing a boundary point as neighbours".to_string(),
        _ if rule == "rook" => "units sharing a boundary edge as neighbours".to_string(),
        _ => format!("neighbours by {rule}"),
    };
    format!("{words} ({rule}, weights row-standardised)")
}

/// Where the units came from, in words.
fn source_words(run: &RunRecord) -> String {
    match (run.source_store.as_str(), run.source_table.rsplit_once(':')) {
        ("gpkg", Some((file, layer))) => format!("GeoPackage layer {layer} of {file}"),
        ("postgis", _) => format!("PostGIS table {}", run.source_table),
        (store, _) => format!("{store} {}", run.source_table),
    }
}

fn value_text(value: &serde_json::Value) -> String {
    match value {
        serde_json::Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

/// The scheme in words (its own description when it can be rebuilt from the
/// stored options) and its settings.
fn scheme_words(run: &RunRecord, crs: &CrsFacts) -> (String, Vec<Setting>) {
    let stored = &run.parameters["scheme"];
    let options = stored.as_object().cloned().unwrap_or_default();
    let described = build_scheme(&run.scheme, &options)
        .ok()
        .filter(|scheme| scheme.parameters() == *stored)
        .map(|scheme| scheme.describe(&|v| length(v, crs)));
    let setting = |name: &str, value: String| Setting {
        name: name.to_string(),
        value,
    };
    let mut settings = Vec::new();
    let scheme = match described {
        Some(words) => format!("{} ({words})", run.scheme),
        None => {
            for (key, value) in &options {
                settings.push(setting(key, value_text(value)));
            }
            run.scheme.clone()
        }
    };
    // A scheme's own description names its folds; a raw option list may not.
    if settings.iter().all(|s| s.name != "folds") && !scheme.contains(" folds") {
        settings.push(setting("folds", run.folds.to_string()));
    }
    settings.push(setting("repetitions", run.repeats.to_string()));
    settings.push(setting("seed", run.seed.to_string()));
    if let Some(radius) = run.parameters["exclusion-radius"].as_f64() {
        settings.push(setting("exclusion radius", length(radius, crs)));
    }
    (scheme, settings)
}

/// The model in words and its settings.
fn model_words(run: &RunRecord) -> (String, Vec<Setting>) {
    let stored = &run.parameters["model"];
    if let Ok(model) = build_model(&run.model, &serde_json::Map::new()) {
        if model.parameters() == *stored {
            return (format!("{} ({})", run.model, model.describe()), Vec::new());
        }
    }
    let settings = stored
        .as_object()
        .map(|options| {
            options
                .iter()
                .map(|(key, value)| Setting {
                    name: key.clone(),
                    value: value_text(value),
                })
                .collect()
        })
        .unwrap_or_default();
    (run.model.clone(), settings)
}

fn skipped(run: &RunRecord) -> Vec<SkipReason> {
    let mut reasons: Vec<SkipReason> = run
        .units_skipped
        .as_object()
        .map(|counts| {
            counts
                .iter()
                .map(|(reason, count)| SkipReason {
                    reason: reason.clone(),
                    count: count.as_u64().unwrap_or(0),
                })
                .collect()
        })
        .unwrap_or_default();
    reasons.sort_by(|a, b| b.count.cmp(&a.count).then(a.reason.cmp(&b.reason)));
    reasons
}

/// `(score, value)` of one statistic among a run's scores, in stored-name order.
fn statistic(scores: &[(String, String, Option<f64>)], which: &str) -> Vec<Score> {
    let mut found: Vec<Score> = scores
        .iter()
        .filter(|(name, stat, _)| stat == which && name != "n")
        .map(|(name, _, value)| Score {
            name: score_label(name),
            value: value.unwrap_or(f64::NAN),
        })
        .collect();
    found.sort_by(|a, b| a.name.cmp(&b.name));
    found
}

/// The scores the run has: its family's in the family's order (the headline
/// first), then other known ones in the order of [`ALL_SCORES`], then any
/// others.
fn score_names(stored: &StoredRun) -> Vec<String> {
    let mut present: Vec<String> = stored
        .run_scores
        .get(&stored.run.run_id)
        .into_iter()
        .flatten()
        .map(|(name, _, _)| name.clone())
        .chain(
            stored
                .folds
                .iter()
                .flat_map(|f| f.scores.iter().map(|s| s.0.clone())),
        )
        .filter(|name| name != "n")
        .collect();
    present.sort();
    present.dedup();
    // The family's own order (its headline first), then any other known score.
    let family: Vec<&str> = Family::from_name(&stored.run.family)
        .map(|f| f.scores().iter().map(|s| s.name).collect())
        .unwrap_or_default();
    let mut names: Vec<String> = family
        .iter()
        .copied()
        .chain(ALL_SCORES.iter().map(|s| s.name))
        .filter(|name| present.iter().any(|p| p == name))
        .map(str::to_string)
        .collect();
    let mut seen = Vec::new();
    names.retain(|n| {
        let first = !seen.contains(n);
        seen.push(n.clone());
        first
    });
    names.extend(present.into_iter().filter(|n| score_def(n).is_none()));
    names
}

fn scores(stored: &StoredRun, target_unit: &str) -> ScoreTable {
    let names = score_names(stored);
    let own = stored
        .run_scores
        .get(&stored.run.run_id)
        .cloned()
        .unwrap_or_default();
    ScoreTable {
        definitions: names
            .iter()
            .map(|name| {
                let def = score_def(name);
                ScoreDefinition {
                    name: score_label(name),
                    unit: if name == MATCH_SCORE {
                        distance_unit(&stored.crs)
                    } else {
                        score_unit(name, target_unit)
                    },
                    better: match def.map(|d| d.better) {
                        Some(ScoreBetter::Higher) => Better::Higher,
                        Some(ScoreBetter::Zero) => Better::NearZero,
                        _ => Better::Lower,
                    },
                    description: match def {
                        Some(d) => d.about.to_string(),
                        None if name == MATCH_SCORE => "how far the test units' nearest-distance \
                            distribution lies from the prediction locations' (Wasserstein-1); 0 is \
                            a perfect match"
                            .to_string(),
                        None => String::new(),
                    },
                }
            })
            .collect(),
        pooled: statistic(&own, "pooled"),
        baseline: statistic(&own, "baseline"),
        folds: stored
            .folds
            .iter()
            .map(|f| FoldScores {
                repetition: f.repetition,
                fold: f.fold,
                n_train: f.n_train,
                n_test: f.n_test,
                scores: f
                    .scores
                    .iter()
                    .map(|(name, value)| Score {
                        name: score_label(name),
                        value: value.unwrap_or(f64::NAN),
                    })
                    .collect(),
            })
            .collect(),
    }
}

fn comparison(stored: &StoredRun) -> Option<Comparison> {
    let other = stored.comparison()?;
    let scores = stored.run_scores.get(&other.run_id)?;
    Some(Comparison {
        label: format!("{} {}-fold", other.scheme, other.folds),
        run_id: other.run_id.clone(),
        pooled: statistic(scores, "pooled"),
    })
}

fn held_out_moran(stored: &StoredRun) -> Option<ResidualMoran> {
    let row = stored
        .diagnostics
        .iter()
        .find(|d| d.subject == "held_out_residuals" && d.value.is_finite())?;
    Some(ResidualMoran {
        weights: weights_words(&row.weights),
        units: row.n.max(0) as u64,
        sampled_from: row.sampled_from.map(|n| n.max(0) as u64),
        value: row.value,
        expected: row.expected.unwrap_or(f64::NAN),
        z: row.z.unwrap_or(f64::NAN),
        p_value: row.p.unwrap_or(f64::NAN),
    })
}

fn inspection_figures(stored: &StoredRun) -> (Option<Semivariogram>, Option<Correlogram>) {
    let Some(inspection) = &stored.inspection else {
        return (None, None);
    };
    let unit = distance_unit(&stored.crs);
    let of = format!(
        "the residuals of {} fitted to all units (inspection of {})",
        inspection.model,
        timestamp(&inspection.started_at)
    );
    let semivariogram = (!inspection.semivariogram.is_empty()).then(|| Semivariogram {
        of: of.clone(),
        distance_unit: unit.clone(),
        bins: inspection
            .semivariogram
            .iter()
            .map(|&(lag, gamma, pairs)| VariogramBin { lag, gamma, pairs })
            .collect(),
        fitted: inspection
            .fit
            .as_ref()
            .and_then(|(model, nugget, partial_sill, range)| {
                let model = match model.as_str() {
                    "spherical" => VariogramModel::Spherical,
                    "exponential" => VariogramModel::Exponential,
                    "gaussian" => VariogramModel::Gaussian,
                    _ => return None,
                };
                // The stored effective range is the practical range of the
                // exponential model, which is the renderer's range parameter.
                Some(FittedVariogram {
                    model,
                    nugget: *nugget,
                    partial_sill: *partial_sill,
                    range: *range,
                })
            }),
        advice: inspection.advice.clone(),
    });
    let correlogram = (!inspection.correlogram.is_empty()).then(|| Correlogram {
        of,
        distance_unit: unit,
        bins: inspection
            .correlogram
            .iter()
            .map(|&(lag, morans_i, pairs, z)| CorrelogramBin {
                lag,
                morans_i,
                pairs,
                p_value: z.map(crate::core::diagnostics::normal_two_sided),
            })
            .collect(),
        note:
            "Binary weights within each distance class; p-values are two-sided under randomisation \
               (given where every pair was used)."
                .to_string(),
    });
    (semivariogram, correlogram)
}

/// A stored run as the gates module sees one.
fn as_history_run(run: &RunRecord, stored: &StoredRun) -> crate::adapters::StoredRun {
    let id = |text: &str| uuid::Uuid::parse_str(text).unwrap_or_default();
    crate::adapters::StoredRun {
        run_id: id(&run.run_id),
        job: run.job.clone(),
        primary_run_id: run.primary_run_id.as_deref().map(id),
        status: run.status.clone(),
        started_at: run.started_at.clone(),
        finished_at: run.finished_at.clone(),
        scheme: run.scheme.clone(),
        model: run.model.clone(),
        units_used: run.units_used,
        input_fingerprint: run.input_fingerprint.clone(),
        parameters: run.parameters.clone(),
        error_message: None,
        pinned: run.pinned,
        scores: stored
            .run_scores
            .get(&run.run_id)
            .cloned()
            .unwrap_or_default(),
    }
}

fn gates_of(run: &RunRecord) -> (Vec<GateRule>, u32) {
    let gates = run.parameters[GATES_KEY]
        .as_array()
        .map(|items| {
            items
                .iter()
                .filter_map(|g| g.as_str().and_then(|text| GateRule::parse(text).ok()))
                .collect()
        })
        .unwrap_or_default();
    let wanted = run.parameters[BASELINE_RUNS_KEY]
        .as_u64()
        .and_then(|n| u32::try_from(n).ok())
        .unwrap_or(crate::gates::DEFAULT_BASELINE_RUNS);
    (gates, wanted)
}

fn history(stored: &StoredRun, headline: Option<&str>, target_unit: &str) -> Vec<ScoreHistory> {
    let runs: Vec<&RunRecord> = stored
        .job_runs
        .iter()
        .filter(|r| r.is_primary_success())
        .collect();
    if runs.len() < 2 {
        return Vec::new();
    }
    let all: Vec<crate::adapters::StoredRun> =
        runs.iter().map(|r| as_history_run(r, stored)).collect();
    // Each run judged by its own gates against the runs before it (newest first).
    let judged: Vec<BTreeMap<String, bool>> = all
        .iter()
        .enumerate()
        .map(|(i, run)| {
            let (gates, wanted) = gates_of(runs[i]);
            let before: Vec<crate::adapters::StoredRun> = all[..i].iter().rev().cloned().collect();
            let baseline = choose_baseline(&before, run.run_id, wanted);
            let mut breached: BTreeMap<String, bool> = BTreeMap::new();
            for result in evaluate(&gates, &run.scores, baseline.as_ref()) {
                *breached.entry(result.score).or_default() |= result.verdict == Verdict::Breached;
            }
            breached
        })
        .collect();
    let current = runs.iter().position(|r| r.run_id == stored.run.run_id);
    let (own_gates, wanted) = gates_of(&stored.run);
    let own_baseline = current.and_then(|i| {
        let before: Vec<crate::adapters::StoredRun> = all[..i].iter().rev().cloned().collect();
        choose_baseline(&before, all[i].run_id, wanted)
    });
    let mut scores: Vec<String> = headline.map(str::to_string).into_iter().collect();
    for gate in &own_gates {
        if !scores.contains(&gate.score) {
            scores.push(gate.score.clone());
        }
    }
    scores
        .iter()
        .map(|score| {
            let unit = score_unit(score, target_unit);
            let gates = own_gates
                .iter()
                .filter(|g| &g.score == score)
                .filter_map(|gate| {
                    let result = evaluate(
                        std::slice::from_ref(gate),
                        &all[current?].scores,
                        own_baseline.as_ref(),
                    );
                    let limit = result.first()?.limit?;
                    let label = match gate.limit {
                        Limit::Absolute(_) => format!("gate {gate}"),
                        Limit::Relative(_) => format!(
                            "gate {gate}: {} for this run",
                            crate::render::text::with_unit(
                                &crate::render::text::significant(limit, 4),
                                &unit
                            )
                        ),
                    };
                    Some(Gate {
                        label,
                        value: limit,
                    })
                })
                .collect();
            ScoreHistory {
                score: score_label(score),
                unit: unit.clone(),
                points: all
                    .iter()
                    .zip(&judged)
                    .filter_map(|(run, breached)| {
                        Some(HistoryPoint {
                            run_id: run.run_id.to_string(),
                            label: timestamp(&run.started_at),
                            value: crate::gates::pooled(&run.scores, score)?,
                            breached: breached.values().any(|b| *b),
                        })
                    })
                    .collect(),
                gates,
            }
        })
        .collect()
}

/// The report input of a stored run; `target_unit` is the target's unit (the
/// store does not know it), empty for none.
pub fn report_input(stored: &StoredRun, target_unit: &str) -> ReportInput {
    let run = &stored.run;
    let (scheme, scheme_settings) = scheme_words(run, &stored.crs);
    let (model, model_settings) = model_words(run);
    let names = score_names(stored);
    let (semivariogram, correlogram) = inspection_figures(stored);
    ReportInput {
        run: RunFacts {
            job: run.job.clone(),
            run_id: run.run_id.clone(),
            started: timestamp(&run.started_at),
            finished: run.finished_at.as_deref().map(timestamp),
            tool_version: run.tool_version.clone(),
            source: source_words(run),
            crs: crs_words(&stored.crs),
            target: run.target_column.clone(),
            target_unit: target_unit.to_string(),
            features: run.feature_columns.clone(),
            scheme,
            scheme_settings,
            model,
            model_settings,
            units_used: run.units_used.unwrap_or(0).max(0) as u64,
            units_skipped: skipped(run),
            fingerprint: run.input_fingerprint.clone().unwrap_or_default(),
        },
        scores: scores(stored, target_unit),
        comparison: comparison(stored),
        coefficients: stored
            .coefficients
            .iter()
            .map(|(repetition, fold, term, value)| FoldCoefficient {
                repetition: *repetition,
                fold: *fold,
                term: term.clone(),
                value: *value,
            })
            .collect(),
        held_out_moran: held_out_moran(stored),
        semivariogram,
        correlogram,
        nearest_distances: {
            let (cv, prediction) = &stored.nearest_distances;
            (!cv.is_empty() || !prediction.is_empty()).then(|| NearestDistances {
                distance_unit: distance_unit(&stored.crs),
                cross_validation: cv.clone(),
                prediction: prediction.clone(),
            })
        },
        test_distances: test_distances(stored),
        history: history(stored, names.first().map(String::as_str), target_unit),
    }
}

/// The run's `fold_distances` as report rows: this run over all folds and per
/// fold, the comparison run over all folds, the prediction locations.
fn test_distances(stored: &StoredRun) -> Option<TestDistances> {
    let comparison = stored.comparison();
    let label_of = |row: &DistanceSummaryRecord| -> Option<String> {
        let mine = row.run_id == stored.run.run_id;
        match (row.kind.as_str(), row.fold) {
            ("cv", None) if mine => Some("this run, all folds".to_string()),
            ("cv", Some(fold)) if mine => Some(format!("fold {fold}")),
            ("cv", None) => comparison
                .filter(|c| c.run_id == row.run_id)
                .map(|c| format!("{} {}-fold, all folds", c.scheme, c.folds)),
            ("prediction", _) if mine => Some("prediction locations to the data".to_string()),
            _ => None,
        }
    };
    let rows: Vec<DistanceRow> = stored
        .fold_distances
        .iter()
        .filter_map(|row| {
            Some(DistanceRow {
                label: label_of(row)?,
                n: row.n,
                sampled_from: row.sampled_from,
                quantiles: [row.minimum, row.p10, row.median, row.p90, row.maximum],
            })
        })
        .collect();
    if rows.is_empty() {
        return None;
    }
    let median_of = |run_id: &str, kind: &str| {
        stored
            .fold_distances
            .iter()
            .find(|r| r.run_id == run_id && r.kind == kind && r.fold.is_none())
            .map(|r| r.median)
    };
    Some(TestDistances {
        distance_unit: distance_unit(&stored.crs),
        run_median: median_of(&stored.run.run_id, "cv"),
        comparison: comparison.and_then(|c| {
            Some((
                format!("{} {}-fold", c.scheme, c.folds),
                median_of(&c.run_id, "cv")?,
            ))
        }),
        prediction_median: median_of(&stored.run.run_id, "prediction"),
        rows,
    })
}
