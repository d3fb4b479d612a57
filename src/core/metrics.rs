//! Prediction scores: RMSE, MAE, bias and R².
//!
//! # Definitions
//! For held-out pairs (observed `y`, predicted `ŷ`), residual `e = y - ŷ`:
//! - RMSE = sqrt(mean(e²)); MAE = mean(|e|);
//! - bias = mean(ŷ - y), so a positive bias means over-prediction;
//! - R² = 1 - SSE/SST with SST around the mean of the observed values *of the
//!   set being scored* (the test fold for fold scores, all held-out predictions
//!   for run scores). It is undefined (None) when SST = 0. It is not the squared
//!   Pearson correlation.

use serde::Serialize;

/// What kind of target a model predicts, which decides its scores.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Family {
    /// A continuous target: RMSE, MAE, bias, R².
    Regression,
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

/// Every score of every family, in the order tables and summaries show them.
/// Adding a family's scores is a line here; the stores keep scores by name,
/// so no table gains a column.
pub const ALL_SCORES: &[ScoreDef] = &[
    ScoreDef {
        name: "rmse",
        better: Better::Lower,
        about: "root mean squared error, in the target's unit",
    },
    ScoreDef {
        name: "mae",
        better: Better::Lower,
        about: "mean absolute error, in the target's unit",
    },
    ScoreDef {
        name: "bias",
        better: Better::Zero,
        about: "mean of predicted minus observed (positive: over-prediction)",
    },
    ScoreDef {
        name: "r2",
        better: Better::Higher,
        about: "1 - SSE/SST around the mean of the scored set; below 0 is worse than predicting that mean",
    },
];

impl Family {
    /// The family's name as stored in `runs.family`.
    pub fn name(self) -> &'static str {
        match self {
            Family::Regression => "regression",
        }
    }

    /// The scores this family produces, in order.
    pub fn scores(self) -> Vec<&'static ScoreDef> {
        let names: &[&str] = match self {
            Family::Regression => &["rmse", "mae", "bias", "r2"],
        };
        names.iter().filter_map(|name| score_def(name)).collect()
    }

    /// The main score (what a summary leads with and the comparison uses).
    pub fn headline(self) -> &'static str {
        match self {
            Family::Regression => "rmse",
        }
    }

    /// Scores `(observed, predicted)` pairs.
    pub fn score(self, pairs: &[(f64, f64)]) -> Scores {
        match self {
            Family::Regression => regression(pairs),
        }
    }
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
}

/// Regression scores of `(observed, predicted)` pairs. Two passes: the mean
/// first, so SST is computed around it without cancellation.
fn regression(pairs: &[(f64, f64)]) -> Scores {
    let n = pairs.len();
    if n == 0 {
        return Scores {
            n,
            values: vec![("rmse", None), ("mae", None), ("bias", None), ("r2", None)],
        };
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
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn matches_the_scikit_learn_documentation_example() {
        // y = [3, -0.5, 2, 7], ŷ = [2.5, 0, 2, 8]: r2_score 0.9486081370449679,
        // RMSE 0.6123724356957945, MAE 0.5 (REFERENCES.md §7, [COMP sklearn 1.9.1]).
        let pairs = [(3.0, 2.5), (-0.5, 0.0), (2.0, 2.0), (7.0, 8.0)];
        let scores = Family::Regression.score(&pairs);
        assert_relative_eq!(
            scores.get("r2").unwrap(),
            0.9486081370449679,
            epsilon = 1e-15
        );
        assert_relative_eq!(
            scores.get("rmse").unwrap(),
            0.6123724356957945,
            epsilon = 1e-15
        );
        assert_relative_eq!(scores.get("mae").unwrap(), 0.5, epsilon = 1e-15);
        // bias = mean(ŷ - y) = (-0.5 + 0.5 + 0 + 1) / 4 (hand computation).
        assert_relative_eq!(scores.get("bias").unwrap(), 0.25, epsilon = 1e-15);
        assert_eq!(scores.n, 4);
    }

    #[test]
    fn constant_observed_values_leave_r2_undefined() {
        assert_eq!(
            Family::Regression
                .score(&[(1.0, 2.0), (1.0, 0.0)])
                .get("r2"),
            None
        );
    }

    #[test]
    fn spread_uses_the_sample_sd() {
        // mean 2, sample variance ((1)² + 0 + (1)²) / 2 = 1 (hand computation).
        let s = spread([1.0, 2.0, 3.0]);
        assert_relative_eq!(s.mean, 2.0);
        assert_relative_eq!(s.sd, 1.0);
    }
}
