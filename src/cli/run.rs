//! `geofold run`: the command-line form of a run specification.
//!
//! This file only parses: it turns the options into a [`RunSpec`] and hands
//! it to [`crate::pipeline::run`]. Scheme and model options are collected
//! by name, so each scheme and model decides which it takes (and an option
//! that does not apply to the chosen one is an error, not silently ignored).

use std::path::PathBuf;

use clap::Args;

use crate::adapters::ColumnSpec;
use crate::core::models::design::UnseenPolicy;
use crate::core::models::external;
use crate::core::options::Options;
use crate::error::Error;
use crate::pipeline::Outcome;
use crate::progress::Progress;
use crate::spec::{
    trimmed, Limits, PredictionRef, ResultsRef, RunSpec, SourceRef, DEFAULT_LOCK_TIMEOUT_S,
    DEFAULT_STATEMENT_TIMEOUT_S,
};

/// Default seed of fold assignment; always recorded with the run.
pub const DEFAULT_SEED: u64 = 1;

/// Where the units come from.
#[derive(Debug, Clone, Args)]
pub struct SourceArgs {
    /// PostgreSQL connection: a libpq URI (postgresql://user@host:port/db) or key=value string.
    /// Missing parts come from the service file and the PG* variables, as libpq does.
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// Source table in PostGIS, as SCHEMA.TABLE (or TABLE on the search path).
    #[arg(long, value_name = "SCHEMA.TABLE", conflicts_with_all = ["gpkg", "layer"])]
    pub table: Option<String>,
    /// Source GeoPackage file.
    #[arg(long, value_name = "FILE")]
    pub gpkg: Option<PathBuf>,
    /// Feature table (layer) in the GeoPackage; may be left out when the file has one.
    #[arg(long, value_name = "NAME", requires = "gpkg")]
    pub layer: Option<String>,
    /// Id column (integer or text, unique). Default: the table's primary key.
    #[arg(long, value_name = "COLUMN")]
    pub id: Option<String>,
    /// Geometry column. Default: the table's only geometry (or geography) column.
    #[arg(long, value_name = "COLUMN")]
    pub geom: Option<String>,
    /// Target column (numeric): what the model predicts.
    #[arg(long, value_name = "COLUMN")]
    pub target: Option<String>,
    /// Feature columns, comma-separated: numeric, or text for a categorical feature (one-hot
    /// encoded with the levels of each fold's training units; see --unseen-levels).
    #[arg(long, value_name = "A,B,C", value_delimiter = ',')]
    pub features: Vec<String>,
    /// Group column (integer or text, e.g. a district code): every unit of a group is kept in
    /// one fold by --scheme group.
    #[arg(long, value_name = "COLUMN")]
    pub group_column: Option<String>,
    /// Exposure column (e.g. a population at risk), for count models: its logarithm is the offset.
    #[arg(long, value_name = "COLUMN")]
    pub exposure_column: Option<String>,
    /// Transform geometries to this projected SRID (metres) before building folds
    /// (PostGIS ST_Transform, each row from its own SRID). Needed for longitude/latitude
    /// data, geography columns and columns that mix SRIDs.
    #[arg(long, value_name = "SRID")]
    pub distance_srid: Option<i32>,
    /// The layer has no CRS defined, but its coordinates are metres: use them as such.
    #[arg(long)]
    pub assume_metres: bool,
    /// Fail instead of skipping rows with a missing geometry, target or feature.
    #[arg(long)]
    pub strict: bool,
}

