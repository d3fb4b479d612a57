//! `geofold inspect`: how strongly a target and a model's residuals are
//! spatially autocorrelated, over which distances, and what block size and
//! exclusion radius that suggests — computed with the published statistics
//! of [`crate::core::diagnostics`] and stored beside the runs.
//!
//! # Steps
//! 1. Read the units as `run` does (the same source options and checks).
//! 2. Fit the model to all units; its residuals are `observed − predicted`.
//! 3. Spatial weights (`--weights`): queen or rook contiguity (computed by
//!    PostGIS for a PostGIS source, by geofold for a GeoPackage; both follow
//!    the same DE-9IM rules), k nearest neighbours, or a distance band;
//!    row-standardised. Units without neighbours keep a row of zeros and are
//!    counted.
//! 4. Global Moran's I of the target and of the residuals, with the moments
//!    under normality and randomisation (Cliff & Ord 1981), the
//!    regression-residual moments for OLS residuals, and a seeded permutation
//!    test (`--permutations`, default 999; p = (M + 1)/(R + 1), M permuted
//!    values at or above the observed I).
//! 5. The Matheron semivariogram and a correlogram of the residuals, the
//!    spherical and exponential fits (WLS, weights N/h²), and the advice.
//! 6. Store the inspection record and its figures in one transaction.
//!
//! The figures describe spatial structure, not causes; the advice is a
//! starting point for judgment, not a rule.

use std::time::{SystemTime, UNIX_EPOCH};

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use uuid::Uuid;

use crate::adapters::{ColumnSpec, SourceInfo};
use crate::core::diagnostics::advice::{advise, Advice, AdviceParams};
use crate::core::diagnostics::contiguity::Contiguity;
use crate::core::diagnostics::correlogram::Correlogram;
use crate::core::diagnostics::moran::{moran, moran_residuals, Moran, ResidualMoran};
use crate::core::diagnostics::pairs::{summarise_pairs, LagParams};
use crate::core::diagnostics::permutation::{
    moran_permutation, PermutationParams, PermutationTest,
};
use crate::core::diagnostics::semivariogram::Semivariogram;
use crate::core::diagnostics::variogram_fit::{fit_both, VariogramFit};
use crate::core::diagnostics::weights::{Transform, Weights};
use crate::core::models::{build_model, TrainingSet};
use crate::core::options::Options;
use crate::core::units::Dataset;
use crate::error::Error;
use crate::pipeline::{job_of, open_checked, open_store, read_units};
use crate::results::rows::{diagnostics_rows, listed, MoranRow, RowSource, Value};
use crate::results::{CORRELOGRAM, INSPECTIONS, SEMIVARIOGRAM, VARIOGRAM_FITS};
use crate::spec::{Limits, ResultsRef, SourceRef, WeightsRule};

/// Largest number of permutations.
pub const MAX_PERMUTATIONS: usize = 99_999;

/// An inspection, fully specified.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InspectSpec {
    /// The units.
    pub source: SourceRef,
    /// Their columns.
    pub columns: ColumnSpec,
    /// Transform geometries to this projected SRID first (PostGIS only).
    pub distance_srid: Option<i32>,
    /// Treat coordinates of a layer without a CRS as metres.
    pub assume_metres: bool,
    /// A row that would be skipped is an error instead.
    pub strict: bool,
    /// The model whose residuals are examined.
    pub model: String,
    /// Its options.
    pub model_options: Options,
    /// `queen`, `rook`, `knn:K`, `band:D`; None for queen on polygons, knn:8 otherwise.
    pub weights: Option<String>,
    /// Permutations of the permutation test.
    pub permutations: usize,
    /// Seed of the permutations and pair samples.
    pub seed: u64,
    /// Largest distance of the semivariogram (default: bounding-box diagonal / 3).
    pub cutoff: Option<f64>,
    /// Lag width (default: cutoff / lags).
    pub lag_width: Option<f64>,
    /// Number of lags (default 15).
    pub lags: usize,
    /// Folds the advice plans for (blocks should number at least twice this).
    pub folds: u32,
    /// Where the figures go.
    pub results: ResultsRef,
    /// The job the inspection advises; None for the default of the source.
    pub job: Option<String>,
    /// Bounds on waits.
    pub limits: Limits,
}

