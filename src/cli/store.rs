//! Where `history`, `compare`, `pin` and `prune` find the runs: a PostGIS
//! results schema, a GeoPackage, or the store a job file's job writes to.

use std::path::PathBuf;

use clap::Args;

use crate::adapters::history::Store;
use crate::error::{Error, FileProblem};
use crate::jobs::{JobFile, Overrides};
use crate::spec::{Limits, ResultsRef};

/// The results store to read.
#[derive(Debug, Clone, Args)]
pub struct StoreArgs {
    /// PostgreSQL connection of the results schema (libpq URI or key=value; the service file
    /// and PG* variables fill the rest).
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// PostGIS results schema.
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// A GeoPackage holding results, instead of PostGIS (--gpkg is the same: for reading, the
    /// file is the results store).
    #[arg(
        long,
        value_name = "FILE",
        conflicts_with = "db",
        visible_alias = "gpkg"
    )]
    pub results_gpkg: Option<PathBuf>,
    /// Use the results store of this job file's jobs (of --job when given; the jobs must share
    /// one store otherwise).
    #[arg(long, value_name = "FILE", conflicts_with_all = ["db", "results_gpkg"])]
    pub config: Option<PathBuf>,
}

impl StoreArgs {
    /// The store named, with its bounds on waits (a job file's, or the defaults).
    ///
    /// # Errors
    /// A job file's errors; jobs that write to several stores with no `--job`.
    pub fn results(&self, job: Option<&str>) -> Result<(ResultsRef, Limits), Error> {
        let Some(path) = &self.config else {
            let results = match &self.results_gpkg {
                Some(file) => ResultsRef::Gpkg { file: file.clone() },
                None => ResultsRef::Postgis {
                    db: self.db.clone(),
                    schema: self.results_schema.clone(),
                },
            };
            return Ok((results, Limits::default()));
        };
        let file = JobFile::load(path)?;
        let jobs = match job {
            Some(name) => vec![file.job(name)?],
            None => file.jobs.iter().collect(),
        };
        let mut stores: Vec<(ResultsRef, Limits)> = Vec::new();
        for job in jobs {
            let spec = file.spec(job, &Overrides::default())?;
            if !stores.iter().any(|(results, _)| *results == spec.results) {
                stores.push((spec.results, spec.limits));
            }
        }
        match stores.len() {
            1 => Ok(stores.remove(0)),
            n => Err(Error::Usage(format!(
                "the jobs of {} write to {n} results stores; name one job with --job",
                path.display()
            ))),
        }
    }

    /// Opens the store named, for reading its history.
    ///
    /// # Errors
    /// Connection errors; a GeoPackage that does not exist (66).
    pub fn open(&self, job: Option<&str>) -> Result<Box<dyn Store>, Error> {
        let (results, limits) = self.results(job)?;
        if let ResultsRef::Gpkg { file } = &results {
            if !file.exists() {
                return Err(Error::File {
                    path: file.display().to_string(),
                    problem: "no such results file: no run has written to it yet".into(),
                    kind: FileProblem::Missing,
                });
            }
        }
        crate::pipeline::open_store(&results, &limits)
    }
}

/// Parses a run id.
///
/// # Errors
/// [`Error::Usage`] for text that is not a UUID.
pub fn run_id(text: &str) -> Result<uuid::Uuid, Error> {
    uuid::Uuid::parse_str(text.trim()).map_err(|_| {
        Error::Usage(format!(
            "{text:?} is not a run id (a UUID, as geofold history lists)"
        ))
    })
}

/// A number for tables: 4 significant decimals, or scientific when tiny or huge.
pub fn number(value: Option<f64>) -> String {
    match value {
        Some(v) if v.is_finite() => {
            let magnitude = v.abs();
            if magnitude != 0.0 && !(1e-3..1e6).contains(&magnitude) {
                format!("{v:.3e}")
            } else {
                format!("{v:.4}")
            }
        }
        _ => "-".into(),
    }
}
