//! Prediction scores per family of target: continuous (regression), 0/1
//! (binary) and counts.
//!
//! # Definitions
//! For held-out pairs (observed `y`, predicted `ŷ`) of a scored set (a test
//! fold for fold scores, all held-out predictions for run scores):
//! - **Regression.** Residual `e = y − ŷ`. RMSE = sqrt(mean(e²)); MAE =
//!   mean(|e|); bias = mean(ŷ − y), so a positive bias means over-prediction;
//!   R² = 1 − SSE/SST with SST around the mean of the observed values *of the
//!   scored set*, undefined (None) when SST = 0; it is not the squared Pearson
//!   correlation.
//! - **Binary** (`y` ∈ {0, 1}, `ŷ` the predicted probability of 1). Log-loss =
//!   mean(−[y ln p + (1 − y) ln(1 − p)]) with `p = ŷ` clipped to
//!   [10⁻¹⁵, 1 − 10⁻¹⁵], so one confident miss costs at most 34.5 rather than
//!   infinity (common practice, no source); Brier score = mean((ŷ − y)²)
//!   (Brier, G. W. (1950), Verification of forecasts expressed in terms of
//!   probability, *Monthly Weather Review* 78(1): 1–3); ROC AUC = the
//!   probability that a random 1 gets a higher `ŷ` than a random 0, ties
//!   counting one half, computed from the Mann–Whitney rank sum with
//!   mid-ranks (Hanley, J. A. & McNeil, B. J. (1982), The meaning and use of
//!   the area under a receiver operating characteristic (ROC) curve,
//!   *Radiology* 143(1): 29–36), undefined when the set holds one class only;
//!   accuracy = share of units with (ŷ ≥ [`THRESHOLD`]) equal to (y = 1).
//! - **Counts** (`y` a non-negative integer, `ŷ` the expected count). Mean
//!   Poisson deviance = mean(2[y ln(y/ŷ) − (y − ŷ)]) with `y ln(y/ŷ) = 0` for
//!   `y = 0` and `ŷ` clipped below at 10⁻¹⁵ (McCullagh, P. & Nelder, J. A.
//!   (1989), *Generalized Linear Models*, 2nd ed., Chapman & Hall, §6.2,
//!   from memory for the section); RMSE as above.
//!
//! Per unit, [`Family::loss`] is a unit's term of the family's headline score
//! (the log-loss or deviance term), so the mean of the per-unit losses of a
//! set is its log-loss or mean deviance.

use serde::Serialize;

/// The probability threshold of `accuracy`: a unit is predicted 1 when
/// its predicted probability is at least this.
pub const THRESHOLD: f64 = 0.5;

/// Probabilities are clipped to `[CLIP, 1 − CLIP]` for the log-loss, and
/// expected counts below at `CLIP` for the deviance.
pub const CLIP: f64 = 1e-15;

/// What kind of target a model predicts, which decides its scores.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Family {
    /// A continuous target: RMSE, MAE, bias, R².
    Regression,
    /// A 0/1 target predicted as a probability: log-loss, Brier, ROC AUC, accuracy.
    Binary,
    /// A count predicted as an expected count: mean Poisson deviance, RMSE.
    Count,
}

/// Which way a score is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Better {
    /// Smaller is better (errors, losses).
    Lower,
    /// Larger is better (R², AUC, accuracy).
    Higher,
    /// Nearer zero is better (bias).
    Zero,
}

/// A score a family produces.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ScoreDef {
    /// Its stored name.
    pub name: &'static str,
    /// Which way is better.
    pub better: Better,
    /// What it is, in plain words.
    pub about: &'static str,
}

const fn score(name: &'static str, better: Better, about: &'static str) -> ScoreDef {
    ScoreDef {
        name,
        better,
        about,
    }
}

/// Every score of every family, in the order tables and summaries show them.
/// Adding a family's scores is a line here; the stores keep scores by name,
/// so no table gains a column.
pub const ALL_SCORES: &[ScoreDef] = &[
    score(
        "rmse",
        Better::Lower,
        "root mean squared error, in the target's unit",
    ),
    score(
        "mae",
        Better::Lower,
        "mean absolute error, in the target's unit",
    ),
    score(
        "bias",
        Better::Zero,
        "mean of predicted minus observed (positive: over-prediction)",
    ),
    score(
        "r2",
        Better::Higher,
        "1 - SSE/SST around the mean of the scored set; below 0 is worse than predicting that mean",
    ),
    score(
        "log_loss",
        Better::Lower,
        "mean of -[y ln p + (1-y) ln(1-p)], p clipped to [1e-15, 1-1e-15]",
    ),
    score(
        "brier",
        Better::Lower,
        "mean squared difference between predicted probability and outcome",
    ),
    score(
        "roc_auc",
        Better::Higher,
        "chance that a random 1 gets a higher probability than a random 0 (ties half); 0.5 is no skill",
    ),
    score(
        "accuracy",
        Better::Higher,
        "share of units whose class at probability threshold 0.5 (p >= 0.5 means 1) is right",
    ),
    score(
        "poisson_deviance",
        Better::Lower,
        "mean Poisson deviance 2[y ln(y/mu) - (y - mu)], mu clipped below at 1e-15",
    ),
];

