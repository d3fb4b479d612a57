//! `geofold compare RUN_A RUN_B`: what changed between two runs: scores,
//! per-fold scores, units added or removed, and the units whose error
//! changed most. Changes are B − A.

use std::collections::BTreeMap;
use std::fmt::Write as _;

use clap::Args;
use serde::Serialize;

use super::store::{number, run_id, StoreArgs};
use crate::adapters::history::{FoldScore, UnitError};
use crate::adapters::StoredRun;
use crate::core::metrics::{score_def, Better};
use crate::error::Error;

/// `geofold compare`.
#[derive(Debug, Clone, Args)]
pub struct CompareArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    /// With --config: the job whose results store holds the runs.
    #[arg(long, value_name = "NAME", requires = "config")]
    pub job: Option<String>,
    /// The earlier run (A).
    #[arg(value_name = "RUN_A")]
    pub run_a: String,
    /// The later run (B); changes are B − A.
    #[arg(value_name = "RUN_B")]
    pub run_b: String,
    /// How many units with the largest change of error to list.
    #[arg(long, value_name = "N", default_value_t = 10,
          value_parser = clap::value_parser!(u32).range(0..=100_000))]
    pub top: u32,
    /// Print the comparison as one JSON document.
    #[arg(long)]
    pub json: bool,
}

/// A run as compared.
#[derive(Debug, Clone, Serialize)]
pub struct Side {
    /// Its id.
    pub run_id: String,
    /// Its job.
    pub job: String,
    /// When it started.
    pub started_at: String,
    /// Scheme and model.
    pub scheme: String,
    /// Model.
    pub model: String,
    /// Units used.
    pub units_used: Option<i64>,
    /// Input fingerprint.
    pub input_fingerprint: Option<String>,
}

/// One stored run score in both runs.
#[derive(Debug, Clone, Serialize)]
pub struct ScoreChange {
    /// The score.
    pub score: String,
    /// pooled, fold_mean, fold_sd, …
    pub statistic: String,
    /// In A.
    pub a: Option<f64>,
    /// In B.
    pub b: Option<f64>,
    /// B − A.
    pub change: Option<f64>,
    /// (B − A) / |A|.
    pub relative_change: Option<f64>,
    /// For pooled scores: `better`, `worse` or `same` for B, by the score's direction.
    pub b_is: Option<&'static str>,
}

/// One fold score in both runs.
#[derive(Debug, Clone, Serialize)]
pub struct FoldChange {
    /// Repetition, from 1.
    pub repetition: i64,
    /// Fold, from 1.
    pub fold: i64,
    /// The score.
    pub score: String,
    /// Held-out units in A and B.
    pub n_test: (Option<i64>, Option<i64>),
    /// In A.
    pub a: Option<f64>,
    /// In B.
    pub b: Option<f64>,
    /// B − A.
    pub change: Option<f64>,
}

/// One unit's mean absolute error in both runs.
#[derive(Debug, Clone, Serialize)]
pub struct UnitChange {
    /// The source id.
    pub unit_id: String,
    /// In A.
    pub a: f64,
    /// In B.
    pub b: f64,
    /// B − A.
    pub change: f64,
}

/// What `compare` found.
#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    /// The store.
    pub location: String,
    /// Run A.
    pub a: Side,
    /// Run B.
    pub b: Side,
    /// Whether both runs read the same input (equal fingerprints).
    pub same_input: bool,
    /// Every stored run score.
    pub scores: Vec<ScoreChange>,
    /// Every fold score, matched by repetition and fold number (fold numbers
    /// name the same units only when both runs split the same units the same way).
    pub folds: Vec<FoldChange>,
    /// Units in B and not in A.
    pub units_added: Vec<String>,
    /// Units in A and not in B.
    pub units_removed: Vec<String>,
    /// Units in both with the largest change of mean absolute error, largest first.
    pub largest_changes: Vec<UnitChange>,
}

fn side(run: &StoredRun) -> Side {
    Side {
        run_id: run.run_id.to_string(),
        job: run.job.clone(),
        started_at: run.started_at.clone(),
        scheme: run.scheme.clone(),
        model: run.model.clone(),
        units_used: run.units_used,
        input_fingerprint: run.input_fingerprint.clone(),
    }
}