/// How to validate.
#[derive(Debug, Clone, Args)]
pub struct ValidationArgs {
    /// Fold scheme: grid (square or hexagonal blocks), random (plain k-fold), kmeans (clusters
    /// of the units' points), group (the groups of --group-column kept whole), loo
    /// (leave-one-out; spatial with --exclusion-radius), nndm and knndm (folds matched to the
    /// prediction locations' nearest distances).
    #[arg(long, default_value = "grid", value_name = "SCHEME")]
    pub scheme: String,
    /// Block size for --scheme grid, in CRS units (metres for a projected CRS): the side of a
    /// square, or the distance between opposite sides of a hexagon.
    #[arg(long, value_name = "LENGTH")]
    pub block_size: Option<f64>,
    /// Grid origin X,Y in CRS units (default 0,0): a square's corner, cells
    /// [x0 + i·size, x0 + (i+1)·size); or the centre of one hexagon.
    #[arg(long, value_name = "X,Y", allow_hyphen_values = true)]
    pub grid_origin: Option<String>,
    /// Block shape for --scheme grid: square (default) or hex (flat-topped hexagons, two sides
    /// parallel to the x axis).
    #[arg(long, value_name = "SHAPE")]
    pub block_shape: Option<String>,
    /// How --scheme grid deals blocks to folds: random (default; seeded shuffle, each block to
    /// the fold with the fewest units) or systematic (a fixed pattern over block columns and
    /// rows in which blocks sharing an edge never share a fold; hexagons need 3 folds or more).
    #[arg(long, value_name = "RULE")]
    pub deal: Option<String>,
    /// Number of folds (2 to 1000; default 5).
    #[arg(long, value_name = "K")]
    pub folds: Option<u32>,
    /// Number of k-means clusters for --scheme kmeans (default: one per fold); more clusters
    /// than folds are dealt to the folds balancing units.
    #[arg(long, value_name = "M")]
    pub clusters: Option<u32>,
    /// k-means starts for --scheme kmeans (1 to 1000, default 10): the clustering with the
    /// smallest within-cluster sum of squares is kept.
    #[arg(long, value_name = "N")]
    pub starts: Option<u32>,
    /// For --scheme nndm: the distance (CRS units) up to which the distributions are matched.
    /// Default: the largest distance from a prediction location to the data (the whole
    /// distribution). A variogram range of the target is a common choice.
    #[arg(long, value_name = "LENGTH")]
    pub match_range: Option<f64>,
    /// For --scheme nndm: the smallest share (0 to 1, default 0.5) of the other units each
    /// training set keeps, however far the matching would exclude.
    #[arg(long, value_name = "SHARE")]
    pub min_training_share: Option<f64>,
    /// Prediction locations in PostGIS (points or polygons, in the source's SRID or transformed
    /// by --distance-srid): where the model will be used. Needed by nndm and knndm; with any
    /// scheme it adds the nearest_distances rows and the match statistic W.
    #[arg(long, value_name = "SCHEMA.TABLE", conflicts_with = "prediction_layer")]
    pub prediction_table: Option<String>,
    /// Geometry column of --prediction-table (default: its only geometry column).
    #[arg(long, value_name = "COLUMN", requires = "prediction_table")]
    pub prediction_geom: Option<String>,
    /// Prediction locations as a layer of the source GeoPackage (points or polygons, in the
    /// units' CRS).
    #[arg(long, value_name = "NAME")]
    pub prediction_layer: Option<String>,
    /// Exclusion buffer, any scheme: training units within this distance (CRS units) of a
    /// fold's test units are left out of that fold's training set.
    #[arg(long, value_name = "LENGTH")]
    pub exclusion_radius: Option<f64>,
    /// Repetitions, each with its own fold assignment (1 to 1000).
    #[arg(long, default_value_t = 1)]
    pub repeats: u32,
    /// Seed of the fold assignment; the same seed gives the same folds on any machine.
    #[arg(long, default_value_t = DEFAULT_SEED)]
    pub seed: u64,
    /// Also run random k-fold on the same rows, recorded as a comparison run, and report both.
    #[arg(long)]
    pub also_random: bool,
    /// Model: ols (default; least squares), ridge (--penalty), logistic (0/1 target),
    /// poisson (counts; --exposure-column), idw and knn (location only), mean (the training
    /// mean). With --assign-only the model is fitted elsewhere (recorded as external).
    #[arg(long, value_name = "MODEL")]
    pub model: Option<String>,
    /// Ridge penalty L ≥ 0 on the sum of squared slopes of features standardised on each
    /// fold's training units (population SD), against the sum of squared residuals (not
    /// divided by n); the intercept is not penalised (scikit-learn's Ridge(alpha=L) on z-scores).
    #[arg(long, value_name = "L")]
    pub penalty: Option<f64>,
    /// Logistic and Poisson: iteration cap of iteratively reweighted least squares (default 100).
    #[arg(long, value_name = "N")]
    pub max_iterations: Option<u32>,
    /// IDW: distance exponent, weights 1/d^P (default 2).
    #[arg(long, value_name = "P")]
    pub power: Option<f64>,
    /// IDW and kNN: the number of nearest training units used.
    #[arg(long, value_name = "K")]
    pub neighbours: Option<u32>,
    /// IDW: use the training units within this distance (CRS units); units with none get the
    /// training mean, counted in the summary.
    #[arg(long, value_name = "LENGTH")]
    pub radius: Option<f64>,
    /// idw, knn, mean and --assign-only: the kind of target, which decides the scores:
    /// regression (default), binary (0/1, predictions are probabilities) or count.
    #[arg(long, value_name = "FAMILY")]
    pub family: Option<String>,
    /// Text features: a held-out unit whose level its fold's training units never had is an
    /// error (error, the default) or gets all-zero indicators, i.e. the fold's reference level,
    /// counted in the summary (zero).
    #[arg(long, value_name = "POLICY", default_value = "error")]
    pub unseen_levels: String,
    /// Record the run's folds, exclusions and regions without fitting (status assigned), for
    /// a model fitted outside geofold; load its held-out predictions with geofold score.
    #[arg(long)]
    pub assign_only: bool,
    /// Weights of the Moran's I stored for each run's held-out residuals: knn:K (the K
    /// nearest units) or band:DISTANCE (units within DISTANCE, CRS units); row-standardised.
    #[arg(long, value_name = "RULE", default_value = "knn:8")]
    pub residual_weights: String,
}