impl Family {
    /// The family's name as stored in `runs.family` and given to `--family`.
    pub fn name(self) -> &'static str {
        match self {
            Family::Regression => "regression",
            Family::Binary => "binary",
            Family::Count => "count",
        }
    }

    /// The family of a name ([`name`](Self::name)).
    pub fn from_name(name: &str) -> Option<Family> {
        [Family::Regression, Family::Binary, Family::Count]
            .into_iter()
            .find(|family| family.name() == name)
    }

    /// The scores this family produces, in order.
    pub fn scores(self) -> Vec<&'static ScoreDef> {
        let names: &[&str] = match self {
            Family::Regression => &["rmse", "mae", "bias", "r2"],
            Family::Binary => &["log_loss", "brier", "roc_auc", "accuracy"],
            Family::Count => &["poisson_deviance", "rmse"],
        };
        names.iter().filter_map(|name| score_def(name)).collect()
    }

    /// The main score (what a summary leads with and the comparison uses).
    pub fn headline(self) -> &'static str {
        match self {
            Family::Regression => "rmse",
            Family::Binary => "log_loss",
            Family::Count => "poisson_deviance",
        }
    }

    /// Scores `(observed, predicted)` pairs.
    pub fn score(self, pairs: &[(f64, f64)]) -> Scores {
        match self {
            Family::Regression => regression(pairs),
            Family::Binary => binary(pairs),
            Family::Count => count(pairs),
        }
    }

    /// A unit's term of the headline loss: the log-loss term (binary) or the
    /// Poisson deviance term (count); None for regression, whose per-unit
    /// errors are the residual and its square.
    pub fn loss(self, observed: f64, predicted: f64) -> Option<f64> {
        match self {
            Family::Regression => None,
            Family::Binary => Some(log_loss_term(observed, predicted)),
            Family::Count => Some(deviance_term(observed, predicted)),
        }
    }

    /// Why an observed value does not fit the family (binary: 0 or 1;
    /// count: a non-negative integer; regression: any finite number).
    pub fn check_observed(self, value: f64) -> Result<(), String> {
        match self {
            Family::Regression => Ok(()),
            Family::Binary if value == 0.0 || value == 1.0 => Ok(()),
            Family::Binary => Err(format!(
                "target is {value}, but a binary model needs 0 or 1 (code the outcome as 0/1)"
            )),
            Family::Count if value >= 0.0 && value.fract() == 0.0 => Ok(()),
            Family::Count if value < 0.0 => {
                Err(format!("target is {value}: a count cannot be negative"))
            }
            Family::Count => Err(format!("target is {value}: a count must be a whole number")),
        }
    }

    /// Why a prediction does not fit the family (binary: a probability in
    /// [0, 1]; count: a non-negative expected count; every family: finite).
    pub fn check_predicted(self, value: f64) -> Result<(), String> {
        if !value.is_finite() {
            return Err(format!("predicted value {value} is not a finite number"));
        }
        match self {
            Family::Binary if !(0.0..=1.0).contains(&value) => Err(format!(
                "predicted value {value} is not a probability between 0 and 1"
            )),
            Family::Count if value < 0.0 => Err(format!(
                "predicted value {value} is negative; an expected count is 0 or more"
            )),
            _ => Ok(()),
        }
    }
}

/// The log-loss term of one unit.
fn log_loss_term(observed: f64, predicted: f64) -> f64 {
    let p = predicted.clamp(CLIP, 1.0 - CLIP);
    -(observed * p.ln() + (1.0 - observed) * (1.0 - p).ln())
}

/// The Poisson deviance term of one unit.
fn deviance_term(observed: f64, predicted: f64) -> f64 {
    let mu = predicted.max(CLIP);
    let log_term = if observed > 0.0 {
        observed * (observed / mu).ln()
    } else {
        0.0
    };
    2.0 * (log_term - (observed - mu))
}

/// The definition of a score by name.
pub fn score_def(name: &str) -> Option<&'static ScoreDef> {
    ALL_SCORES.iter().find(|score| score.name == name)
}

/// Scores of one set of held-out predictions: its size and each score by
/// name (None where a score is undefined, e.g. R² of a constant target).
/// Serialised as one object: `{"n": 120, "rmse": 1.2, …}`.
#[derive(Debug, Clone, PartialEq)]
pub struct Scores {
    /// Number of predictions.
    pub n: usize,
    /// `(name, value)` in the family's order.
    pub values: Vec<(&'static str, Option<f64>)>,
}

impl Serialize for Scores {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut map = serializer.serialize_map(Some(self.values.len() + 1))?;
        map.serialize_entry("n", &self.n)?;
        for (name, value) in &self.values {
            map.serialize_entry(name, value)?;
        }
        map.end()
    }
}

impl Scores {
    /// The value of score `name`, when present and defined.
    pub fn get(&self, name: &str) -> Option<f64> {
        self.values
            .iter()
            .find(|(n, _)| *n == name)
            .and_then(|(_, value)| *value)
    }

