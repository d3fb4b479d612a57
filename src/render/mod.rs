//! Maps (SVG and PNG) and a self-contained HTML report, drawn from plain
//! in-memory data.
//!
//! The library is pure: no database, no files, no clock. Functions take input
//! values and return `String` (SVG, HTML) or `Vec<u8>` (PNG); the caller writes
//! them. The same input always gives the same bytes, so a run read from
//! PostGIS and the same run read from a GeoPackage draw identically.
//!
//! - [`input`]: what a map is drawn from ([`MapInput`], [`MapKind`], [`MapOptions`]).
//! - [`map`]: [`render_map_svg`], one map as a standalone SVG.
//! - [`png`]: [`svg_to_png`], SVG to PNG in Rust with an embedded font.
//! - [`palette`]: geofold's own colours, checked for colour-vision deficiencies.
//! - [`classify`]: quantile and zero-centred classes with rounded breaks.
//! - [`frame`]: projection, data-to-pixel transform, scale bar, north arrow.
//! - [`shapes`]: geometry in pixels, simplified to the output resolution.
//! - [`raster`]: dense layers as an embedded PNG.
//! - [`style`], [`legend`]: how classes are painted and listed.
//! - [`chart`]: small SVG charts for the report.
//! - [`colour`]: sRGB, OKLab, CIELAB and CIEDE2000.
//! - [`text`]: escaping and number formatting.
//! - [`fixtures`]: invented map data for tests, examples and benchmarks.
//! - [`error`]: the error type, [`RenderError`].

pub mod chart;
pub mod classify;
pub mod colour;
#[cfg(test)]
mod cvd;
pub mod error;
pub mod fixtures;
pub mod frame;
pub mod input;
pub mod legend;
pub mod map;
pub mod palette;
pub mod png;
pub mod raster;
pub mod report;
pub mod shapes;
pub mod style;
pub mod text;

pub use error::RenderError;
pub use input::{CrsInfo, FoldRegion, MapInput, MapKind, MapOptions, MapUnit};
pub use map::{map_frame, render_map_svg};
pub use png::svg_to_png;