/// Where the results go.
#[derive(Debug, Clone, Args)]
pub struct OutputArgs {
    /// Job label: names the run history and the job's map layers. Default: the schema and
    /// table name (schema_table); for results written into the source GeoPackage, the layer
    /// name with _cv appended. With --config: run only this job of the file.
    #[arg(long)]
    pub job: Option<String>,
    /// Connection for the results, when they are written as another role than the source is
    /// read (a writer owning the results schema); default: --db.
    #[arg(long, value_name = "CONNECTION")]
    pub results_db: Option<String>,
    /// PostGIS schema for results (created when missing).
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// Write results into this GeoPackage (created when missing; earlier runs are kept).
    #[arg(long, value_name = "FILE")]
    pub results_gpkg: Option<PathBuf>,
    /// Print the summary as one JSON document on stdout.
    #[arg(long)]
    pub json: bool,
}

/// Bounds on waits.
#[derive(Debug, Clone, Args)]
pub struct LimitArgs {
    /// Longest wait, in seconds, for a lock another session or program holds (a GIS with a
    /// layer open, a long query); then exit 75.
    #[arg(long, value_name = "SECONDS", default_value_t = DEFAULT_LOCK_TIMEOUT_S)]
    pub lock_timeout: f64,
    /// Longest any one database statement may run, in seconds; then exit 75.
    #[arg(long, value_name = "SECONDS", default_value_t = DEFAULT_STATEMENT_TIMEOUT_S)]
    pub statement_timeout: f64,
    /// Wait up to this many seconds for another run of the same job to finish (default:
    /// exit 2 at once).
    #[arg(long, value_name = "SECONDS", default_value_t = 0.0)]
    pub wait: f64,
}

