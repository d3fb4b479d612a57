//! Logistic regression for a 0/1 target: `P(y = 1) = 1 / (1 + e^{−η})`,
//! `η = b₀ + Σ_j b_j x_j`, fitted by maximum likelihood with IRLS, step
//! halving and separation detection ([`super::glm`], whose module doc states
//! the convergence rule). Predictions are probabilities; coefficients are
//! log-odds per unit of each feature, on the original scale.
//!
//! A target other than 0 and 1 is refused before anything is fitted (the
//! binary family's check, naming the row); a fold whose training units all
//! have one outcome, whose outcomes are (quasi-)completely separated by the
//! features, or that does not converge within `--max-iterations` is an error
//! naming the fold.

use serde::{Deserialize, Serialize};

use super::glm::{GlmModel, Link, DEFAULT_MAX_ITERATIONS};
use super::{model_params, Model, ModelEntry};
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "logistic",
    about: "logistic regression for a 0/1 target (IRLS; separation detected)",
    options: &["max-iterations"],
    build,
};

/// Options of the GLM families.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct GlmParams {
    /// IRLS iteration cap, 1 to 10,000 (default 100).
    pub max_iterations: Option<u32>,
}

impl GlmParams {
    /// The iteration cap, checked.
    ///
    /// # Errors
    /// [`Error::Usage`] outside 1 to 10,000.
    pub fn cap(&self, model: &str) -> Result<u32, Error> {
        let cap = self.max_iterations.unwrap_or(DEFAULT_MAX_ITERATIONS);
        if !(1..=10_000).contains(&cap) {
            return Err(Error::Usage(format!(
                "--model {model}: --max-iterations must be between 1 and 10000, got {cap}"
            )));
        }
        Ok(cap)
    }
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: GlmParams = model_params("logistic", ENTRY.options, options)?;
    Ok(Box::new(GlmModel {
        link: Link::Logit,
        max_iterations: params.cap("logistic")?,
    }))
}
