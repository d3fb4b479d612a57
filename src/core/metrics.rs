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

/// Scores of one set of held-out predictions.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Scores {
    /// Number of predictions.
    pub n: usize,
    /// Root mean squared error.
    pub rmse: f64,
    /// Mean absolute error.
    pub mae: f64,
    /// Mean of predicted minus observed.
    pub bias: f64,
    /// 1 - SSE/SST; None when the observed values are all equal.
    pub r2: Option<f64>,
}

/// Scores `(observed, predicted)` pairs. Two passes: the mean first, so SST is
/// computed around it without cancellation.
pub fn score(pairs: &[(f64, f64)]) -> Scores {
    let n = pairs.len();
    if n == 0 {
        return Scores {
            n,
            rmse: f64::NAN,
            mae: f64::NAN,
            bias: f64::NAN,
            r2: None,
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
        rmse: (sse / count).sqrt(),
        mae: sae / count,
        bias: sum_error / count,
        r2: if sst > 0.0 {
            Some(1.0 - sse / sst)
        } else {
            None
        },
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

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn matches_the_scikit_learn_documentation_example() {
        // y = [3, -0.5, 2, 7], ŷ = [2.5, 0, 2, 8]: r2_score 0.9486081370449679,
        // RMSE 0.6123724356957945, MAE 0.5 (REFERENCES.md §7, [COMP sklearn 1.9.1]).
        let pairs = [(3.0, 2.5), (-0.5, 0.0), (2.0, 2.0), (7.0, 8.0)];
        let scores = score(&pairs);
        assert_relative_eq!(scores.r2.unwrap(), 0.9486081370449679, epsilon = 1e-15);
        assert_relative_eq!(scores.rmse, 0.6123724356957945, epsilon = 1e-15);
        assert_relative_eq!(scores.mae, 0.5, epsilon = 1e-15);
        // bias = mean(ŷ - y) = (-0.5 + 0.5 + 0 + 1) / 4 (hand computation).
        assert_relative_eq!(scores.bias, 0.25, epsilon = 1e-15);
    }

    #[test]
    fn constant_observed_values_leave_r2_undefined() {
        assert_eq!(score(&[(1.0, 2.0), (1.0, 0.0)]).r2, None);
    }

    #[test]
    fn spread_uses_the_sample_sd() {
        // mean 2, sample variance ((1)² + 0 + (1)²) / 2 = 1 (hand computation).
        let s = spread([1.0, 2.0, 3.0]);
        assert_relative_eq!(s.mean, 2.0);
        assert_relative_eq!(s.sd, 1.0);
    }
}