fn difference(a: Option<f64>, b: Option<f64>) -> Option<f64> {
    Some(b? - a?).filter(|d| d.is_finite())
}

/// Which way B moved on a pooled score.
fn verdict(score: &str, a: Option<f64>, b: Option<f64>) -> Option<&'static str> {
    let (a, b) = (a?, b?);
    let better = score_def(score)?.better;
    let (a, b) = match better {
        Better::Lower => (a, b),
        Better::Higher => (-a, -b),
        Better::Zero => (a.abs(), b.abs()),
    };
    Some(if b < a {
        "better"
    } else if b > a {
        "worse"
    } else {
        "same"
    })
}

/// Compares two runs' stored values (pure: the reading is in [`run`]).
pub fn compare(
    location: String,
    (run_a, folds_a, units_a): (&StoredRun, &[FoldScore], &[UnitError]),
    (run_b, folds_b, units_b): (&StoredRun, &[FoldScore], &[UnitError]),
    top: usize,
) -> Comparison {
    let mut keys: Vec<(String, String)> = run_a
        .scores
        .iter()
        .chain(&run_b.scores)
        .map(|(score, statistic, _)| (score.clone(), statistic.clone()))
        .collect();
    keys.sort();
    keys.dedup();
    let value = |run: &StoredRun, score: &str, statistic: &str| {
        run.scores
            .iter()
            .find(|(s, st, _)| s == score && st == statistic)
            .and_then(|(_, _, v)| *v)
    };
    let scores = keys
        .into_iter()
        .map(|(score, statistic)| {
            let a = value(run_a, &score, &statistic);
            let b = value(run_b, &score, &statistic);
            let change = difference(a, b);
            ScoreChange {
                relative_change: change
                    .zip(a)
                    .and_then(|(d, a)| (a != 0.0).then(|| d / a.abs())),
                b_is: if statistic == crate::gates::STATISTIC {
                    verdict(&score, a, b)
                } else {
                    None
                },
                score,
                statistic,
                a,
                b,
                change,
            }
        })
        .collect();
    type FoldKey = (i64, i64, String);
    let mut by_fold: BTreeMap<FoldKey, [Option<&FoldScore>; 2]> = BTreeMap::new();
    for (i, list) in [folds_a, folds_b].into_iter().enumerate() {
        for fold in list {
            by_fold
                .entry((fold.repetition, fold.fold, fold.score.clone()))
                .or_default()[i] = Some(fold);
        }
    }
    let folds = by_fold
        .into_iter()
        .map(|((repetition, fold, score), [a, b])| {
            let (va, vb) = (a.and_then(|f| f.value), b.and_then(|f| f.value));
            FoldChange {
                repetition,
                fold,
                score,
                n_test: (a.map(|f| f.n_test), b.map(|f| f.n_test)),
                a: va,
                b: vb,
                change: difference(va, vb),
            }
        })
        .collect();
    let errors_a: BTreeMap<&str, f64> = units_a
        .iter()
        .map(|u| (u.unit_id.as_str(), u.mean_abs_error))
        .collect();
    let errors_b: BTreeMap<&str, f64> = units_b
        .iter()
        .map(|u| (u.unit_id.as_str(), u.mean_abs_error))
        .collect();
    let units_added = errors_b
        .keys()
        .filter(|id| !errors_a.contains_key(*id))
        .map(|id| id.to_string())
        .collect();
    let units_removed = errors_a
        .keys()
        .filter(|id| !errors_b.contains_key(*id))
        .map(|id| id.to_string())
        .collect();
    let mut largest_changes: Vec<UnitChange> = errors_a
        .iter()
        .filter_map(|(id, &a)| {
            errors_b.get(id).map(|&b| UnitChange {
                unit_id: id.to_string(),
                a,
                b,
                change: b - a,
            })
        })
        .collect();
    // Largest |change| first; ties by unit id, so the list does not depend on storage order.
    largest_changes.sort_by(|x, y| {
        y.change
            .abs()
            .total_cmp(&x.change.abs())
            .then_with(|| x.unit_id.cmp(&y.unit_id))
    });
    largest_changes.truncate(top);
    Comparison {
        location,
        same_input: run_a.input_fingerprint.is_some()
            && run_a.input_fingerprint == run_b.input_fingerprint,
        a: side(run_a),
        b: side(run_b),
        scores,
        folds,
        units_added,
        units_removed,
        largest_changes,
    }
}