/// Moran's I of one subject with its permutation test.
#[derive(Debug, Clone, Serialize)]
pub struct SubjectMoran {
    /// `target` or `residuals`.
    pub subject: &'static str,
    /// I with the moments under normality and randomisation.
    pub moran: Moran,
    /// The regression-residual moments (OLS residuals only).
    pub regression: Option<ResidualMoran>,
    /// The permutation test (when permutations > 0).
    pub permutation: Option<PermutationTest>,
}

/// What an inspection found.
#[derive(Debug, Clone, Serialize)]
pub struct Inspection {
    /// The inspection's id.
    pub inspection_id: Uuid,
    /// The job it advises.
    pub job: String,
    /// The source.
    pub source: SourceInfo,
    /// The model fitted to all units.
    pub model: String,
    /// The weights used.
    pub weights: String,
    /// Units examined.
    pub units: usize,
    /// Moran's I of the target, then of the residuals.
    pub moran: Vec<SubjectMoran>,
    /// The semivariogram of the residuals.
    pub semivariogram: Semivariogram,
    /// Its fitted models.
    pub fits: Vec<VariogramFit>,
    /// The correlogram of the residuals.
    pub correlogram: Option<Correlogram>,
    /// The advice on block size and exclusion radius.
    pub advice: Advice,
    /// Where the figures were stored.
    pub stored_in: String,
    /// Rows written per table.
    pub rows_written: Vec<(String, u64)>,
}

impl InspectSpec {
    fn check(&self) -> Result<(), Error> {
        if self.permutations > MAX_PERMUTATIONS {
            return Err(Error::Usage(format!(
                "--permutations must be at most {MAX_PERMUTATIONS}, got {}",
                self.permutations
            )));
        }
        if let Some(weights) = &self.weights {
            WeightsRule::parse(weights)?;
        }
        for (option, value) in [("--cutoff", self.cutoff), ("--lag-width", self.lag_width)] {
            if let Some(value) = value {
                if !(value.is_finite() && value > 0.0) {
                    return Err(Error::Usage(format!(
                        "{option} must be a positive length in CRS units, got {value}"
                    )));
                }
            }
        }
        if !(1..=100).contains(&self.lags) {
            return Err(Error::Usage(format!(
                "--lags must be between 1 and 100, got {}",
                self.lags
            )));
        }
        crate::core::folds::random::check_folds(self.folds)?;
        if let Some(job) = &self.job {
            crate::adapters::check_job(job)?;
        }
        Ok(())
    }
}

fn diagnostics_error(
    info: &SourceInfo,
    error: crate::core::diagnostics::DiagnosticsError,
) -> Error {
    if error.is_usage() {
        Error::Usage(error.to_string())
    } else {
        Error::input(&info.table, None, None, error.to_string())
    }
}

