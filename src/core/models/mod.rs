//! Model families fitted per fold.
//!
//! A family implements [`Model`]: it fits on the training units of a fold and
//! returns a [`Fitted`] model that predicts a held-out unit from a
//! [`UnitView`]: its features, its representative point and, for count models,
//! its exposure. A family declares its [`Family`], which decides its scores.
//! Failures are typed ([`FitError`]); the pipeline adds fold and repetition.
//!
//! Families, one file each, registered in [`MODELS`]:
//! - [`ols`]: ordinary least squares with intercept, by Householder QR.
//! - [`ridge`]: ridge regression on features standardised per training fold.
//! - [`logistic`]: logistic regression for a 0/1 target (IRLS, separation detected).
//! - [`poisson`]: Poisson regression for counts, log link, optional exposure offset.
//! - [`idw`]: inverse distance weighting of the training targets (location only).
//! - [`knn`]: the mean of the k nearest training units (location only).
//! - [`mean`]: the training mean (the intercept-only model of the family).
//! - [`external`]: a model fitted outside geofold (`--assign-only`, then `geofold score`).
//!
//! Shared machinery: [`linear`] (per-fold triangular factors merged across
//! folds, TSQR, so a k-fold linear run costs one pass over the data), [`glm`]
//! (iteratively reweighted least squares), [`neighbourhood`] (the training
//! units' neighbour index of the location-only families) and [`design`]
//! (which indicator columns of text features a fold uses).

pub mod design;
pub mod external;
pub mod glm;
pub mod idw;
pub mod knn;
pub mod linear;
pub mod logistic;
pub mod mean;
pub mod neighbourhood;
pub mod ols;
pub mod poisson;
pub mod ridge;

use std::fmt;

use crate::core::folds::FoldSet;
use crate::core::metrics::Family;
use crate::core::options::{parse_options, Options};
use crate::core::units::Dataset;
use crate::error::Error;

/// What a fitted model sees of one unit.
#[derive(Debug, Clone, Copy)]
pub struct UnitView<'a> {
    /// Feature values, in the dataset's feature order.
    pub features: &'a [f64],
    /// Representative point in the distance CRS.
    pub point: [f64; 2],
    /// Exposure (e.g. a population at risk), when the run has an exposure column.
    pub exposure: Option<f64>,
}

impl Dataset {
    /// The view of unit `i` a fitted model predicts from.
    pub fn view(&self, i: usize) -> UnitView<'_> {
        UnitView {
            features: self.features_of(i),
            point: self.points[i],
            exposure: self.exposure.as_ref().map(|e| e[i]),
        }
    }
}

/// The training units of one fold: indices into a dataset, ascending.
pub struct TrainingSet<'a> {
    /// All units.
    pub data: &'a Dataset,
    /// The indices of the training units, ascending.
    pub rows: &'a [u32],
}

/// A fitted model.
pub trait Fitted: Send + Sync {
    /// The prediction for one unit: a value (regression), a probability of 1
    /// (binary) or an expected count (count).
    fn predict(&self, unit: &UnitView<'_>) -> f64;
    /// The prediction with a note when it was made by a fallback rule (e.g.
    /// `no training unit within the radius: training mean`), which the
    /// summary counts.
    fn predict_with_note(&self, unit: &UnitView<'_>) -> (f64, Option<&'static str>) {
        (self.predict(unit), None)
    }
    /// The fitted terms and their estimates (intercept first), for the
    /// coefficients table; empty for models without coefficients.
    fn coefficients(&self) -> Vec<(String, f64)> {
        Vec::new()
    }
}

/// Why a fold could not be fitted. Messages name the features involved.
#[derive(Debug, Clone, PartialEq)]
pub enum FitError {
    /// Fewer training units than the model needs.
    TooFewUnits {
        /// Training units available.
        have: usize,
        /// Units needed.
        need: usize,
        /// What needs them, e.g. `ols with 3 features (a, b, c)`.
        what: String,
    },
    /// A feature takes one value on every training unit.
    Constant {
        /// The feature.
        feature: String,
        /// Its value.
        value: f64,
    },
    /// A term is a linear combination of the terms before it.
    Collinear {
        /// The term.
        term: String,
        /// The terms before it.
        earlier: Vec<String>,
        /// All features of the model.
        features: Vec<String>,
    },
    /// A term is zero or not finite on every training unit.
    NotFinite {
        /// The term.
        term: String,
    },
    /// A text feature takes one level on every training unit.
    OneLevel {
        /// The feature.
        feature: String,
        /// Its only level.
        level: String,
    },
    /// The outcomes are separated (logistic) or a zero-count region is
    /// (Poisson): the maximum-likelihood estimates do not exist.
    Separation {
        /// Complete (every unit) or quasi-complete (some units).
        complete: bool,
        /// The terms along which the estimates diverge, largest first.
        terms: Vec<String>,
        /// Training units whose fitted value reached its bound (0 or 1, or 0).
        units: usize,
        /// Which outcome: `0/1 outcomes` or `zero counts`.
        what: &'static str,
    },
    /// Iteratively reweighted least squares did not converge.
    NoConvergence {
        /// The iteration cap reached.
        iterations: u32,
        /// The last relative change of the deviance.
        change: f64,
    },
    /// Another problem of the training units, in words (e.g. every outcome 0).
    Problem(String),
}

impl fmt::Display for FitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FitError::TooFewUnits { have, need, what } => write!(
                f,
                "{have} training units, but {what} needs at least {need}"
            ),
            FitError::Constant { feature, value } => write!(
                f,
                "feature {feature} is constant ({}) on the training units, so it is collinear with the intercept",
                rounded(*value)
            ),
            FitError::Collinear {
                term,
                earlier,
                features,
            } => write!(
                f,
                "rank-deficient training design: {term} is a linear combination of {} (features: {})",
                earlier.join(", "),
                features.join(", ")
            ),
            FitError::NotFinite { term } => {
                write!(f, "{term} is zero or not finite on the training units")
            }
            FitError::OneLevel { feature, level } => write!(
                f,
                "text feature {feature} takes one value ({level}) on the training units, so it is constant"
            ),
            FitError::Separation {
                complete,
                terms,
                units,
                what,
            } => write!(
                f,
                "{} separation of the {what} along {}: {units} training units have fitted values at their bound, \
                 and the maximum-likelihood estimates do not exist (they grow without limit); drop or merge the \
                 feature(s), or use folds that do not isolate them",
                if *complete { "complete" } else { "quasi-complete" },
                terms.join(", ")
            ),
            FitError::NoConvergence { iterations, change } => write!(
                f,
                "no convergence within {iterations} iterations (last relative change of the deviance {change:.3e}); \
                 raise --max-iterations or check the features for extreme values"
            ),
            FitError::Problem(what) => write!(f, "{what}"),
        }
    }
}