/// Drift gates and scheduling.
#[derive(Debug, Clone, Args)]
pub struct ScheduleArgs {
    /// Run the jobs of this job file (TOML, one [job.NAME] table per job, keys = the long
    /// options of run), in order, or only --job NAME; options given here override the file.
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// A drift gate on a stored score, repeatable: SCORE OP LIMIT with OP <=, <, >= or >, and
    /// LIMIT a number (absolute: 'rmse<=1.25') or a signed percentage of the job's baseline
    /// ('rmse<=+10%': at most 10 % above it; 'r2>=-5%': at most 5 % below it). Lower-is-better
    /// scores (rmse, mae) take <= or <, higher-is-better ones (r2) >= or >, bias absolute
    /// limits either way. The baseline is the job's pinned run (geofold pin), else the median
    /// of its last --baseline-runs successful runs. A breach keeps the results and exits 1.
    #[arg(long, value_name = "GATE")]
    pub gate: Vec<String>,
    /// How many earlier successful runs the median baseline takes (1 to 100).
    #[arg(long, value_name = "N", default_value_t = crate::gates::DEFAULT_BASELINE_RUNS)]
    pub baseline_runs: u32,
    /// Exit 0 at once, writing nothing, when the input fingerprint and the settings match the
    /// job's last successful run.
    #[arg(long)]
    pub skip_unchanged: bool,
}

/// `geofold run`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP, allow_negative_numbers = true)]
pub struct RunArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub source: SourceArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub validation: ValidationArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub output: OutputArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub limits: LimitArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub schedule: ScheduleArgs,
}

impl SourceArgs {
    /// The source these options name.
    ///
    /// # Errors
    /// [`Error::Usage`] when no source is named.
    pub fn source_ref(&self) -> Result<SourceRef, Error> {
        match (&self.table, &self.gpkg) {
            (Some(table), None) => Ok(SourceRef::Postgis {
                db: self.db.clone(),
                table: table.clone(),
            }),
            (None, Some(file)) => Ok(SourceRef::Gpkg {
                file: file.clone(),
                layer: self.layer.clone(),
            }),
            _ => Err(Error::Usage(
                "name a source: --table SCHEMA.TABLE (with --db) or --gpkg FILE".into(),
            )),
        }
    }

    /// The columns these options name, with the spaces users type around names removed.
    ///
    /// # Errors
    /// [`Error::Usage`] when no target is named (a job file may name it instead).
    pub fn columns(&self) -> Result<ColumnSpec, Error> {
        let target = self
            .target
            .as_deref()
            .ok_or_else(|| Error::Usage("name the target: --target COLUMN".into()))?;
        Ok(ColumnSpec {
            id: self.id.as_ref().map(|s| s.trim().to_string()),
            geom: self.geom.as_ref().map(|s| s.trim().to_string()),
            target: target.trim().to_string(),
            features: trimmed(&self.features),
            group: self.group_column.as_ref().map(|s| s.trim().to_string()),
            exposure: self.exposure_column.as_ref().map(|s| s.trim().to_string()),
        })
    }
}

