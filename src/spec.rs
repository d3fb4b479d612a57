//! The run specification: everything a validation run needs, in one
//! serialisable value that the command line, the demo and job files all
//! build, and that the pipeline takes.
//!
//! [`RunSpec::check`] checks it in full without touching a database or a
//! file, so a bad option never opens a connection for reading, and never
//! leaves a run record behind.

use std::path::PathBuf;
use std::time::Duration;

use serde::{Deserialize, Serialize};

use crate::adapters::sql::check_identifier;
use crate::adapters::{check_job, ColumnSpec};
use crate::core::folds::{build_scheme, FoldScheme};
use crate::core::metrics::Family;
use crate::core::models::design::UnseenPolicy;
use crate::core::models::{build_model, external, Model};
use crate::core::options::Options;
use crate::core::validate::check_repeats;
use crate::error::Error;
use crate::gates::{Gate, DEFAULT_BASELINE_RUNS, MAX_BASELINE_RUNS};

/// Where the units come from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "store", rename_all = "lowercase")]
pub enum SourceRef {
    /// A PostGIS table.
    Postgis {
        /// libpq connection string; None for the PG* environment alone.
        db: Option<String>,
        /// `schema.table`, or `table` on the search path.
        table: String,
    },
    /// A GeoPackage layer.
    Gpkg {
        /// The file.
        file: PathBuf,
        /// The layer; None when the file has one.
        layer: Option<String>,
    },
}

/// Where the results go.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "store", rename_all = "lowercase")]
pub enum ResultsRef {
    /// A PostGIS schema.
    Postgis {
        /// libpq connection string.
        db: Option<String>,
        /// The results schema.
        schema: String,
    },
    /// A GeoPackage file.
    Gpkg {
        /// The file (created when missing).
        file: PathBuf,
    },
}

/// Where the model will be used (prediction locations), for distance
/// matching and the `nearest_distances` table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "store", rename_all = "lowercase")]
pub enum PredictionRef {
    /// A PostGIS table in the source's database.
    Postgis {
        /// `schema.table`, or `table` on the search path.
        table: String,
        /// Its geometry column; None for the table's only one.
        geom: Option<String>,
    },
    /// A layer of the source GeoPackage.
    Gpkg {
        /// The layer.
        layer: String,
    },
}

/// Bounds on every wait of a run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Limits {
    /// Longest wait for a lock held by another session or program, seconds.
    pub lock_timeout_s: f64,
    /// Longest any one database statement may run, seconds.
    pub statement_timeout_s: f64,
    /// Longest wait for another run of the same job to finish, seconds (0:
    /// exit at once as busy).
    pub wait_s: f64,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits {
            lock_timeout_s: DEFAULT_LOCK_TIMEOUT_S,
            statement_timeout_s: DEFAULT_STATEMENT_TIMEOUT_S,
            wait_s: 0.0,
        }
    }
}

/// Default `--lock-timeout`: 30 s.
pub const DEFAULT_LOCK_TIMEOUT_S: f64 = 30.0;
/// Default `--statement-timeout`: 1 h.
pub const DEFAULT_STATEMENT_TIMEOUT_S: f64 = 3600.0;
/// Largest wait any of the limits accepts: 1 day.
pub const MAX_WAIT_S: f64 = 86_400.0;

impl Limits {
    /// `lock_timeout_s` as a duration.
    pub fn lock_timeout(&self) -> Duration {
        Duration::from_secs_f64(self.lock_timeout_s)
    }

    /// `statement_timeout_s` as a duration.
    pub fn statement_timeout(&self) -> Duration {
        Duration::from_secs_f64(self.statement_timeout_s)
    }

    /// `wait_s` as a duration.
    pub fn wait(&self) -> Duration {
        Duration::from_secs_f64(self.wait_s)
    }
}

