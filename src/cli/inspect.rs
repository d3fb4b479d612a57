//! `geofold inspect`: spatial autocorrelation of a target and of a model's
//! residuals, the semivariogram, and advice on block size and radius.

use clap::Args;

use crate::cli::run::{LimitArgs, SourceArgs, DEFAULT_SEED};
use crate::core::options::Options;
use crate::error::Error;
use crate::inspect::{inspect, InspectSpec, Inspection};
use crate::spec::{Limits, ResultsRef, SourceRef};

/// `geofold inspect`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP, allow_negative_numbers = true)]
pub struct InspectArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub source: SourceArgs,
    /// Model whose residuals are examined, fitted to all units (ols: ordinary least squares).
    #[arg(long, default_value = "ols", value_name = "MODEL")]
    pub model: String,
    /// Spatial weights: queen or rook contiguity (polygons), knn:K (k nearest units) or
    /// band:DISTANCE (units within DISTANCE, CRS units); row-standardised. Default: queen for
    /// polygons, knn:8 for points.
    #[arg(long, value_name = "RULE")]
    pub weights: Option<String>,
    /// Permutations of the permutation test of Moran's I (0: none; at most 99,999).
    #[arg(long, default_value_t = 999)]
    pub permutations: usize,
    /// Seed of the permutations and of the pair sample of very large layers.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Largest distance of the semivariogram, CRS units (default: a third of the bounding-box diagonal).
    #[arg(long, value_name = "LENGTH")]
    pub cutoff: Option<f64>,
    /// Width of the semivariogram's lags, CRS units (default: cutoff / --lags).
    #[arg(long, value_name = "LENGTH")]
    pub lag_width: Option<f64>,
    /// Number of lags when --lag-width is not given.
    #[arg(long, default_value_t = 15)]
    pub lags: usize,
    /// Folds the advice plans for (at least two blocks per fold).
    #[arg(long, default_value_t = 5)]
    pub folds: u32,
    /// Job the inspection advises (default: as for run).
    #[arg(long)]
    pub job: Option<String>,
    /// PostGIS schema for the figures (created when missing).
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// Write the figures into this GeoPackage instead of the source's own file.
    #[arg(long, value_name = "FILE")]
    pub results_gpkg: Option<std::path::PathBuf>,
    /// Print the findings as one JSON document.
    #[arg(long)]
    pub json: bool,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub limits: LimitArgs,
}

impl InspectArgs {
    /// The inspection these options describe.
    ///
    /// # Errors
    /// [`Error::Usage`] when no source is named.
    pub fn spec(&self) -> Result<InspectSpec, Error> {
        let source = self.source.source_ref()?;
        let results = match (&self.results_gpkg, &source) {
            (Some(file), _) => ResultsRef::Gpkg { file: file.clone() },
            (None, SourceRef::Gpkg { file, .. }) => ResultsRef::Gpkg { file: file.clone() },
            (None, SourceRef::Postgis { db, .. }) => ResultsRef::Postgis {
                db: db.clone(),
                schema: self.results_schema.clone(),
            },
        };
        Ok(InspectSpec {
            source,
            columns: self.source.columns()?,
            distance_srid: self.source.distance_srid,
            assume_metres: self.source.assume_metres,
            strict: self.source.strict,
            model: self.model.clone(),
            model_options: Options::new(),
            weights: self.weights.clone(),
            permutations: self.permutations,
            seed: self.seed,
            cutoff: self.cutoff,
            lag_width: self.lag_width,
            lags: self.lags,
            folds: self.folds,
            results,
            job: self.job.clone(),
            limits: Limits {
                lock_timeout_s: self.limits.lock_timeout,
                statement_timeout_s: self.limits.statement_timeout,
                wait_s: self.limits.wait,
            },
        })
    }
}

/// Runs `geofold inspect`.
///
/// # Errors
/// Any [`Error`].
pub fn run(args: &InspectArgs) -> Result<Inspection, Error> {
    inspect(&args.spec()?)
}