/// Runs an inspection and stores it.
///
/// # Errors
/// As `run` for the source; usage errors for bad options; input errors when
/// a statistic cannot be computed (too few units, a constant target, no
/// neighbours at all).
pub fn inspect(spec: &InspectSpec) -> Result<Inspection, Error> {
    spec.check()?;
    let model = build_model(&spec.model, &spec.model_options)?;
    let (mut source, info) = open_checked(
        &spec.source,
        &spec.columns,
        spec.distance_srid,
        &spec.limits,
        crate::pipeline::Distances::Needed,
        spec.assume_metres,
    )?;
    let job = job_of(spec.job.as_deref(), &spec.source, &spec.results, &info);
    crate::adapters::check_job(&job)?;
    let data = read_units(
        source.as_mut(),
        &info,
        &job,
        spec.strict,
        false,
        &crate::progress::Silent,
    )?;
    let rule = match &spec.weights {
        Some(text) => WeightsRule::parse(text)?,
        None if data.geometry_kinds.polygons && !data.geometry_kinds.points => WeightsRule::Queen,
        None => WeightsRule::Nearest(8),
    };
    let diag = |e| diagnostics_error(&info, e);
    let weights = match rule {
        WeightsRule::Queen | WeightsRule::Rook => {
            let contiguity = if rule == WeightsRule::Queen {
                Contiguity::Queen
            } else {
                Contiguity::Rook
            };
            let pairs = source.contiguity(&data, contiguity)?;
            Weights::from_pairs(data.len(), &pairs, Transform::Row).map_err(diag)?
        }
        WeightsRule::Nearest(k) => {
            Weights::k_nearest(&data.points, k, Transform::Row).map_err(diag)?
        }
        WeightsRule::Band(d) => {
            Weights::distance_band(&data.points, d, Transform::Row).map_err(diag)?
        }
    };
    drop(source);

    // The full-data fit and its residuals.
    let rows: Vec<u32> = (0..data.len() as u32).collect();
    let fitted = model
        .fit(&TrainingSet {
            data: &data,
            rows: &rows,
        })
        .map_err(|problem| Error::Fit {
            fold: 1,
            repetition: 1,
            model: format!("{} (fitted to all units)", model.name()),
            problem,
        })?;
    let residuals: Vec<f64> = (0..data.len())
        .map(|i| data.target[i] - fitted.predict(&data.view(i)))
        .collect();
    let permutation = PermutationParams {
        permutations: spec.permutations,
        seed: spec.seed,
    };
    let mut results = Vec::new();
    for (subject, values) in [("target", &data.target), ("residuals", &residuals)] {
        let plain = moran(&weights, values).map_err(diag)?;
        let regression = if subject == "residuals" && model.name() == "ols" {
            Some(moran_residuals(&weights, values, &design(&data)).map_err(diag)?)
        } else {
            None
        };
        let permutation = if spec.permutations > 0 {
            Some(moran_permutation(&weights, values, &permutation).map_err(diag)?)
        } else {
            None
        };
        results.push(SubjectMoran {
            subject,
            moran: plain,
            regression,
            permutation,
        });
    }
    let lags = LagParams {
        cutoff: spec.cutoff,
        width: spec.lag_width,
        lags: spec.lags,
        seed: spec.seed,
        ..LagParams::default()
    };
    let summary = summarise_pairs(&data.points, &residuals, &lags).map_err(diag)?;
    let semivariogram = Semivariogram::from_pairs(&summary);
    let correlogram = Correlogram::from_pairs(&summary).ok();
    let fits = fit_both(&semivariogram).unwrap_or_default();
    let advice = advise(
        &semivariogram,
        &fits,
        &AdviceParams {
            folds: spec.folds,
            ..AdviceParams::default()
        },
    );

    let inspection_id = Uuid::new_v4();
    let started = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_micros() as i64)
        .unwrap_or(0);
    let record = Record {
        job: job.clone(),
        source: info.table.clone(),
        target: info.target_column.clone(),
        features: serde_json::Value::from(info.feature_columns.clone()).to_string(),
        model: model.name().to_string(),
        weights: rule.name(),
        fingerprint: data.fingerprint(),
        advice: advice.render_with(&|v| info.length(v)),
    };
    let mut store = open_store(&spec.results, &spec.limits)?;
    store.prepare(&info)?;
    let rows_written = {
        let rows = inspection_rows(
            inspection_id,
            started,
            &record,
            &data,
            spec.seed,
            &results,
            &semivariogram,
            &fits,
            correlogram.as_ref(),
            &advice,
        );
        store.write_rows(&rows)?
    };
    Ok(Inspection {
        inspection_id,
        job,
        source: info,
        model: model.describe(),
        weights: rule.name(),
        units: data.len(),
        moran: results,
        semivariogram,
        fits,
        correlogram,
        advice,
        stored_in: store.location(),
        rows_written,
    })
}

