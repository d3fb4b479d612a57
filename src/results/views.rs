//! The views derived from the stored tables, in the SQL both stores speak.
//!
//! The SQL here runs unchanged in PostgreSQL and in SQLite (3.30 or later for
//! `FILTER` on aggregates): no casts, no functions beyond `abs` and the
//! aggregates, so a GIS reading a GeoPackage with its own SQLite can query
//! them too. The score columns of `fold_scores` and `run_scores` come from
//! [`ALL_SCORES`]: a new family's scores appear as new columns when the views
//! are rebuilt, with no change to any table.

use crate::adapters::sql::quote_literal;
use crate::core::metrics::ALL_SCORES;

/// The names of the derived views.
pub const VIEW_NAMES: [&str; 5] = [
    "predictions",
    "fold_members",
    "unit_errors",
    "fold_scores",
    "run_scores",
];

/// `(name, what it shows, SELECT …)` of every derived view; `p` prefixes
/// table names (a quoted schema and a dot, or empty).
///
/// In a GeoPackage these views are not registered in `gpkg_contents`: an
/// attribute layer's columns must have declared types (OGC GeoPackage 1.3,
/// Requirement 5), and SQLite gives a computed view column none. They are
/// there for SQL (`ogrinfo -sql`, any SQLite client); the job's map layers are
/// registered tables.
pub fn definitions(p: &str) -> Vec<(&'static str, &'static str, String)> {
    vec![
        (
            "predictions",
            "geofold: held-out prediction of each unit per repetition (1-based); residual = observed - predicted; loss = the unit's log-loss (binary) or Poisson deviance (count) term; predicted NULL for a run awaiting geofold score",
            format!(
                "SELECT run_id, repetition, fold, unit_id, observed, predicted, \
                 observed - predicted AS residual, abs(observed - predicted) AS abs_error, \
                 (observed - predicted) * (observed - predicted) AS squared_error, loss \
                 FROM {p}held_out"
            ),
        ),
        (
            "fold_members",
            "geofold: the test fold of each unit in each repetition (1-based)",
            format!("SELECT run_id, repetition, fold, unit_id FROM {p}held_out"),
        ),
        (
            "unit_errors",
            "geofold: per-unit errors over all repetitions of a run: predicted is the mean held-out prediction (a probability for binary models), residual = observed - predicted, abs_error the mean absolute error, rmse the RMSE over repetitions, loss the mean log-loss (binary) or Poisson deviance (count) term, fold the unit's fold in repetition 1",
            format!(
                "SELECT h.run_id, h.unit_id, h.fold, h.observed, h.predicted, \
                 h.observed - h.predicted AS residual, abs(h.observed - h.predicted) AS abs_error, \
                 abs(h.observed - h.predicted) AS rmse, 1 AS repetitions, h.loss AS loss \
                 FROM {p}held_out h JOIN {p}runs r ON r.run_id = h.run_id WHERE r.repeats = 1 \
                 UNION ALL \
                 SELECT s.run_id, s.unit_id, s.fold, s.observed, s.mean_predicted, \
                 s.observed - s.mean_predicted, s.mae, s.rmse, s.repetitions, s.mean_loss \
                 FROM {p}unit_summaries s"
            ),
        ),
        (
            "fold_scores",
            "geofold: one row per fold with its scores as columns (NULL where the run's family has no such score); bias = mean(predicted - observed); r2 = 1 - SSE/SST around the fold mean",
            {
                let scores: Vec<String> = ALL_SCORES
                    .iter()
                    .map(|s| {
                        format!(
                            "max(v.value) FILTER (WHERE v.score = {}) AS {}",
                            quote_literal(s.name),
                            s.name
                        )
                    })
                    .collect();
                format!(
                    "SELECT f.run_id, f.repetition, f.fold, f.n_train, f.n_test, f.n_excluded, {} \
                     FROM {p}folds f LEFT JOIN {p}fold_score_values v \
                     ON v.run_id = f.run_id AND v.repetition = f.repetition AND v.fold = f.fold \
                     GROUP BY f.run_id, f.repetition, f.fold, f.n_train, f.n_test, f.n_excluded",
                    scores.join(", ")
                )
            },
        ),
        (
            "run_scores",
            "geofold: one row per run: each score pooled over all held-out predictions, its mean and sample SD over folds (_fold_mean, _fold_sd) and over repetitions (_repeat_mean, _repeat_sd), and the training-mean baseline on the same folds (baseline_); w_nnd is the distance-matching statistic of runs with prediction locations (see nearest_distances)",
            {
                let mut columns = vec![
                    "max(v.value) FILTER (WHERE v.score = 'n' AND v.statistic = 'pooled') AS n_predictions"
                        .to_string(),
                ];
                for s in ALL_SCORES {
                    for (statistic, name) in [
                        ("pooled", s.name.to_string()),
                        ("fold_mean", format!("{}_fold_mean", s.name)),
                        ("fold_sd", format!("{}_fold_sd", s.name)),
                        ("repeat_mean", format!("{}_repeat_mean", s.name)),
                        ("repeat_sd", format!("{}_repeat_sd", s.name)),
                        ("baseline", format!("baseline_{}", s.name)),
                    ] {
                        columns.push(format!(
                            "max(v.value) FILTER (WHERE v.score = {} AND v.statistic = {}) AS {name}",
                            quote_literal(s.name),
                            quote_literal(statistic)
                        ));
                    }
                }
                for (statistic, name) in [
                    ("pooled", "w_nnd"),
                    ("repeat_mean", "w_nnd_repeat_mean"),
                    ("repeat_sd", "w_nnd_repeat_sd"),
                ] {
                    columns.push(format!(
                        "max(v.value) FILTER (WHERE v.score = 'w_nnd' AND v.statistic = '{statistic}') AS {name}"
                    ));
                }
                format!(
                    "SELECT v.run_id, {} FROM {p}run_score_values v GROUP BY v.run_id",
                    columns.join(", ")
                )
            },
        ),
    ]
}

/// A fingerprint of the view definitions, stored with the results so that
/// the views are rebuilt exactly when this version of geofold defines them
/// differently.
pub fn fingerprint() -> String {
    use sha2::{Digest, Sha256};
    let mut hasher = Sha256::new();
    for (name, _, select) in definitions("") {
        hasher.update(name.as_bytes());
        hasher.update(select.as_bytes());
    }
    hasher
        .finalize()
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_score_is_a_column_of_both_score_views() {
        let views = definitions("");
        let fold_scores = &views.iter().find(|v| v.0 == "fold_scores").unwrap().2;
        let run_scores = &views.iter().find(|v| v.0 == "run_scores").unwrap().2;
        for score in ALL_SCORES {
            assert!(fold_scores.contains(&format!("AS {}", score.name)));
            assert!(run_scores.contains(&format!("AS {}_fold_sd", score.name)));
            assert!(run_scores.contains(&format!("AS baseline_{}", score.name)));
        }
    }
}
