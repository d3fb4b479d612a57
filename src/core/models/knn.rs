//! The k-nearest-neighbour mean: a held-out unit is predicted by the plain
//! mean of the targets of the K training units nearest to its
//! representative point (ties in distance to the lower unit id). Location
//! only, no features: the simplest spatial baseline.
//!
//! # Options
//! - `--neighbours K` (1 to 10,000), required.
//! - `--family regression|binary|count` (default regression): which scores;
//!   for counts with an exposure column, the neighbours' pooled rate times
//!   the unit's exposure ([`super::neighbourhood`]).

use serde::{Deserialize, Serialize};

use super::neighbourhood::TrainingPoints;
use super::{family_option, model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use super::{UnitView, MAX_NEIGHBOURS};
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "knn",
    about: "mean of the K nearest training units (location only)",
    options: &["neighbours", "family"],
    build,
};

/// Options of kNN.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct KnnParams {
    /// The number of nearest training units averaged.
    pub neighbours: Option<u32>,
    /// The family of the target.
    pub family: Option<String>,
}

/// Checks `--neighbours` and `--radius`.
///
/// # Errors
/// [`Error::Usage`] for K outside 1 to [`MAX_NEIGHBOURS`] or a radius that
/// is not a positive number up to 1e12.
pub fn search_options(
    model: &str,
    neighbours: Option<u32>,
    radius: Option<f64>,
) -> Result<(Option<usize>, Option<f64>), Error> {
    if let Some(k) = neighbours {
        if !(1..=MAX_NEIGHBOURS as u32).contains(&k) {
            return Err(Error::Usage(format!(
                "--model {model}: --neighbours must be between 1 and {MAX_NEIGHBOURS}, got {k}"
            )));
        }
    }
    if let Some(r) = radius {
        if !(r.is_finite() && r > 0.0 && r <= 1e12) {
            return Err(Error::Usage(format!(
                "--model {model}: --radius must be a positive number of CRS units up to 1e12, got {r}"
            )));
        }
    }
    Ok((neighbours.map(|k| k as usize), radius))
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: KnnParams = model_params("knn", ENTRY.options, options)?;
    let (neighbours, _) = search_options("knn", params.neighbours, None)?;
    let neighbours = neighbours.ok_or_else(|| {
        Error::Usage(
            "--model knn needs --neighbours K (the number of nearest training units)".into(),
        )
    })?;
    Ok(Box::new(Knn {
        neighbours,
        family: family_option("knn", params.family.as_deref())?,
    }))
}

/// The kNN family.
pub struct Knn {
    /// K.
    pub neighbours: usize,
    /// Family of the target.
    pub family: Family,
}

impl Model for Knn {
    fn name(&self) -> &'static str {
        "knn"
    }

    fn family(&self) -> Family {
        self.family
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({ "neighbours": self.neighbours, "family": self.family.name() })
    }

    fn describe(&self) -> String {
        format!(
            "mean of the {} nearest training units; location only",
            self.neighbours
        )
    }

    fn uses_features(&self) -> bool {
        false
    }

    fn needs_distances(&self) -> bool {
        true
    }

    fn min_training_units(&self, _n_features: usize) -> usize {
        1
    }

    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError> {
        Ok(Box::new(KnnFit {
            training: TrainingPoints::new(training.data, training.rows, self.family),
            neighbours: self.neighbours,
        }))
    }
}

struct KnnFit {
    training: TrainingPoints,
    neighbours: usize,
}

impl Fitted for KnnFit {
    fn predict(&self, unit: &UnitView<'_>) -> f64 {
        let found: Vec<_> = self
            .training
            .neighbours(unit, Some(self.neighbours), None)
            .into_iter()
            .map(|n| (n, 1.0))
            .collect();
        self.training.weighted(unit, &found)
    }
}
