//! One map as a standalone SVG document: the fold layout, one fold's split, the
//! absolute error or the residual, with legend, scale bar, north arrow and a
//! caption naming the CRS and how the map was drawn.
//!
//! Each layer's classes are drawn as one path per class (see `shapes.rs` for the
//! simplification and fill rules). A layer that would still need more than
//! [`VECTOR_VERTEX_LIMIT`] vertices is rasterised into an embedded PNG instead
//! (`raster.rs`); the caption says which was done. Classes are drawn in order of
//! importance, the most important last (largest errors, residuals farthest from
//! zero, test units), so that where units overlap or share a pixel, that shows.
//!
//! The output is a pure function of the input and options: no clock, no random
//! ids, no environment.

use std::collections::BTreeMap;
use std::fmt::Write as _;

use base64::Engine as _;
use geo::{Area, BoundingRect, CoordsIter, InteriorPoint};
use geo_types::Geometry;

use super::classify::{quantile_classes, symmetric_classes, Classes};
use super::error::RenderError;
use super::frame::{MapFrame, CAPTION_HEIGHT, LEGEND_WIDTH, MARGIN, TITLE_HEIGHT};
use super::input::{MapInput, MapKind, MapOptions, MapUnit};
use super::legend::{Legend, LegendEntry};
use super::palette::{
    diverging, fold_style, sequential, Overlay, BACKGROUND, INK, MAX_DIVERGING_SIDE,
    MAX_SEQUENTIAL_CLASSES, NO_VALUE, SPLIT_EXCLUDED_HATCH, SPLIT_TEST, SPLIT_TRAINING,
};
use super::raster::{rasterise, VECTOR_VERTEX_LIMIT};
use super::shapes::ShapeGroup;
use super::style::{Fill, Stroke, Style};
use super::text::{count, escape, fixed};

mod layers;
mod write;
use layers::*;
use write::*;

/// Unit outlines are drawn on the fold layout only when units average at least
/// this many pixels across; smaller, they would only grey the map.
const OUTLINE_MIN_PIXELS: f64 = 6.0;

/// Fold numbers are written on a region whose largest part is at least this
/// many pixels wide and tall.
const LABEL_MIN_PIXELS: f64 = 24.0;

/// One class of a layer, ready to draw and to list in the legend.
struct Class {
    group: ShapeGroup,
    style: Style,
    label: String,
    units: u64,
}

/// A stack of classes drawn together (vector or raster as one).
struct Layer {
    /// Drawing order: first drawn first.
    classes: Vec<Class>,
    /// Whether the layer appears in the legend.
    in_legend: bool,
}

/// Draws one map as an SVG document.
///
/// # Errors
/// [`RenderError::Input`] listing every non-finite coordinate or bad option,
/// [`RenderError::NoSuchFold`] for a split of a fold no unit has,
/// [`RenderError::Size`] for a map size out of range, and [`RenderError::Png`]
/// if a dense layer cannot be rasterised.
pub fn render_map_svg(
    input: &MapInput,
    kind: MapKind,
    options: &MapOptions,
) -> Result<String, RenderError> {
    let frame = map_frame(input, options)?;
    let (layers, legend, labels) = match kind {
        MapKind::Folds => fold_layers(input, &frame),
        MapKind::Split { fold } => split_layers(input, &frame, fold)?,
        MapKind::Error => error_layers(input, &frame, options),
        MapKind::Residual => residual_layers(input, &frame, options),
    };
    write_document(input, kind, options, &frame, layers, &legend, &labels)
}

/// The frame a map of `input` is drawn in: its data-to-pixel transform and scale.
///
/// # Errors
/// As [`render_map_svg`], for the checks of the input and the size.
pub fn map_frame(input: &MapInput, options: &MapOptions) -> Result<MapFrame, RenderError> {
    check_input(input, options)?;
    let mut bounds = [
        f64::INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::NEG_INFINITY,
    ];
    let mut extend = |geometry: &Geometry<f64>| {
        if let Some(rect) = geometry.bounding_rect() {
            bounds[0] = bounds[0].min(rect.min().x);
            bounds[1] = bounds[1].min(rect.min().y);
            bounds[2] = bounds[2].max(rect.max().x);
            bounds[3] = bounds[3].max(rect.max().y);
        }
    };
    for unit in &input.units {
        extend(&unit.geometry);
    }
    for region in &input.regions {
        extend(&Geometry::MultiPolygon(region.geometry.clone()));
    }
    MapFrame::fit(bounds, &input.crs, options)
}

/// Every problem with the input, or `Ok`.
fn check_input(input: &MapInput, options: &MapOptions) -> Result<(), RenderError> {
    const MAX_LISTED: usize = 20;
    let mut problems = Vec::new();
    let mut bad_units = 0usize;
    for (index, unit) in input.units.iter().enumerate() {
        if let Some(bad) = unit
            .geometry
            .coords_iter()
            .find(|c| !c.x.is_finite() || !c.y.is_finite())
        {
            bad_units += 1;
            if problems.len() < MAX_LISTED {
                problems.push(format!(
                    "unit {index}: coordinate ({}, {}) is not finite",
                    bad.x, bad.y
                ));
            }
        }
    }
    if bad_units > MAX_LISTED {
        problems.push(format!(
            "and {} more units with non-finite coordinates",
            bad_units - MAX_LISTED
        ));
    }
    for (index, region) in input.regions.iter().enumerate() {
        if region.fold == 0 {
            problems.push(format!(
                "region {index}: fold 0 (folds are numbered from 1)"
            ));
        }
        if region
            .geometry
            .coords_iter()
            .any(|c| !c.x.is_finite() || !c.y.is_finite())
        {
            problems.push(format!(
                "region {index} (fold {}): a coordinate is not finite",
                region.fold
            ));
        }
    }
    if input.units.is_empty() && input.regions.is_empty() {
        problems.push("no units and no fold regions".to_string());
    }
    if !(1..=MAX_SEQUENTIAL_CLASSES).contains(&options.error_classes) {
        problems.push(format!(
            "error_classes {} is not within 1 to {MAX_SEQUENTIAL_CLASSES}",
            options.error_classes
        ));
    }
    if !(1..=MAX_DIVERGING_SIDE).contains(&options.residual_classes_per_side) {
        problems.push(format!(
            "residual_classes_per_side {} is not within 1 to {MAX_DIVERGING_SIDE}",
            options.residual_classes_per_side
        ));
    }
    if options.id_prefix.is_empty()
        || !options
            .id_prefix
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-')
        || !options
            .id_prefix
            .starts_with(|c: char| c.is_ascii_alphabetic())
    {
        problems.push(format!(
            "id_prefix {:?} must start with a letter and hold only letters, digits and '-'",
            options.id_prefix
        ));
    }
    if problems.is_empty() {
        Ok(())
    } else {
        Err(RenderError::Input {
            what: "map".to_string(),
            problems,
        })
    }
}

fn solid(colour: super::colour::Rgb8) -> Style {
    Style {
        fill: Fill::Solid(colour),
        stroke: None,
    }
}

fn plural(n: u64) -> String {
    format!("{} unit{}", count(n), if n == 1 { "" } else { "s" })
}

type Built = (Vec<Layer>, Legend, Vec<(f64, f64, String)>);

#[cfg(test)]
mod tests;
