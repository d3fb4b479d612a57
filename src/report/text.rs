//! The text summary of each run: its fold table, scores, spread, baseline, diagnostics and
//! coefficients, and the number formats the summary uses.

use super::*;

impl Summary {
    pub(super) fn assigned_text(&self, out: &mut String, run: &RunSummary) {
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{} run {} ({}): folds assigned for a model fitted outside geofold, seed {}, {} repetition(s)",
            run.scheme, run.run_id, run.role, run.seed, run.repeats
        );
        let _ = writeln!(out, "  {}", run.scheme_described);
        self.matching_text(out, run);
        for warning in &run.warnings {
            let _ = writeln!(out, "  warning: {warning}");
        }
        let _ = writeln!(
            out,
            "  {:>10} {:>5} {:>9} {:>8} {:>9}",
            "repetition", "fold", "n_train", "n_test", "excluded"
        );
        for fold in run.folds.iter().take(30) {
            let _ = writeln!(
                out,
                "  {:>10} {:>5} {:>9} {:>8} {:>9}",
                fold.repetition, fold.fold, fold.n_train, fold.n_test, fold.n_excluded
            );
        }
        let _ = writeln!(
            out,
            "  next: read each unit's fold from fold_members (run_id {}; units excluded from a fold's training \
             set are in fold_exclusions), fit each fold on the units outside it, load the held-out predictions \
             (unit_id, repetition, fold, predicted) into a table or layer, then run geofold score --run {} \
             --predictions TABLE",
            run.run_id, run.run_id
        );
    }

    /// The distance-matching lines of a run given prediction locations.
    fn matching_text(&self, out: &mut String, run: &RunSummary) {
        let Some(matching) = &run.matching else {
            return;
        };
        let _ = writeln!(
            out,
            "  distance matching: W = {} ({}: the Wasserstein-1 distance between the test-to-training distances \
             during cross-validation, median {}, and the distances from the prediction locations to the data, \
             median {}; 0 is a perfect match)",
            number(matching.w),
            self.source.length(matching.w),
            self.source.length(matching.cv_median),
            self.source.length(matching.prediction_median)
        );
        if matching.w_per_repetition.len() > 1 {
            let spread = crate::core::metrics::spread(matching.w_per_repetition.iter().copied());
            let _ = writeln!(
                out,
                "  W over the {} repetitions (mean ± SD): {} ± {}",
                matching.w_per_repetition.len(),
                number(spread.mean),
                number(spread.sd)
            );
        }
    }

    pub(super) fn run_text(&self, out: &mut String, run: &RunSummary) {
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{} run {} ({}), seed {}, {} repetition(s)",
            run.scheme, run.run_id, run.role, run.seed, run.repeats
        );
        let _ = writeln!(out, "  {}", run.scheme_described);
        if let (Some(blocks), Some(per)) = (
            run.split.get("occupied_blocks"),
            run.split.get("units_per_block"),
        ) {
            let _ = writeln!(
                out,
                "  {blocks} occupied blocks; units per block: median {}, range {}–{}",
                per["median"], per["min"], per["max"]
            );
        }
        split_text(out, &run.split);
        self.matching_text(out, run);
        for warning in &run.warnings {
            let _ = writeln!(out, "  warning: {warning}");
        }
        let names: Vec<&'static str> = run.pooled.values.iter().map(|(name, _)| *name).collect();
        // Folds of one unit each (leave-one-out): per-fold scores are single
        // errors, so the table and the per-fold spread are left out.
        let single_units = run.folds.iter().all(|f| f.n_test == 1);
        let shown: Vec<&FoldSummary> = run
            .folds
            .iter()
            .filter(|f| f.repetition == 1 && !single_units)
            .take(30)
            .collect();
        if single_units {
            let _ = writeln!(
                out,
                "  {} folds of one unit each: per-fold scores are single errors (table fold_scores); read the pooled scores",
                run.folds.iter().filter(|f| f.repetition == 1).count()
            );
        } else if run.repeats > 1 || run.folds.len() > shown.len() {
            let _ = writeln!(
                out,
                "  folds of repetition 1{}:",
                if shown.len() < run.folds.iter().filter(|f| f.repetition == 1).count() {
                    " (first 30)"
                } else {
                    ""
                }
            );
        }
        let mut header = format!(
            "  {:>5} {:>9} {:>8} {:>9}",
            "fold", "n_train", "n_test", "excluded"
        );
        for name in &names {
            let _ = write!(header, " {:>10}", label(name));
        }
        if !single_units {
            let _ = writeln!(out, "{header}");
        }
        for fold in shown {
            let mut line = format!(
                "  {:>5} {:>9} {:>8} {:>9}",
                fold.fold, fold.n_train, fold.n_test, fold.n_excluded
            );
            for name in &names {
                let _ = write!(
                    line,
                    " {:>10}",
                    fold.scores
                        .get(name)
                        .map(number)
                        .unwrap_or_else(|| "-".into())
                );
            }
            let _ = writeln!(out, "{line}");
        }
        let _ = writeln!(
            out,
            "  pooled over {} held-out predictions: {}",
            run.pooled.n,
            score_line(names.iter(), &run.pooled)
        );
        let _ = writeln!(
            out,
            "  training-mean baseline on the same folds: {}",
            score_line(
                names
                    .iter()
                    .filter(|name| score_def(name).is_some_and(|d| d.better != Better::Zero)),
                &run.baseline
            )
        );
        if names.contains(&"accuracy") {
            let _ = writeln!(
                out,
                "  (binary: predictions are probabilities of 1; accuracy counts p >= {THRESHOLD} as 1)"
            );
        }
        let spread: Vec<String> = run
            .fold_spread
            .iter()
            .filter(|(name, _)| *name != "bias")
            .map(|(name, s)| format!("{} {} ± {}", label(name), number(s.mean), number(s.sd)))
            .collect();
        if !single_units {
            let _ = writeln!(out, "  per-fold mean ± SD: {}", spread.join("  "));
        }
        if let Some(repeats) = &run.repeat_spread {
            let spread: Vec<String> = repeats
                .iter()
                .filter(|(name, _)| *name != "bias")
                .map(|(name, s)| format!("{} {} ± {}", label(name), number(s.mean), number(s.sd)))
                .collect();
            let _ = writeln!(
                out,
                "  over the {} repetitions (mean ± SD): {}",
                run.repeats,
                spread.join("  ")
            );
        }
        self.distances_text(out, run);
        if let Some(held) = &run.held_out_moran {
            let m = &held.moran;
            let _ = writeln!(
                out,
                "  Moran's I of the held-out residuals ({}{}): {:.4} (E[I] {:.4}), z {:.2} under randomisation, p {}{}",
                held.weights,
                held.sampled_from
                    .map(|total| format!(", a seeded sample of {} of {total} units", m.n))
                    .unwrap_or_default(),
                m.statistic,
                m.randomisation.expected,
                m.randomisation.z,
                p_value(m.randomisation.p_two_sided),
                if m.randomisation.p_two_sided < 0.05 && m.statistic > m.randomisation.expected {
                    "; the errors are still spatially clustered"
                } else {
                    ""
                }
            );
        }
        for (note, units) in &run.notes {
            let _ = writeln!(out, "  {units} held-out predictions: {note}");
        }
        terms::write_terms(out, &run.coefficients);
        if let Some(r2) = run.pooled.get("r2") {
            if r2 < 0.0 {
                let _ = writeln!(
                    out,
                    "  note: R² is negative: the held-out predictions are worse than predicting the mean of the held-out values"
                );
            }
        }
    }
}

