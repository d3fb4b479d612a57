//! Inverse distance weighting: a held-out unit is predicted from the
//! targets of training units near its representative point, weighted by
//! `1 / d^power` (Shepard, D. (1968), A two-dimensional interpolation function
//! for irregularly-spaced data, *Proceedings of the 1968 ACM National
//! Conference*, 517–524). It uses location only, no features: the simple
//! spatial interpolator a model must beat.
//!
//! # Options
//! - `--power P` (default 2; above 0, at most 10).
//! - `--neighbours K` (1 to 10,000): the K nearest training units (ties in
//!   distance to the lower unit id); and/or `--radius R` (CRS units): the
//!   training units within distance R (distance ≤ R). With both, the K
//!   nearest within R. One of them is required.
//! - `--family regression|binary|count` (default regression): which scores.
//!   For counts with an exposure column the weighted pooled rate times the
//!   unit's exposure is predicted ([`super::neighbourhood`]).
//!
//! A training unit at distance 0 takes all the weight (with others at
//! distance 0: their plain mean), the limit of the weights as d → 0. A
//! held-out unit with no training unit within the radius gets the training
//! mean (or rate), and the summary counts such units.

use serde::{Deserialize, Serialize};

use super::neighbourhood::{TrainingPoints, FALLBACK_NOTE};
use super::UnitView;
use super::{family_option, model_params, FitError, Fitted, Model, ModelEntry, TrainingSet};
use crate::core::metrics::Family;
use crate::core::options::Options;
use crate::error::Error;

/// The registry entry.
pub const ENTRY: ModelEntry = ModelEntry {
    name: "idw",
    about: "inverse distance weighting of nearby training targets (location only)",
    options: &["power", "neighbours", "radius", "family"],
    build,
};

/// Options of IDW.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct IdwParams {
    /// Distance exponent (default 2).
    pub power: Option<f64>,
    /// The number of nearest training units used.
    pub neighbours: Option<u32>,
    /// The search radius in CRS units.
    pub radius: Option<f64>,
    /// The family of the target.
    pub family: Option<String>,
}

fn build(options: &Options) -> Result<Box<dyn Model>, Error> {
    let params: IdwParams = model_params("idw", ENTRY.options, options)?;
    let power = params.power.unwrap_or(2.0);
    if !(power.is_finite() && power > 0.0 && power <= 10.0) {
        return Err(Error::Usage(format!(
            "--power must be above 0 and at most 10, got {power}"
        )));
    }
    let (neighbours, radius) = super::knn::search_options("idw", params.neighbours, params.radius)?;
    if neighbours.is_none() && radius.is_none() {
        return Err(Error::Usage(
            "--model idw needs --neighbours K (the K nearest training units) or --radius R (those within R)"
                .into(),
        ));
    }
    Ok(Box::new(Idw {
        power,
        neighbours,
        radius,
        family: family_option("idw", params.family.as_deref())?,
    }))
}

/// The IDW family.
pub struct Idw {
    /// Distance exponent.
    pub power: f64,
    /// Nearest training units used.
    pub neighbours: Option<usize>,
    /// Search radius.
    pub radius: Option<f64>,
    /// Family of the target.
    pub family: Family,
}

impl Model for Idw {
    fn name(&self) -> &'static str {
        "idw"
    }

    fn family(&self) -> Family {
        self.family
    }

    fn parameters(&self) -> serde_json::Value {
        serde_json::json!({
            "power": self.power,
            "neighbours": self.neighbours,
            "radius": self.radius,
            "family": self.family.name(),
        })
    }

    fn describe(&self) -> String {
        let search = match (self.neighbours, self.radius) {
            (Some(k), Some(r)) => format!("the {k} nearest training units within {r} CRS units"),
            (Some(k), None) => format!("the {k} nearest training units"),
            (None, Some(r)) => format!("the training units within {r} CRS units"),
            (None, None) => String::new(),
        };
        format!(
            "inverse distance weighting (power {}) of {search}; location only",
            self.power
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
        Ok(Box::new(IdwFit {
            training: TrainingPoints::new(training.data, training.rows, self.family),
            power: self.power,
            neighbours: self.neighbours,
            radius: self.radius,
        }))
    }
}

struct IdwFit {
    training: TrainingPoints,
    power: f64,
    neighbours: Option<usize>,
    radius: Option<f64>,
}

impl Fitted for IdwFit {
    fn predict(&self, unit: &UnitView<'_>) -> f64 {
        self.predict_with_note(unit).0
    }

    fn predict_with_note(&self, unit: &UnitView<'_>) -> (f64, Option<&'static str>) {
        let found = self.training.neighbours(unit, self.neighbours, self.radius);
        if found.is_empty() {
            return (self.training.intercept_only(unit), Some(FALLBACK_NOTE));
        }
        let coincident: Vec<_> = found
            .iter()
            .filter(|n| n.distance == 0.0)
            .map(|n| (*n, 1.0))
            .collect();
        let weighted: Vec<_> = if coincident.is_empty() {
            found
                .iter()
                .map(|n| (*n, n.distance.powf(-self.power)))
                .collect()
        } else {
            coincident
        };
        (self.training.weighted(unit, &weighted), None)
    }
}

#[cfg(test)]
mod tests;