/// The design `[1, x…]` of the full-data OLS fit, for the regression moments.
fn design(data: &Dataset) -> DMatrix<f64> {
    let m = data.n_features();
    DMatrix::from_fn(data.len(), m + 1, |i, j| {
        if j == 0 {
            1.0
        } else {
            data.features_of(i)[j - 1]
        }
    })
}

/// The texts of the inspection record.
struct Record {
    job: String,
    source: String,
    target: String,
    features: String,
    model: String,
    weights: String,
    fingerprint: String,
    advice: String,
}

/// The rows an inspection writes.
#[allow(clippy::too_many_arguments)]
fn inspection_rows<'a>(
    id: Uuid,
    started: i64,
    record: &'a Record,
    data: &Dataset,
    seed: u64,
    results: &'a [SubjectMoran],
    semivariogram: &'a Semivariogram,
    fits: &'a [VariogramFit],
    correlogram: Option<&'a Correlogram>,
    advice: &'a Advice,
) -> Vec<Box<dyn RowSource<'a> + 'a>> {
    let units = data.len() as i64;
    let chosen = advice.basis.as_ref().map(|b| b.model);
    let chosen_fit = fits.iter().find(|f| Some(f.model) == chosen);
    vec![
        listed(
            &INSPECTIONS,
            vec![()],
            move |_: &(), out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(id),
                    Value::Str(&record.job),
                    Value::Timestamp(started),
                    Value::Str(&record.source),
                    Value::Str(&record.target),
                    Value::Str(&record.features),
                    Value::Str(&record.model),
                    Value::Str(&record.weights),
                    Value::Int(units),
                    Value::Int(seed as i64),
                    Value::Str(&record.fingerprint),
                    Value::float(advice.basis.as_ref().map(|b| b.range)),
                    Value::float(advice.block_size),
                    Value::float(advice.buffer_radius),
                    Value::Str(&record.advice),
                    Value::Str(env!("CARGO_PKG_VERSION")),
                ]);
            },
        ),
        diagnostics_rows(
            id,
            results
                .iter()
                .map(|r| MoranRow {
                    subject: r.subject,
                    weights: &record.weights,
                    sampled_from: None,
                    moran: &r.moran,
                    regression: r.regression.as_ref().map(|g| g.inference),
                    permutation: r
                        .permutation
                        .as_ref()
                        .map(|p| (p.permutations, p.p_greater)),
                })
                .collect(),
        ),
        listed(
            &SEMIVARIOGRAM,
            semivariogram.lags.iter().enumerate().collect(),
            move |(lag, l): &(usize, &crate::core::diagnostics::semivariogram::Lag),
                  out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(id),
                    Value::Str("residuals"),
                    Value::Int(*lag as i64 + 1),
                    Value::Float(l.lower),
                    Value::Float(l.upper),
                    Value::float(l.distance),
                    Value::float(l.gamma),
                    Value::Int(l.pairs as i64),
                    Value::float(chosen_fit.zip(l.distance).map(|(f, h)| f.gamma(h))),
                ]);
            },
        ),
        listed(
            &VARIOGRAM_FITS,
            fits.iter().collect(),
            move |f: &&VariogramFit, out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(id),
                    Value::Str("residuals"),
                    Value::Str(f.model.name()),
                    Value::Float(f.nugget),
                    Value::Float(f.partial_sill),
                    Value::Float(f.range_parameter),
                    Value::Float(f.effective_range),
                    Value::Float(f.r_squared),
                    Value::Int(i64::from(Some(f.model) == chosen)),
                ]);
            },
        ),
        listed(
            &CORRELOGRAM,
            correlogram
                .map(|c| c.classes.iter().enumerate().collect())
                .unwrap_or_default(),
            move |(class, c): &(
                usize,
                &crate::core::diagnostics::correlogram::CorrelogramClass,
            ),
                  out: &mut Vec<Value<'a>>| {
                out.extend([
                    Value::Uuid(id),
                    Value::Str("residuals"),
                    Value::Int(*class as i64 + 1),
                    Value::Float(c.lower),
                    Value::Float(c.upper),
                    Value::float(c.distance),
                    Value::Int(c.pairs as i64),
                    Value::float(c.statistic),
                    Value::float(c.randomisation.map(|r| r.z)),
                ]);
            },
        ),
    ]
}