/// The facts of the split that the text summary names, scheme by scheme
/// (block counts are printed by the caller).
pub(super) fn split_text(out: &mut String, split: &serde_json::Map<String, serde_json::Value>) {
    for (count, per, what) in [
        (
            "clusters",
            "units_per_cluster",
            "clusters; units per cluster",
        ),
        ("groups", "units_per_group", "groups; units per group"),
    ] {
        if let (Some(count), Some(per)) = (split.get(count), split.get(per)) {
            let _ = writeln!(
                out,
                "  {count} {what}: median {}, range {}–{}",
                per["median"], per["min"], per["max"]
            );
        }
    }
    if let Some(chosen) = split.get("chosen_clusters") {
        let tried = split
            .get("candidates")
            .and_then(|c| c.as_array())
            .map_or(0, Vec::len);
        let chosen = match chosen.as_u64() {
            Some(q) => format!("{q} k-means clusters dealt to the folds"),
            None => "random folds".to_string(),
        };
        let _ = writeln!(
            out,
            "  kNNDM chose {chosen} among {tried} candidates, judged on {} units",
            split.get("evaluation_units").cloned().unwrap_or_default()
        );
    }
    if let (Some(with), Some(total)) = (split.get("units_with_exclusions"), split.get("exclusions"))
    {
        let _ = writeln!(
            out,
            "  NNDM excluded {total} training units in all from the folds of {with} units (matched: {})",
            split.get("matched").cloned().unwrap_or_default()
        );
    }
}

