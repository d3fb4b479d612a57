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

use super::glm::{GlmModel, Link};
use super::logistic::GlmParams;
use super::{model_params, Model, ModelEntry};
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
    Ok(Box::new(GlmModel {
        link: Link::Log,
        max_iterations: params.cap("poisson")?,
    }))
}