/// Runs `geofold compare`.
///
/// # Errors
/// A bad or unknown run id, or a run that did not succeed (64); connection errors.
pub fn run(args: &CompareArgs) -> Result<Comparison, Error> {
    let ids = [run_id(&args.run_a)?, run_id(&args.run_b)?];
    let mut store = args.store.open(args.job.as_deref())?;
    let all = if store.initialised()? {
        store.runs(None, usize::MAX)?
    } else {
        Vec::new()
    };
    let mut found = Vec::new();
    for id in ids {
        let run = all
            .iter()
            .find(|run| run.run_id == id)
            .ok_or_else(|| Error::Usage(format!("run {id} is not in {}", store.location())))?;
        if run.status != "succeeded" {
            return Err(Error::Usage(format!(
                "run {id} is {}: only successful runs have results to compare",
                run.status
            )));
        }
        found.push((run.clone(), store.fold_scores(id)?, store.unit_errors(id)?));
    }
    let [(run_a, folds_a, units_a), (run_b, folds_b, units_b)]: [_; 2] = found
        .try_into()
        .map_err(|_| Error::Internal("two runs expected".into()))?;
    Ok(compare(
        store.location(),
        (&run_a, &folds_a, &units_a),
        (&run_b, &folds_b, &units_b),
        args.top as usize,
    ))
}

