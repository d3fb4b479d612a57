//! Each fitted term's spread across folds: how stable the fitted
//! relationship is across space.

use std::fmt::Write as _;

use serde::Serialize;

use super::number;
use crate::core::metrics::spread;
use crate::core::validate::RunOutcome;

/// A fitted term across folds.
#[derive(Debug, Clone, Serialize)]
pub struct TermSpread {
    /// The term.
    pub term: String,
    /// Folds that estimated it.
    pub folds: usize,
    /// Mean of the estimates.
    pub mean: f64,
    /// Their sample SD (NaN with one fold).
    pub sd: f64,
    /// Smallest estimate.
    pub min: f64,
    /// Largest estimate.
    pub max: f64,
}

/// Each term's spread over the folds of an outcome, in first-seen order.
pub(super) fn term_spreads(outcome: &RunOutcome) -> Vec<TermSpread> {
    let mut terms: Vec<(String, Vec<f64>)> = Vec::new();
    for fold in outcome.repetitions.iter().flat_map(|r| &r.fold_results) {
        for (term, estimate) in &fold.coefficients {
            match terms.iter_mut().find(|(t, _)| t == term) {
                Some((_, values)) => values.push(*estimate),
                None => terms.push((term.clone(), vec![*estimate])),
            }
        }
    }
    terms
        .into_iter()
        .map(|(term, values)| {
            let s = spread(values.iter().copied());
            TermSpread {
                term,
                folds: values.len(),
                mean: s.mean,
                sd: s.sd,
                min: values.iter().copied().fold(f64::INFINITY, f64::min),
                max: values.iter().copied().fold(f64::NEG_INFINITY, f64::max),
            }
        })
        .collect()
}

/// Writes each term's spread across folds (the first 20).
pub(super) fn write_terms(out: &mut String, terms: &[TermSpread]) {
    if !terms.is_empty() {
        let _ = writeln!(
            out,
            "  coefficients across folds (mean ± SD, range; per unit of each feature):"
        );
        for term in terms.iter().take(20) {
            let _ = writeln!(
                out,
                "    {:<24} {} ± {}  [{} … {}]  ({} folds)",
                term.term,
                number(term.mean),
                number(term.sd),
                number(term.min),
                number(term.max),
                term.folds
            );
        }
        if terms.len() > 20 {
            let _ = writeln!(
                out,
                "    and {} more terms (table coefficients, or --json)",
                terms.len() - 20
            );
        }
    }
}