/// A validation run, fully specified.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunSpec {
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
    /// The fold scheme's name.
    pub scheme: String,
    /// Its options.
    pub scheme_options: Options,
    /// The model family's name.
    pub model: String,
    /// Its options.
    pub model_options: Options,
    /// Exclusion buffer radius in CRS units, for any scheme.
    pub exclusion_radius: Option<f64>,
    /// Prediction locations, points or polygons (their representative
    /// points), in the source's CRS (or transformed by `distance_srid`).
    #[serde(default)]
    pub prediction: Option<PredictionRef>,
    /// Repetitions.
    pub repeats: u32,
    /// Seed of the fold assignment.
    pub seed: u64,
    /// Also run random k-fold on the same rows as a comparison run.
    pub compare_random: bool,
    /// Where the results go.
    pub results: ResultsRef,
    /// The job label; None for the default.
    pub job: Option<String>,
    /// Bounds on waits.
    pub limits: Limits,
    /// Weights of the held-out residuals' Moran's I (`knn:K` or
    /// `band:DISTANCE`); None for [`DEFAULT_RESIDUAL_WEIGHTS`].
    #[serde(default)]
    pub residual_weights: Option<String>,
    /// Drift gates checked after the results are written.
    #[serde(default)]
    pub gates: Vec<Gate>,
    /// How many earlier successful runs the median baseline takes.
    #[serde(default = "default_baseline_runs")]
    pub baseline_runs: u32,
    /// Do nothing when the input and the settings match the job's last
    /// successful run.
    #[serde(default)]
    pub skip_unchanged: bool,
    /// Record the folds only, for a model fitted elsewhere (`geofold score`
    /// loads its predictions later); the model must be `external`.
    #[serde(default)]
    pub assign_only: bool,
    /// What a held-out unit gets whose text feature has a level its fold's
    /// training units never had.
    #[serde(default)]
    pub unseen_levels: UnseenPolicy,
}

fn default_baseline_runs() -> u32 {
    DEFAULT_BASELINE_RUNS
}

/// What checking a specification builds.
pub struct Checked {
    /// The fold scheme.
    pub scheme: Box<dyn FoldScheme>,
    /// The model.
    pub model: Box<dyn Model>,
    /// Weights of the held-out residuals' Moran's I.
    pub residual_weights: WeightsRule,
}

impl RunSpec {
    /// A specification with every setting at its command-line default:
    /// random folds, OLS, one repetition, seed 1, no buffer, no gates. Set
    /// the rest with struct update syntax (`RunSpec { scheme: …, ..RunSpec::new(…) }`).
    pub fn new(source: SourceRef, columns: ColumnSpec, results: ResultsRef) -> RunSpec {
        RunSpec {
            source,
            columns,
            distance_srid: None,
            assume_metres: false,
            strict: false,
            scheme: "random".into(),
            scheme_options: Options::new(),
            model: "ols".into(),
            model_options: Options::new(),
            exclusion_radius: None,
            prediction: None,
            repeats: 1,
            seed: 1,
            compare_random: false,
            results,
            job: None,
            limits: Limits::default(),
            residual_weights: None,
            gates: Vec::new(),
            baseline_runs: DEFAULT_BASELINE_RUNS,
            skip_unchanged: false,
            assign_only: false,
            unseen_levels: UnseenPolicy::default(),
        }
    }

