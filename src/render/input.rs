//! What a map is drawn from: plain in-memory data, filled by the caller from a
//! stored run (or by a test from invented shapes).
//!
//! Nothing here knows about databases. One [`MapInput`] holds everything the four
//! map layers need, so one value serves the fold layout, any fold's split, the
//! error map and the residual map.

use geo_types::{Geometry, MultiPolygon};

/// Facts about the coordinate reference system of the geometries.
#[derive(Debug, Clone, PartialEq)]
pub struct CrsInfo {
    /// EPSG code (or the store's SRID), shown in the map caption.
    pub srid: i32,
    /// Name of the CRS, e.g. "ETRS89 / UTM zone 32N".
    pub name: String,
    /// True for longitude/latitude in degrees (x = longitude, y = latitude).
    pub geographic: bool,
    /// Name of the coordinate unit, e.g. "metre", "US survey foot", "degree".
    pub units_name: String,
    /// Metres per coordinate unit of a projected CRS (1 for metres, 0.3048 for the
    /// international foot). Ignored when `geographic`.
    pub metres_per_unit: f64,
    /// For a geographic CRS, the standard parallel of the drawing projection in
    /// degrees; `None` uses the latitude at the middle of the data. Ignored for a
    /// projected CRS.
    pub centre_latitude: Option<f64>,
}

impl CrsInfo {
    /// A projected CRS in metres.
    pub fn projected_metres(srid: i32, name: &str) -> CrsInfo {
        CrsInfo {
            srid,
            name: name.to_string(),
            geographic: false,
            units_name: "metre".to_string(),
            metres_per_unit: 1.0,
            centre_latitude: None,
        }
    }

    /// A geographic CRS in degrees, drawn with the standard parallel at the data's middle.
    pub fn geographic_degrees(srid: i32, name: &str) -> CrsInfo {
        CrsInfo {
            srid,
            name: name.to_string(),
            geographic: true,
            units_name: "degree".to_string(),
            metres_per_unit: 1.0,
            centre_latitude: None,
        }
    }
}

/// One unit (district, catchment, site) with what the layers show of it.
#[derive(Debug, Clone, PartialEq)]
pub struct MapUnit {
    /// Its shape: polygons (with holes), multipolygons, points (drawn as small
    /// circles) and lines are drawn; a collection draws each member.
    pub geometry: Geometry<f64>,
    /// The fold (numbered from 1) in which the unit was held out for testing, in
    /// the repetition drawn; `None` when it has none.
    pub fold: Option<u32>,
    /// Folds whose training set left this unit out (for example a buffer around
    /// the test units) although it is not tested in them.
    pub excluded_from: Vec<u32>,
    /// Absolute held-out error, in the target's unit.
    pub abs_error: Option<f64>,
    /// Held-out residual, observed minus predicted, in the target's unit.
    pub residual: Option<f64>,
}

/// The region of one fold: where its test units were drawn from (for example
/// the fold's blocks), as one multipolygon.
#[derive(Debug, Clone, PartialEq)]
pub struct FoldRegion {
    /// Fold number, from 1.
    pub fold: u32,
    /// Its area, in the CRS of the units.
    pub geometry: MultiPolygon<f64>,
}

/// Everything a map of one run is drawn from.
#[derive(Debug, Clone, PartialEq)]
pub struct MapInput {
    /// A short title naming the run, e.g. "nitrate, job basin-weekly, run 7f3a…".
    pub title: String,
    /// The CRS of every geometry below.
    pub crs: CrsInfo,
    /// Name of the target variable, e.g. "nitrate".
    pub target: String,
    /// Unit of the target, e.g. "mg/L"; empty when it has none.
    pub target_unit: String,
    /// The units used in the run.
    pub units: Vec<MapUnit>,
    /// Fold regions; empty when the scheme has none (random folds).
    pub regions: Vec<FoldRegion>,
}

/// Which map to draw.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MapKind {
    /// Fold layout: regions coloured by fold, units outlined thinly (or units
    /// coloured by fold when there are no regions).
    Folds,
    /// One fold's split: its test, training and excluded units.
    Split {
        /// The fold, numbered from 1.
        fold: u32,
    },
    /// Absolute error per unit on a sequential scale.
    Error,
    /// Residual per unit on a diverging scale centred on zero.
    Residual,
}

impl MapKind {
    /// A short name for file names and element ids: `folds`, `split-3`, `error`, `residual`.
    pub fn slug(self) -> String {
        match self {
            MapKind::Folds => "folds".to_string(),
            MapKind::Split { fold } => format!("split-{fold}"),
            MapKind::Error => "error".to_string(),
            MapKind::Residual => "residual".to_string(),
        }
    }
}

/// How a map is laid out.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MapOptions {
    /// Width of the whole SVG in CSS pixels (map, legend beside it), 400–4000.
    pub width: u32,
    /// Height of the whole SVG in CSS pixels, 300–4000.
    pub height: u32,
    /// Classes of the absolute-error map, 1–7 (fewer when breaks coincide).
    pub error_classes: usize,
    /// Classes on each side of zero in the residual map, 1–4.
    pub residual_classes_per_side: usize,
    /// Prefix for the ids of patterns and clip paths, so several maps can share
    /// one HTML page; letters, digits and `-` only.
    pub id_prefix: String,
}

impl Default for MapOptions {
    fn default() -> MapOptions {
        MapOptions {
            width: 960,
            height: 640,
            error_classes: 5,
            residual_classes_per_side: 3,
            id_prefix: "gf".to_string(),
        }
    }
}
