//! The training mean: every held-out unit of a fold is predicted by the
//! mean target of the fold's training units, or, for a count family with an
//! exposure column, by the training rate `Σy / ΣE` times its own exposure
//! (the intercept-only model of each family). This is the reference every
//! summary shows beside a model's scores (computed on the side for every
//! run); `--model mean` gives the same numbers as a run of its own.
//!
//! Option: `--family regression|binary|count` (default regression).

use serde::{Deserialize, Serialize};

use super::neighbourhood::TrainingPoints;
use super::UnitView;
use super::{family_option, model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "mean",
    about: "the training mean (or rate): the intercept-only model",
    options: &["family"],
    build,
};

/// Options of the mean.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct MeanParams {
    /// The family of the target.
    pub family: Option<String>,
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: MeanParams = model_params("mean", ENTRY.options, options)?;
    Ok(Box::new(Mean {
        family: family_option("mean", params.family.as_deref())?,
    }))
}

/// The training-mean family.
pub struct Mean {
    /// Family of the target.
    pub family: Family,
}

impl Model for Mean {
    fn name(&self) -> &'static str {
        "mean"
    }

    fn family(&self) -> Family {
        self.family
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({ "family": self.family.name() })
    }

    fn describe(&self) -> String {
        "the training mean (intercept only)".to_string()
    }

    fn uses_features(&self) -> bool {
        false
    }

    fn min_training_units(&self, _n_features: usize) -> usize {
        1
    }

    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        Ok(Box::new(MeanFit {
            training: TrainingPoints::new(training.data, training.rows, self.family),
        }))
    }
}

struct MeanFit {
    training: TrainingPoints,
}

impl Fitted for MeanFit {
    fn predict(&self, unit: &UnitView<'_>) -> f64 {
        self.training.intercept_only(unit)
    }

    fn coefficients(&self) -> Vec<(String, f64)> {
        vec![(
            "(intercept)".to_string(),
            self.training.intercept_only(&UnitView {
                features: &[],
                point: [0.0, 0.0],
                exposure: None,
            }),
        )]
    }
}
