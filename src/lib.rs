//! geofold: spatial cross-validation of predictive models, read from and written
//! back to PostGIS or GeoPackage.
//!
//! - [`core`]: pure units, folds, models, metrics.
//! - [`spec`]: the run specification; [`pipeline`]: the one pipeline that runs it;
//!   [`scoring`]: `geofold score`, the predictions of a model fitted elsewhere.
//! - [`results`]: one definition of every results table.
//! - [`inspect`]: spatial diagnostics of a layer, stored beside the runs.
//! - [`adapters`]: PostGIS and GeoPackage readers and result stores.
//! - [`report`]: the summary, as text and JSON; [`render`]: maps and the HTML report;
//!   [`readback`]: a stored run read back and turned into what `render` draws.
//! - [`jobs`]: job files (TOML of named jobs); [`gates`]: drift gates and baselines.
//! - [`progress`]: the pipeline's progress hook and its terminal bars.
//! - [`cli`]: one module per subcommand.
//! - [`demo`]: the invented demo scenario and its writers.

pub mod adapters;
pub mod cli;
pub mod core;
pub mod demo;
pub mod error;
pub mod gates;
pub mod inspect;
pub mod jobs;
pub mod pipeline;
pub mod progress;
pub mod readback;
pub mod render;
pub mod report;
pub mod results;
pub mod scoring;
pub mod spec;