impl Comparison {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(
            out,
            "A: run {} of job {}, started {} ({}, {}, {} units)",
            self.a.run_id,
            self.a.job,
            self.a.started_at,
            self.a.scheme,
            self.a.model,
            self.a.units_used.unwrap_or(0)
        );
        let _ = writeln!(
            out,
            "B: run {} of job {}, started {} ({}, {}, {} units)",
            self.b.run_id,
            self.b.job,
            self.b.started_at,
            self.b.scheme,
            self.b.model,
            self.b.units_used.unwrap_or(0)
        );
        let _ = writeln!(
            out,
            "input: {}",
            if self.same_input {
                "the same (equal fingerprints)"
            } else {
                "changed (fingerprints differ)"
            }
        );
        let _ = writeln!(out, "\nscores (B − A):");
        let _ = writeln!(
            out,
            "  {:<6} {:<12} {:>12} {:>12} {:>12} {:>9}",
            "score", "statistic", "A", "B", "change", ""
        );
        for s in &self.scores {
            let relative = s
                .relative_change
                .map_or_else(String::new, |r| format!("{:+.1}%", 100.0 * r));
            let _ = writeln!(
                out,
                "  {:<6} {:<12} {:>12} {:>12} {:>12} {:>9} {}",
                s.score,
                s.statistic,
                number(s.a),
                number(s.b),
                number(s.change),
                relative,
                s.b_is.unwrap_or("")
            );
        }
        let headline = self
            .scores
            .first()
            .map(|_| "rmse")
            .filter(|name| self.folds.iter().any(|f| f.score == *name))
            .or_else(|| self.folds.first().map(|f| f.score.as_str()));
        if let Some(score) = headline {
            let _ = writeln!(out, "\nper-fold {score} (B − A; fold numbers match units only when both runs split the same units alike):");
            let _ = writeln!(
                out,
                "  {:>4} {:>5} {:>13} {:>12} {:>12} {:>12}",
                "rep", "fold", "n_test A/B", "A", "B", "change"
            );
            for f in self.folds.iter().filter(|f| f.score == score) {
                let n = |v: Option<i64>| v.map_or_else(|| "-".into(), |n| n.to_string());
                let _ = writeln!(
                    out,
                    "  {:>4} {:>5} {:>13} {:>12} {:>12} {:>12}",
                    f.repetition,
                    f.fold,
                    format!("{}/{}", n(f.n_test.0), n(f.n_test.1)),
                    number(f.a),
                    number(f.b),
                    number(f.change)
                );
            }
        }
        let list = |ids: &[String]| {
            let shown: Vec<&str> = ids.iter().take(20).map(String::as_str).collect();
            let more = ids.len().saturating_sub(shown.len());
            format!(
                "{}{}",
                shown.join(", "),
                if more > 0 {
                    format!(" and {more} more (all in --json)")
                } else {
                    String::new()
                }
            )
        };
        let _ = writeln!(
            out,
            "\nunits added in B: {}: {}",
            self.units_added.len(),
            list(&self.units_added)
        );
        let _ = writeln!(
            out,
            "units removed in B: {}: {}",
            self.units_removed.len(),
            list(&self.units_removed)
        );
        if !self.largest_changes.is_empty() {
            let _ = writeln!(
                out,
                "\nunits whose mean absolute error changed most (B − A):"
            );
            for u in &self.largest_changes {
                let _ = writeln!(
                    out,
                    "  {:<20} {:>12} → {:<12} {:>+12.4}",
                    u.unit_id,
                    number(Some(u.a)),
                    number(Some(u.b)),
                    u.change
                );
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use uuid::Uuid;

    fn stored(id: u128, rmse: f64, r2: f64, fingerprint: &str) -> StoredRun {
        StoredRun {
            run_id: Uuid::from_u128(id),
            job: "j".into(),
            primary_run_id: None,
            status: "succeeded".into(),
            started_at: "2026-01-01T00:00:00.000Z".into(),
            finished_at: None,
            scheme: "grid".into(),
            model: "ols".into(),
            units_used: Some(3),
            input_fingerprint: Some(fingerprint.into()),
            parameters: serde_json::Value::Null,
            error_message: None,
            pinned: false,
            scores: vec![
                ("r2".into(), "pooled".into(), Some(r2)),
                ("rmse".into(), "pooled".into(), Some(rmse)),
            ],
        }
    }

    fn unit(id: &str, error: f64) -> UnitError {
        UnitError {
            unit_id: id.into(),
            mean_abs_error: error,
        }
    }

    fn fold(fold: i64, value: f64) -> FoldScore {
        FoldScore {
            repetition: 1,
            fold,
            n_test: 10,
            score: "rmse".into(),
            value: Some(value),
        }
    }

    #[test]
    fn changes_are_b_minus_a_with_directions_units_and_folds() {
        let a = stored(1, 2.0, 0.5, "x");
        let b = stored(2, 2.5, 0.6, "y");
        let c = compare(
            "here".into(),
            (
                &a,
                &[fold(1, 1.0), fold(2, 3.0)],
                &[unit("u1", 1.0), unit("u2", 2.0), unit("u3", 0.5)],
            ),
            (
                &b,
                &[fold(1, 1.5)],
                &[unit("u2", 1.0), unit("u3", 0.75), unit("u4", 9.0)],
            ),
            1,
        );
        let rmse = c.scores.iter().find(|s| s.score == "rmse").unwrap();
        assert_eq!((rmse.change, rmse.b_is), (Some(0.5), Some("worse")));
        assert_eq!(rmse.relative_change, Some(0.25));
        let r2 = c.scores.iter().find(|s| s.score == "r2").unwrap();
        assert_eq!(r2.b_is, Some("better"));
        assert_eq!(c.units_added, ["u4"]);
        assert_eq!(c.units_removed, ["u1"]);
        assert_eq!(c.largest_changes.len(), 1);
        assert_eq!(c.largest_changes[0].unit_id, "u2");
        assert_eq!(c.largest_changes[0].change, -1.0);
        assert_eq!(c.folds.len(), 2);
        assert_eq!(c.folds[0].change, Some(0.5));
        assert_eq!(c.folds[1].b, None, "fold 2 is only in A");
        assert!(!c.same_input);
        let text = c.to_text();
        assert!(text.contains("units added in B: 1: u4"), "{text}");
        assert!(text.contains("+25.0% worse"), "{text}");
    }
}