    /// Checks everything that can be checked without reading data: names,
    /// option values and ranges, the scheme's and the model's options.
    ///
    /// # Errors
    /// [`Error::Usage`] naming the option at fault.
    pub fn check(&self) -> Result<Checked, Error> {
        check_columns(&self.columns)?;
        match (&self.source, &self.results) {
            (SourceRef::Postgis { table, .. }, ResultsRef::Postgis { schema, .. }) => {
                let (table_schema, name) = crate::adapters::sql::split_qualified(table);
                if let Some(table_schema) = table_schema {
                    check_identifier("--table (schema)", &table_schema)?;
                }
                check_identifier("--table", &name)?;
                check_results_schema(schema)?;
                for column in self.columns.id.iter().chain(&self.columns.geom) {
                    check_identifier("a column name", column)?;
                }
            }
            (SourceRef::Postgis { table, .. }, ResultsRef::Gpkg { file }) => {
                return Err(Error::Usage(format!(
                    "--results-gpkg needs a GeoPackage source (its per-unit layer copies the source geometries); \
                     for {table} write the results to PostGIS (--results-schema) and copy them with \
                     geofold export --job JOB --to {}",
                    file.display()
                )));
            }
            (SourceRef::Gpkg { .. }, ResultsRef::Postgis { .. }) => {
                return Err(Error::Usage(
                    "a GeoPackage source writes its results into a GeoPackage (its own file, or --results-gpkg)".into(),
                ));
            }
            (SourceRef::Gpkg { .. }, ResultsRef::Gpkg { .. }) => {
                if self.distance_srid.is_some() {
                    return Err(Error::Usage(
                        "--distance-srid needs PostGIS to transform; for a GeoPackage, reproject the file first \
                         (for example ogr2ogr -t_srs EPSG:N out.gpkg in.gpkg)"
                            .into(),
                    ));
                }
            }
        }
        if let Some(srid) = self.distance_srid {
            if srid <= 0 {
                return Err(Error::Usage(format!(
                    "--distance-srid must be a positive SRID, got {srid}"
                )));
            }
        }
        if let Some(job) = &self.job {
            check_job(job)?;
        }
        check_repeats(self.repeats)?;
        if let Some(radius) = self.exclusion_radius {
            if !(radius.is_finite() && radius > 0.0 && radius <= 1e12) {
                return Err(Error::Usage(format!(
                    "--exclusion-radius must be a positive number of CRS units up to 1e12, got {radius}"
                )));
            }
        }
        for (option, value) in [
            ("--lock-timeout", self.limits.lock_timeout_s),
            ("--statement-timeout", self.limits.statement_timeout_s),
        ] {
            if !(value.is_finite() && value > 0.0 && value <= MAX_WAIT_S) {
                return Err(Error::Usage(format!(
                    "{option} must be a number of seconds above 0 and up to {MAX_WAIT_S}, got {value}"
                )));
            }
        }
        if !(self.limits.wait_s.is_finite() && (0.0..=MAX_WAIT_S).contains(&self.limits.wait_s)) {
            return Err(Error::Usage(format!(
                "--wait must be a number of seconds from 0 to {MAX_WAIT_S}, got {}",
                self.limits.wait_s
            )));
        }
        match (&self.prediction, &self.source) {
            (Some(PredictionRef::Postgis { table, geom }), SourceRef::Postgis { .. }) => {
                let (table_schema, name) = crate::adapters::sql::split_qualified(table);
                if let Some(table_schema) = table_schema {
                    check_identifier("--prediction-table (schema)", &table_schema)?;
                }
                check_identifier("--prediction-table", &name)?;
                if let Some(geom) = geom {
                    check_identifier("--prediction-geom", geom)?;
                }
            }
            (Some(PredictionRef::Gpkg { layer }), SourceRef::Gpkg { .. }) => {
                if layer.trim().is_empty() {
                    return Err(Error::Usage("--prediction-layer must name a layer".into()));
                }
            }
            (Some(PredictionRef::Postgis { .. }), SourceRef::Gpkg { .. }) => {
                return Err(Error::Usage(
                    "--prediction-table reads from PostGIS; for a GeoPackage source name a layer of the same file \
                     with --prediction-layer"
                        .into(),
                ));
            }
            (Some(PredictionRef::Gpkg { .. }), SourceRef::Postgis { .. }) => {
                return Err(Error::Usage(
                    "--prediction-layer reads a layer of the source GeoPackage; for a PostGIS source name a table \
                     with --prediction-table SCHEMA.TABLE"
                        .into(),
                ));
            }
            (None, _) => {}
        }
        if !(1..=MAX_BASELINE_RUNS).contains(&self.baseline_runs) {
            return Err(Error::Usage(format!(
                "--baseline-runs must be from 1 to {MAX_BASELINE_RUNS}, got {}",
                self.baseline_runs
            )));
        }
        let residual_weights = match &self.residual_weights {
            Some(text) => WeightsRule::parse(text)?,
            None => DEFAULT_RESIDUAL_WEIGHTS,
        };
        residual_weights.for_points()?;
        let scheme = build_scheme(&self.scheme, &self.scheme_options)?;
        let needs = scheme.requirements();
        if needs.prediction_points && self.prediction.is_none() {
            return Err(Error::Usage(format!(
                "--scheme {} matches cross-validation to where the model will be used: name those places with \
                 --prediction-table SCHEMA.TABLE (PostGIS) or --prediction-layer NAME (a layer of the source \
                 GeoPackage), points or polygons",
                self.scheme
            )));
        }
        if needs.groups && self.columns.group.is_none() {
            return Err(Error::Usage(format!(
                "--scheme {} needs --group-column COL: an integer or text column (e.g. a district code) whose \
                 groups are kept whole",
                self.scheme
            )));
        }
        let model = build_model(&self.model, &self.model_options)?;
        if let Some(exposure) = &self.columns.exposure {
            if model.family() != Family::Count {
                return Err(Error::Usage(format!(
                    "--exposure-column {exposure} is for count models (--model poisson, or --family count); \
                     --model {} predicts a {} target",
                    model.name(),
                    model.family().name()
                )));
            }
        }
        match (self.assign_only, model.name() == external::NAME) {
            (true, false) => {
                return Err(Error::Usage(format!(
                    "--assign-only records folds for a model fitted outside geofold: leave out --model {} \
                     (the run is recorded with model external) and give --family regression|binary|count",
                    model.name()
                )))
            }
            (false, true) => {
                return Err(Error::Usage(
                    "--model external is fitted outside geofold: record its folds with --assign-only, \
                     then load its held-out predictions with geofold score"
                        .into(),
                ))
            }
            _ => {}
        }
        for gate in &self.gates {
            gate.check(model.family())?;
        }
        Ok(Checked {
            scheme,
            model,
            residual_weights,
        })
    }

