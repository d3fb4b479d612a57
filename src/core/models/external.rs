//! A model fitted outside geofold (in R, Python, SAS…). `geofold run
//! --assign-only` records a run's folds under this model without fitting;
//! the analyst fits each fold elsewhere and `geofold score` checks and scores
//! the held-out predictions loaded back. geofold never fits it.
//!
//! Option: `--family regression|binary|count` (default regression): which
//! scores and which checks of the target and the predictions apply.

use serde::{Deserialize, Serialize};

use super::{family_option, model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::error::Error;

/// The name runs of external models are recorded under.
pub const NAME: &str = "external";

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: NAME,
    about: "a model fitted outside geofold: run --assign-only, then geofold score",
    options: &["family"],
    build,
};

/// Options of an external model.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct ExternalParams {
    /// The family of the target.
    pub family: Option<String>,
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: ExternalParams = model_params(NAME, ENTRY.options, options)?;
    Ok(Box::new(External {
        family: family_option(NAME, params.family.as_deref())?,
    }))
}

/// A model fitted elsewhere.
pub struct External {
    /// Family of the target.
    pub family: Family,
}

impl Model for External {
    fn name(&self) -> &'static str {
        NAME
    }

    fn family(&self) -> Family {
        self.family
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({ "family": self.family.name(), "fitted": "outside geofold" })
    }

    fn describe(&self) -> String {
        "a model fitted outside geofold (held-out predictions loaded by geofold score)".to_string()
    }

    fn min_training_units(&self, _n_features: usize) -> usize {
        1
    }

    fn fit(&self, _training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        Err(FitError::Problem(
            "an external model is fitted outside geofold: record its folds with geofold run --assign-only \
             and load its predictions with geofold score"
                .into(),
        ))
    }
}