    fn empty(family: Family) -> Scores {
        Scores {
            n: 0,
            values: family.scores().iter().map(|s| (s.name, None)).collect(),
        }
    }
}

/// Regression scores of `(observed, predicted)` pairs. Two passes: the mean
/// first, so SST is computed around it without cancellation.
fn regression(pairs: &[(f64, f64)]) -> Scores {
    let n = pairs.len();
    if n == 0 {
        return Scores::empty(Family::Regression);
    }
    let count = n as f64;
    let mean_observed = pairs.iter().map(|p| p.0).sum::<f64>() / count;
    let (mut sse, mut sae, mut sum_error, mut sst) = (0.0, 0.0, 0.0, 0.0);
    for &(observed, predicted) in pairs {
        let residual = observed - predicted;
        sse += residual * residual;
        sae += residual.abs();
        sum_error += predicted - observed;
        sst += (observed - mean_observed).powi(2);
    }
    Scores {
        n,
        values: vec![
            ("rmse", Some((sse / count).sqrt())),
            ("mae", Some(sae / count)),
            ("bias", Some(sum_error / count)),
            ("r2", (sst > 0.0).then(|| 1.0 - sse / sst)),
        ],
    }
}

/// Binary scores of `(outcome, probability)` pairs.
fn binary(pairs: &[(f64, f64)]) -> Scores {
    let n = pairs.len();
    if n == 0 {
        return Scores::empty(Family::Binary);
    }
    let count = n as f64;
    let (mut loss, mut brier, mut right) = (0.0, 0.0, 0usize);
    for &(observed, predicted) in pairs {
        loss += log_loss_term(observed, predicted);
        brier += (predicted - observed).powi(2);
        if (predicted >= THRESHOLD) == (observed == 1.0) {
            right += 1;
        }
    }
    Scores {
        n,
        values: vec![
            ("log_loss", Some(loss / count)),
            ("brier", Some(brier / count)),
            ("roc_auc", roc_auc(pairs)),
            ("accuracy", Some(right as f64 / count)),
        ],
    }
}

/// ROC AUC from the rank sum of the positives, with mid-ranks for ties;
/// None when the pairs hold one class only.
pub fn roc_auc(pairs: &[(f64, f64)]) -> Option<f64> {
    let positives = pairs.iter().filter(|p| p.0 == 1.0).count();
    let negatives = pairs.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let mut order: Vec<usize> = (0..pairs.len()).collect();
    order.sort_by(|&a, &b| pairs[a].1.total_cmp(&pairs[b].1));
    let mut rank_sum = 0.0;
    let mut start = 0;
    while start < order.len() {
        let mut end = start + 1;
        while end < order.len() && pairs[order[end]].1 == pairs[order[start]].1 {
            end += 1;
        }
        // Ranks start..end (0-based) share the mid-rank (start + end + 1) / 2 (1-based).
        let mid_rank = (start + end + 1) as f64 / 2.0;
        let tied_positives = order[start..end]
            .iter()
            .filter(|&&i| pairs[i].0 == 1.0)
            .count();
        rank_sum += mid_rank * tied_positives as f64;
        start = end;
    }
    let (n1, n0) = (positives as f64, negatives as f64);
    Some((rank_sum - n1 * (n1 + 1.0) / 2.0) / (n1 * n0))
}

/// Count scores of `(count, expected count)` pairs.
fn count(pairs: &[(f64, f64)]) -> Scores {
    let n = pairs.len();
    if n == 0 {
        return Scores::empty(Family::Count);
    }
    let count = n as f64;
    let (mut deviance, mut sse) = (0.0, 0.0);
    for &(observed, predicted) in pairs {
        deviance += deviance_term(observed, predicted);
        sse += (observed - predicted).powi(2);
    }
    Scores {
        n,
        values: vec![
            ("poisson_deviance", Some(deviance / count)),
            ("rmse", Some((sse / count).sqrt())),
        ],
    }
}

/// Mean and sample standard deviation (n - 1 denominator) of per-fold scores.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Spread {
    /// Mean over folds.
    pub mean: f64,
    /// Sample standard deviation over folds; NaN with one fold.
    pub sd: f64,
}

/// Mean and sample SD of the finite values.
pub fn spread(values: impl IntoIterator<Item = f64>) -> Spread {
    let values: Vec<f64> = values.into_iter().filter(|v| v.is_finite()).collect();
    let n = values.len() as f64;
    if values.is_empty() {
        return Spread {
            mean: f64::NAN,
            sd: f64::NAN,
        };
    }
    let mean = values.iter().sum::<f64>() / n;
    let sd = if values.len() > 1 {
        (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
    } else {
        f64::NAN
    };
    Spread { mean, sd }
}

/// The spread of each score of `family` over a list of score sets.
pub fn spreads<'a>(
    family: Family,
    sets: impl Iterator<Item = &'a Scores> + Clone,
) -> Vec<(&'static str, Spread)> {
    family
        .scores()
        .iter()
        .map(|def| {
            (
                def.name,
                spread(sets.clone().filter_map(|scores| scores.get(def.name))),
            )
        })
        .collect()
}

#[cfg(test)]
mod tests;
