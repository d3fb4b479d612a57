//! geofold: spatial cross-validation of predictive models, read from and written
//! back to PostGIS or GeoPackage.
//!
//! - [`core`]: pure units, folds, models, metrics.
//! - [`adapters`]: PostGIS and GeoPackage readers and result stores.
//! - [`cli`]: one module per subcommand.

pub mod adapters;
pub mod cli;
pub mod core;
pub mod demo;
pub mod error;
pub mod render;
pub mod report;
