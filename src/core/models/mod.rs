//! Model families fitted per fold.
//!
//! A family implements [`Model`]: it fits on the training units of a fold and
//! returns a [`Predictor`] for the held-out ones. Failures are plain messages
//! naming the features at fault; the pipeline adds the fold and repetition.
//!
//! - [`ols`]: ordinary least squares with intercept, by Householder QR.

pub mod ols;

use std::str::FromStr;

use crate::core::units::Dataset;
use crate::error::Error;

/// The training units of one fold: indices into a dataset.
pub struct TrainingSet<'a> {
    /// All units.
    pub dataset: &'a Dataset,
    /// The indices of the training units, ascending.
    pub rows: &'a [usize],
}

/// A fitted model.
pub trait Predictor {
    /// The prediction for one unit's feature values (in the dataset's feature order).
    fn predict(&self, features: &[f64]) -> f64;
}

/// A model family.
pub trait Model: Sync {
    /// Name stored in `runs.parameters`.
    fn name(&self) -> &'static str;
    /// Parameters stored in `runs.parameters`.
    fn parameters(&self) -> serde_json::Value;
    /// Fewest training units the family needs with `n_features` features.
    fn min_training_units(&self, n_features: usize) -> usize;
    /// Fits on the training units.
    ///
    /// # Errors
    /// A message naming the features involved when the design cannot be fitted.
    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Predictor>, String>;
}

/// The model families geofold offers, as named on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModelKind {
    /// Ordinary least squares with intercept.
    Ols,
}

impl FromStr for ModelKind {
    type Err = Error;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        match text {
            "ols" => Ok(ModelKind::Ols),
            other => Err(Error::Usage(format!(
                "unknown --model {other:?}; available: ols"
            ))),
        }
    }
}

impl ModelKind {
    /// The family object.
    pub fn build(self) -> Box<dyn Model> {
        match self {
            ModelKind::Ols => Box::new(ols::Ols),
        }
    }
}