    /// A SHA-256 of every setting that shapes the results from the rows read
    /// (columns, scheme, model and their options, exclusion radius,
    /// repetitions, seed, distance SRID, row rules), but not where the rows
    /// come from or the results go, the connection, the job label, waits or
    /// gates: two runs with the same hash and the same input fingerprint
    /// give the same results, and the same settings on PostGIS and on a
    /// GeoPackage copy hash alike.
    pub fn settings_hash(&self) -> String {
        use sha2::{Digest, Sha256};
        let mut value = serde_json::to_value(self).unwrap_or_default();
        if let Some(map) = value.as_object_mut() {
            for key in [
                "source",
                "results",
                "job",
                "limits",
                "gates",
                "baseline_runs",
                "skip_unchanged",
            ] {
                map.remove(key);
            }
        }
        let digest = Sha256::digest(value.to_string().as_bytes());
        digest.iter().map(|byte| format!("{byte:02x}")).collect()
    }
}

/// Spatial weights as named on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum WeightsRule {
    /// Shared boundary point.
    Queen,
    /// Shared boundary edge.
    Rook,
    /// The k nearest units.
    Nearest(usize),
    /// Every unit within a distance.
    Band(f64),
}

impl WeightsRule {
    /// Parses `queen`, `rook`, `knn:K` or `band:DISTANCE`.
    ///
    /// # Errors
    /// [`Error::Usage`] for anything else.
    pub fn parse(text: &str) -> Result<WeightsRule, Error> {
        let bad = || {
            Error::Usage(format!(
                "weights {text:?}: use queen, rook, knn:K (K from 1 to 1000) or band:DISTANCE (CRS units)"
            ))
        };
        match text.trim() {
            "queen" => Ok(WeightsRule::Queen),
            "rook" => Ok(WeightsRule::Rook),
            other => match other.split_once(':') {
                Some(("knn", k)) => match k.parse::<usize>() {
                    Ok(k) if (1..=1000).contains(&k) => Ok(WeightsRule::Nearest(k)),
                    _ => Err(bad()),
                },
                Some(("band", d)) => match d.parse::<f64>() {
                    Ok(d) if d.is_finite() && d > 0.0 => Ok(WeightsRule::Band(d)),
                    _ => Err(bad()),
                },
                _ => Err(bad()),
            },
        }
    }

