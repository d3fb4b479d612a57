//! `geofold export`: copy one run's results from PostGIS into a GeoPackage.

use std::path::PathBuf;

use clap::Args;

use crate::error::Error;

/// `geofold export`.
#[derive(Debug, Clone, Args)]
pub struct ExportArgs {
    /// PostgreSQL connection (libpq URI or key=value; PG* variables fill the rest).
    #[arg(long, value_name = "CONNECTION")]
    pub db: Option<String>,
    /// PostGIS results schema to read.
    #[arg(long, default_value = "geofold", value_name = "SCHEMA")]
    pub results_schema: String,
    /// The run to export.
    #[arg(
        long,
        value_name = "RUN_ID",
        conflicts_with = "job",
        required_unless_present = "job"
    )]
    pub run: Option<String>,
    /// Export the latest successful run of this job.
    #[arg(long, value_name = "NAME")]
    pub job: Option<String>,
    /// GeoPackage to write (created when missing; earlier runs in it are kept).
    #[arg(long, value_name = "OUT.gpkg")]
    pub to: PathBuf,
    /// Print the outcome as JSON.
    #[arg(long)]
    pub json: bool,
}

/// Runs `geofold export`.
///
/// # Errors
/// Any [`Error`].
pub fn run(args: &ExportArgs) -> Result<serde_json::Value, Error> {
    crate::adapters::gpkg::export::export(args)
}
