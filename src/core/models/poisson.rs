//! Poisson regression for counts with a log link: `E[y] = e^η`, `η = b₀ +
//! Σ_j b_j x_j + log(exposure)`. With `--exposure-column` (for example the
//! population at risk) the logarithm of the exposure is the offset, so
//! `e^{b₀ + Σ b_j x_j}` is a rate per unit of exposure and predictions are
//! expected counts for each unit's own exposure. Fitted by IRLS
//! ([`super::glm`], whose module doc states the convergence rule).
//!
//! Negative or non-integer counts and non-positive exposures are refused
//! before anything is fitted, naming the row; a fold whose training counts
//! are all zero, where a region of zero counts drives a coefficient to −∞
//! (reported as separation of the zero counts), or that does not converge
//! within `--max-iterations` is an error naming the fold.

use super::glm::{self, Link};
use super::logistic::GlmParams;
use super::{design, model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "poisson",
    about: "Poisson regression for counts, log link; --exposure-column gives the offset",
    options: &["max-iterations"],
    build,
};

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: GlmParams = model_params("poisson", ENTRY.options, options)?;
    Ok(Box::new(Poisson {
        max_iterations: params.cap("poisson")?,
    }))
}

/// The Poisson family.
pub struct Poisson {
    /// IRLS iteration cap.
    pub max_iterations: u32,
}

impl Model for Poisson {
    fn name(&self) -> &'static str {
        "poisson"
    }

    fn family(&self) -> Family {
        Family::Count
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({
            "link": "log",
            "offset": "log(exposure) when an exposure column is given",
            "max_iterations": self.max_iterations,
            "convergence": "Newton decrement <= 1e-12 (|deviance| + 0.1)",
        })
    }

    fn describe(&self) -> String {
        "Poisson regression with intercept, log link (IRLS)".to_string()
    }

    fn min_training_units(&self, n_features: usize) -> usize {
        n_features + 1
    }

    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        let used = design::columns_of_rows(training.data, training.rows)?;
        let fit = glm::fit(
            Link::Log,
            training.data,
            training.rows,
            &used,
            self.max_iterations,
        )?;
        Ok(Box::new(fit))
    }
}