impl Inspection {
    /// The human summary.
    pub fn to_text(&self) -> String {
        use std::fmt::Write as _;
        let mut out = String::new();
        let length = |v: f64| self.source.length(v);
        let _ = writeln!(
            out,
            "inspection {} of job {}: {} units of {} ({}), weights {}",
            self.inspection_id,
            self.job,
            self.units,
            self.source.table,
            self.source.store,
            self.weights
        );
        let _ = writeln!(
            out,
            "residuals of {} predicting {} from {}",
            self.model,
            self.source.target_column,
            self.source.feature_columns.join(", ")
        );
        for m in &self.moran {
            let _ = writeln!(
                out,
                "  Moran's I of the {}: {:.4} (E[I] {:.4}); z {:.2} under normality, {:.2} under randomisation{}{}",
                m.subject,
                m.moran.statistic,
                m.moran.normality.expected,
                m.moran.normality.z,
                m.moran.randomisation.z,
                m.regression
                    .as_ref()
                    .map(|r| format!(", {:.2} with the regression-residual moments (E[I] {:.4})", r.inference.z, r.inference.expected))
                    .unwrap_or_default(),
                m.permutation
                    .as_ref()
                    .map(|p| format!("; permutation p {:.4} ({} permutations)", p.p_greater, p.permutations))
                    .unwrap_or_default(),
            );
            if m.moran.islands > 0 {
                let _ = writeln!(
                    out,
                    "    {} units have no neighbours (rows of zero weight)",
                    m.moran.islands
                );
            }
            for caveat in &m.moran.caveats {
                let _ = writeln!(out, "    note: {caveat}");
            }
        }
        let _ = writeln!(
            out,
            "semivariogram of the residuals: {} lags of {} up to {}",
            self.semivariogram.lags.len(),
            length(self.semivariogram.width),
            length(self.semivariogram.cutoff)
        );
        let _ = writeln!(
            out,
            "  {:>4} {:>14} {:>14} {:>10}",
            "lag", "mean distance", "semivariance", "pairs"
        );
        for (i, lag) in self.semivariogram.lags.iter().enumerate() {
            let _ = writeln!(
                out,
                "  {:>4} {:>14} {:>14} {:>10}",
                i + 1,
                lag.distance.map(length).unwrap_or_else(|| "-".into()),
                lag.gamma
                    .map(|g| format!("{g:.5}"))
                    .unwrap_or_else(|| "-".into()),
                lag.pairs
            );
        }
        for fit in &self.fits {
            let _ = writeln!(
                out,
                "  {} fit: nugget {:.4}, partial sill {:.4}, range {} (weighted R² {:.3})",
                fit.model.name(),
                fit.nugget,
                fit.partial_sill,
                length(fit.effective_range),
                fit.r_squared
            );
        }
        let _ = write!(out, "advice: {}", self.advice.render_with(&length));
        let residual_clustered = self.moran.iter().any(|m| {
            m.subject == "residuals"
                && m.moran.randomisation.p_two_sided < 0.05
                && m.moran.statistic > m.moran.randomisation.expected
        });
        let first_populated = self
            .semivariogram
            .lags
            .iter()
            .find(|l| l.pairs > 0)
            .and_then(|l| l.distance);
        if let (true, None, Some(shortest)) =
            (residual_clustered, self.advice.block_size, first_populated)
        {
            let _ = writeln!(
                out,
                "  note: Moran's I finds the residuals of neighbouring units alike ({} weights), but the \
                 semivariogram shows no structure from {} on: the structure lies between neighbours closer \
                 than that; blocks of at least a few neighbour spacings keep test units apart from them",
                self.weights,
                length(shortest)
            );
        }
        let _ = writeln!(out, "stored in {}", self.stored_in);
        out
    }
}

#[cfg(test)]
mod tests;