impl std::error::Error for FitError {}

/// A value with at most 9 decimals and no trailing zeros: a constant
/// recovered from a factorisation (4.999999999999998) reads as 5.
fn rounded(value: f64) -> String {
    let text = format!("{value:.9}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

/// A model family with its options.
pub trait Model: Send + Sync {
    /// The family's name as stored in `runs.model`.
    fn name(&self) -> &'static str;
    /// What kind of target it predicts, which decides its scores.
    fn family(&self) -> Family;
    /// Its options as stored in `runs.parameters`.
    fn parameters(&self) -> serde_json::Value;
    /// One line in plain words, e.g. `ordinary least squares with intercept`.
    fn describe(&self) -> String;
    /// Whether predictions use the features (false for the location-only
    /// families, which read them only so that they validate the same units).
    fn uses_features(&self) -> bool {
        true
    }
    /// Whether predictions use distances between representative points (so
    /// the CRS must be in a known length unit, as for distance-based schemes).
    fn needs_distances(&self) -> bool {
        false
    }
    /// Fewest training units the family needs with `n_features` features.
    fn min_training_units(&self, n_features: usize) -> usize;
    /// Fits on the training units.
    ///
    /// # Errors
    /// [`FitError`] naming the features involved.
    fn fit(&self, training: &TrainingSet<'_>) -> Result<Box<dyn Fitted>, FitError>;
    /// Fits every fold of a fold set at once when the family can share work
    /// across folds (one result per fold, in fold order); `None` to have the
    /// caller fit fold by fold with [`fit`](Model::fit).
    fn fit_folds(
        &self,
        _data: &Dataset,
        _folds: &FoldSet,
    ) -> Option<Vec<Result<Box<dyn Fitted>, FitError>>> {
        None
    }
}

/// A model family in the registry.
pub struct ModelEntry {
    /// The name users pass to `--model`.
    pub name: &'static str,
    /// One line for `--help`.
    pub about: &'static str,
    /// The option names it takes (long option names, without `--`).
    pub options: &'static [&'static str],
    /// Builds it from its options.
    pub build: fn(&Options) -> Result<Box<dyn Model>, Error>,
}

/// Every model family geofold offers. Adding one is its file and a line here.
pub const MODELS: &[ModelEntry] = &[
    ols::ENTRY,
    ridge::ENTRY,
    logistic::ENTRY,
    poisson::ENTRY,
    idw::ENTRY,
    knn::ENTRY,
    mean::ENTRY,
    external::ENTRY,
];

/// Builds the model `name` from the options given for it.
///
/// # Errors
/// [`Error::Usage`] for an unknown model, an option it does not take, or a
/// bad option value.
pub fn build_model(name: &str, options: &Options) -> Result<Box<dyn Model>, Error> {
    let entry = MODELS.iter().find(|m| m.name == name).ok_or_else(|| {
        let names: Vec<&str> = MODELS.iter().map(|m| m.name).collect();
        Error::Usage(format!(
            "unknown --model {name:?}; geofold offers {}",
            names.join(", ")
        ))
    })?;
    (entry.build)(options)
}

/// Parses a model's options into its parameter struct, refusing options the
/// model does not take.
///
/// # Errors
/// [`Error::Usage`] naming the option.
pub fn model_params<T: serde::de::DeserializeOwned>(
    model: &str,
    accepted: &[&str],
    options: &Options,
) -> Result<T, Error> {
    parse_options(&format!("--model {model}"), accepted, options)
}

/// Largest `--neighbours` of the location-only families.
pub const MAX_NEIGHBOURS: usize = 10_000;

/// The family named by a `--family` option (default regression).
///
/// # Errors
/// [`Error::Usage`] for an unknown name.
pub fn family_option(model: &str, name: Option<&str>) -> Result<Family, Error> {
    match name {
        None => Ok(Family::Regression),
        Some(name) => Family::from_name(name).ok_or_else(|| {
            Error::Usage(format!(
                "--model {model}: --family {name:?} is not regression, binary or count"
            ))
        }),
    }
}