    /// The name stored with the figures (`queen`, `knn:8`, `band:2500`).
    pub fn name(&self) -> String {
        match self {
            WeightsRule::Queen => "queen".into(),
            WeightsRule::Rook => "rook".into(),
            WeightsRule::Nearest(k) => format!("knn:{k}"),
            WeightsRule::Band(d) => format!("band:{d}"),
        }
    }
}

impl WeightsRule {
    /// The rule as weights between points, for the held-out residuals of a
    /// run (no polygons at hand there).
    ///
    /// # Errors
    /// [`Error::Usage`] for queen and rook.
    pub fn for_points(&self) -> Result<crate::core::diagnostics::held_out::PointRule, Error> {
        use crate::core::diagnostics::held_out::PointRule;
        match *self {
            WeightsRule::Nearest(k) => Ok(PointRule::Nearest(k)),
            WeightsRule::Band(d) => Ok(PointRule::Band(d)),
            WeightsRule::Queen | WeightsRule::Rook => Err(Error::Usage(format!(
                "--residual-weights {}: a run weighs its held-out residuals between unit locations; use knn:K or band:DISTANCE",
                self.name()
            ))),
        }
    }
}

/// The weights of a run's held-out residual Moran's I when the job names none.
pub const DEFAULT_RESIDUAL_WEIGHTS: WeightsRule = WeightsRule::Nearest(8);

/// Checks the target and feature names: none empty, no feature twice, the
/// target not among the features.
fn check_columns(columns: &ColumnSpec) -> Result<(), Error> {
    if columns.target.trim().is_empty() {
        return Err(Error::Usage("--target must name a column".into()));
    }
    if columns.features.is_empty() {
        return Err(Error::Usage(
            "--features must name at least one column".into(),
        ));
    }
    let mut seen: Vec<String> = Vec::new();
    for feature in &columns.features {
        if feature.trim().is_empty() {
            return Err(Error::Usage(
                "--features has an empty entry (two commas in a row, or a trailing comma)".into(),
            ));
        }
        if seen.iter().any(|s| s.eq_ignore_ascii_case(feature)) {
            return Err(Error::Usage(format!("--features names {feature} twice")));
        }
        if feature.eq_ignore_ascii_case(&columns.target) {
            return Err(Error::Usage(format!(
                "{feature} is both the --target and one of the --features; a model cannot use what it predicts"
            )));
        }
        seen.push(feature.clone());
    }
    Ok(())
}

/// Checks a results schema name: a PostgreSQL identifier that is not
/// reserved for the system (`pg_…`).
fn check_results_schema(schema: &str) -> Result<(), Error> {
    check_identifier("--results-schema", schema)?;
    if schema.starts_with("pg_") {
        return Err(Error::Usage(format!(
            "--results-schema {schema:?}: names starting with pg_ are reserved for PostgreSQL's system schemas"
        )));
    }
    Ok(())
}

/// Trims the spaces around each name a user typed in a list.
pub fn trimmed(names: &[String]) -> Vec<String> {
    names.iter().map(|name| name.trim().to_string()).collect()
}

#[cfg(test)]
mod tests;