impl RunArgs {
    /// The run specification these options describe.
    ///
    /// # Errors
    /// [`Error::Usage`] when no source is named.
    pub fn spec(&self) -> Result<RunSpec, Error> {
        let source = self.source.source_ref()?;
        let results = match (&self.output.results_gpkg, &source) {
            (Some(file), _) => ResultsRef::Gpkg { file: file.clone() },
            (None, SourceRef::Gpkg { file, .. }) => ResultsRef::Gpkg { file: file.clone() },
            (None, SourceRef::Postgis { db, .. }) => ResultsRef::Postgis {
                db: self.output.results_db.clone().or_else(|| db.clone()),
                schema: self.output.results_schema.clone(),
            },
        };
        if self.output.results_db.is_some() && !matches!(results, ResultsRef::Postgis { .. }) {
            return Err(Error::Usage(
                "--results-db is the connection for PostGIS results; it does not apply to a GeoPackage".into(),
            ));
        }
        let v = &self.validation;
        let mut scheme_options = Options::new();
        if let Some(size) = v.block_size {
            // JSON has no NaN or infinity (serde_json makes them null), so
            // they are refused here, naming the option.
            if !size.is_finite() {
                return Err(Error::Usage(format!(
                    "--block-size must be a finite number of CRS units, got {size}"
                )));
            }
            scheme_options.insert("block-size".into(), serde_json::json!(size));
        }
        if let Some(origin) = &v.grid_origin {
            scheme_options.insert("grid-origin".into(), origin.clone().into());
        }
        if let Some(folds) = v.folds {
            scheme_options.insert("folds".into(), folds.into());
        }
        if let Some(shape) = &v.block_shape {
            scheme_options.insert("block-shape".into(), shape.trim().into());
        }
        if let Some(deal) = &v.deal {
            scheme_options.insert("deal".into(), deal.trim().into());
        }
        if let Some(clusters) = v.clusters {
            scheme_options.insert("clusters".into(), clusters.into());
        }
        if let Some(starts) = v.starts {
            scheme_options.insert("starts".into(), starts.into());
        }
        if let Some(range) = v.match_range {
            scheme_options.insert("match-range".into(), serde_json::json!(range));
        }
        if let Some(share) = v.min_training_share {
            scheme_options.insert("min-training-share".into(), serde_json::json!(share));
        }
        let prediction = match (&v.prediction_table, &v.prediction_layer) {
            (Some(table), _) => Some(PredictionRef::Postgis {
                table: table.trim().to_string(),
                geom: v.prediction_geom.as_ref().map(|g| g.trim().to_string()),
            }),
            (None, Some(layer)) => Some(PredictionRef::Gpkg {
                layer: layer.trim().to_string(),
            }),
            (None, None) => None,
        };
        let mut model_options = Options::new();
        let numbers = [
            ("penalty", v.penalty),
            ("power", v.power),
            ("radius", v.radius),
        ];
        for (name, value) in numbers {
            if let Some(value) = value {
                model_options.insert(name.into(), serde_json::json!(value));
            }
        }
        if let Some(iterations) = v.max_iterations {
            model_options.insert("max-iterations".into(), iterations.into());
        }
        if let Some(neighbours) = v.neighbours {
            model_options.insert("neighbours".into(), neighbours.into());
        }
        if let Some(family) = &v.family {
            model_options.insert("family".into(), family.trim().into());
        }
        let unseen_levels = UnseenPolicy::from_name(v.unseen_levels.trim()).ok_or_else(|| {
            Error::Usage(format!(
                "--unseen-levels {:?}: the policy is error or zero",
                v.unseen_levels
            ))
        })?;
        let model = match (&v.model, v.assign_only) {
            (Some(model), _) => model.trim().to_string(),
            (None, true) => external::NAME.to_string(),
            (None, false) => "ols".to_string(),
        };
        Ok(RunSpec {
            source,
            columns: self.source.columns()?,
            distance_srid: self.source.distance_srid,
            assume_metres: self.source.assume_metres,
            strict: self.source.strict,
            scheme: v.scheme.clone(),
            scheme_options,
            model,
            model_options,
            exclusion_radius: v.exclusion_radius,
            prediction,
            repeats: v.repeats,
            seed: v.seed,
            compare_random: v.also_random,
            results,
            job: self.output.job.clone(),
            limits: Limits {
                lock_timeout_s: self.limits.lock_timeout,
                statement_timeout_s: self.limits.statement_timeout,
                wait_s: self.limits.wait,
            },
            residual_weights: Some(v.residual_weights.clone()),
            gates: crate::gates::parse_all(&self.schedule.gate)?,
            baseline_runs: self.schedule.baseline_runs,
            skip_unchanged: self.schedule.skip_unchanged,
            assign_only: v.assign_only,
            unseen_levels,
        })
    }
}

/// Runs `geofold run` (one run, no job file).
///
/// # Errors
/// Any [`Error`]; its exit code is what the process returns.
pub fn run(args: &RunArgs, progress: &dyn Progress) -> Result<Outcome, Error> {
    crate::pipeline::run_with(&args.spec()?, progress)
}
