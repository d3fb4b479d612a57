//! `geofold export`: PostGIS results into a GeoPackage (being built).

use crate::cli::export::ExportArgs;
use crate::error::Error;

/// Exports a run.
///
/// # Errors
/// Always, for now.
pub fn export(_args: &ExportArgs) -> Result<serde_json::Value, Error> {
    Err(Error::Internal("export is not built yet".into()))
}