/// Spreads as one object: `{"rmse": {"mean": …, "sd": …}, …}`.
pub(super) fn spread_map<S: serde::Serializer>(
    spreads: &[(&'static str, Spread)],
    serializer: S,
) -> Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut map = serializer.serialize_map(Some(spreads.len()))?;
    for (name, spread) in spreads {
        map.serialize_entry(name, spread)?;
    }
    map.end()
}

pub(super) fn optional_spread_map<S: serde::Serializer>(
    spreads: &Option<Vec<(&'static str, Spread)>>,
    serializer: S,
) -> Result<S::Ok, S::Error> {
    match spreads {
        Some(spreads) => spread_map(spreads, serializer),
        None => serializer.serialize_none(),
    }
}

/// A score's name as printed.
/// `RMSE 1.2335  MAE 0.9836 …`: each named score of `scores` with its label
/// (`-` where the score is missing).
fn score_line<'a>(names: impl Iterator<Item = &'a &'a str>, scores: &Scores) -> String {
    names
        .map(|name| {
            format!(
                "{} {}",
                label(name),
                scores.get(name).map(number).unwrap_or_else(|| "-".into())
            )
        })
        .collect::<Vec<_>>()
        .join("  ")
}

pub(super) fn label(name: &str) -> String {
    match name {
        "r2" => "R²".into(),
        "bias" => "bias".into(),
        "log_loss" => "log-loss".into(),
        "brier" => "Brier".into(),
        "roc_auc" => "AUC".into(),
        "accuracy" => "accuracy".into(),
        "poisson_deviance" => "deviance".into(),
        other => other.to_uppercase(),
    }
}

pub(super) fn number(value: f64) -> String {
    if !value.is_finite() {
        return "-".into();
    }
    let magnitude = value.abs();
    if magnitude != 0.0 && !(1e-3..1e6).contains(&magnitude) {
        format!("{value:.3e}")
    } else {
        format!("{value:.4}")
    }
}

/// A p-value for a terminal: four decimals, or "< 0.0001".
pub(super) fn p_value(p: f64) -> String {
    if p < 1e-4 {
        "< 0.0001".into()
    } else {
        format!("{p:.4}")
    }
}

impl Summary {
    /// The nearest-distance lines of a run: how far test units were from
    /// their training units, and the prediction locations from the data.
    pub(super) fn distances_text(&self, out: &mut String, run: &RunSummary) {
        let length = |v: f64| self.source.length(v);
        let pooled = run
            .fold_distances
            .iter()
            .find(|d| d.kind == "cv" && d.fold.is_none());
        let Some(pooled) = pooled else {
            return;
        };
        let medians: Vec<f64> = run
            .fold_distances
            .iter()
            .filter(|d| d.kind == "cv" && d.fold.is_some())
            .map(DistanceSummary::median)
            .collect();
        let per_fold = match (
            medians.iter().copied().reduce(f64::min),
            medians.iter().copied().reduce(f64::max),
        ) {
            (Some(low), Some(high)) if medians.len() > 1 => {
                format!("; fold medians {} to {}", length(low), length(high))
            }
            _ => String::new(),
        };
        let _ = writeln!(
            out,
            "  test units to their nearest training unit: median {} (10th–90th percentile {} to {}){per_fold}{}",
            length(pooled.median()),
            length(pooled.quantiles[1]),
            length(pooled.quantiles[5]),
            pooled
                .sampled_from
                .map(|total| format!(", from a seeded sample of {} of {total} units", pooled.n))
                .unwrap_or_default()
        );
        if let Some(prediction) = run.fold_distances.iter().find(|d| d.kind == "prediction") {
            let _ = writeln!(
                out,
                "  prediction locations to the nearest unit: median {} (10th–90th percentile {} to {})",
                length(prediction.median()),
                length(prediction.quantiles[1]),
                length(prediction.quantiles[5]),
            );
        }
    }
}
