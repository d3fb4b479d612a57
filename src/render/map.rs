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

fn fold_fill(fold: u32) -> Fill {
    let (colour, overlay) = fold_style(fold);
    Fill::Hatched {
        base: colour,
        ink: INK,
        overlay,
    }
}

fn fold_layers(input: &MapInput, frame: &MapFrame) -> Built {
    let mut unit_counts: BTreeMap<u32, u64> = BTreeMap::new();
    let mut unassigned = 0u64;
    for unit in &input.units {
        match unit.fold {
            Some(fold) => *unit_counts.entry(fold).or_default() += 1,
            None => unassigned += 1,
        }
    }
    let mut layers = Vec::new();
    let mut labels = Vec::new();
    let mut notes = Vec::new();
    let region_stroke = Stroke {
        colour: INK,
        width: 0.8,
        dashed: false,
        opacity: 0.9,
    };
    if input.regions.is_empty() {
        let mut groups: BTreeMap<u32, ShapeGroup> = BTreeMap::new();
        let mut no_fold = ShapeGroup::default();
        for unit in &input.units {
            match unit.fold {
                Some(fold) => groups.entry(fold).or_default().add(&unit.geometry, frame),
                None => no_fold.add(&unit.geometry, frame),
            }
        }
        let mut classes: Vec<Class> = groups
            .into_iter()
            .map(|(fold, group)| Class {
                group,
                style: Style {
                    fill: fold_fill(fold),
                    stroke: None,
                },
                label: format!("Fold {fold}"),
                units: unit_counts.get(&fold).copied().unwrap_or(0),
            })
            .collect();
        if unassigned > 0 {
            classes.insert(0, no_value_class(no_fold, "No fold", unassigned));
        }
        layers.push(Layer {
            classes,
            in_legend: true,
        });
        notes.push(
            "Units are coloured by the fold that tests them; this scheme has no fold regions."
                .to_string(),
        );
    } else {
        let mut groups: BTreeMap<u32, ShapeGroup> = BTreeMap::new();
        for region in &input.regions {
            let group = groups.entry(region.fold).or_default();
            for polygon in &region.geometry {
                group.add_polygon(polygon, frame);
            }
            if let Some(label) = region_label(region, frame) {
                labels.push(label);
            }
        }
        let classes = groups
            .into_iter()
            .map(|(fold, group)| Class {
                group,
                style: Style {
                    fill: fold_fill(fold),
                    stroke: Some(region_stroke),
                },
                label: format!("Fold {fold}"),
                units: unit_counts.get(&fold).copied().unwrap_or(0),
            })
            .collect();
        layers.push(Layer {
            classes,
            in_legend: true,
        });
        let mut outlines = ShapeGroup::default();
        let mean_size = mean_unit_pixels(&input.units, frame);
        if mean_size >= OUTLINE_MIN_PIXELS {
            for unit in &input.units {
                outlines.add(&unit.geometry, frame);
            }
        }
        if outlines.is_empty() || outlines.vertex_count() > VECTOR_VERTEX_LIMIT {
            notes.push(format!(
                "Regions are coloured by fold. Unit outlines are left out: units average {} px across.",
                fixed(mean_size, 1)
            ));
        } else {
            notes.push("Regions are coloured by fold; thin lines outline the units.".to_string());
            layers.push(Layer {
                classes: vec![Class {
                    group: outlines,
                    style: Style {
                        fill: Fill::None,
                        stroke: Some(Stroke {
                            colour: INK,
                            width: 0.4,
                            dashed: false,
                            opacity: 0.45,
                        }),
                    },
                    label: String::new(),
                    units: 0,
                }],
                in_legend: false,
            });
        }
    }
    notes.push(
        "Colours repeat after 12 folds: folds 13\u{2013}24 add a hatch, 25 and up a cross-hatch."
            .to_string(),
    );
    let legend = Legend {
        title: "Fold".to_string(),
        entries: Vec::new(),
        notes,
    };
    (layers, legend, labels)
}

/// Fold number position: the interior point of the region's largest polygon, if
/// that polygon is large enough on the map to hold the label.
fn region_label(region: &super::input::FoldRegion, frame: &MapFrame) -> Option<(f64, f64, String)> {
    let largest = region
        .geometry
        .iter()
        .max_by(|a, b| a.unsigned_area().total_cmp(&b.unsigned_area()))?;
    let rect = largest.bounding_rect()?;
    if rect.width() * frame.cos_standard_parallel * frame.scale < LABEL_MIN_PIXELS
        || rect.height() * frame.scale < LABEL_MIN_PIXELS
    {
        return None;
    }
    let point = largest.interior_point()?;
    let (x, y) = frame.to_pixel(point.x(), point.y());
    Some((x, y, region.fold.to_string()))
}

/// Mean of the square root of each unit's bounding-box area, in pixels.
fn mean_unit_pixels(units: &[MapUnit], frame: &MapFrame) -> f64 {
    if units.is_empty() {
        return 0.0;
    }
    let total: f64 = units
        .iter()
        .filter_map(|u| u.geometry.bounding_rect())
        .map(|r| {
            (r.width() * frame.cos_standard_parallel * r.height())
                .max(0.0)
                .sqrt()
                * frame.scale
        })
        .sum();
    total / units.len() as f64
}

fn no_value_class(group: ShapeGroup, label: &str, units: u64) -> Class {
    Class {
        group,
        style: solid(NO_VALUE),
        label: label.to_string(),
        units,
    }
}

fn split_layers(input: &MapInput, frame: &MapFrame, fold: u32) -> Result<Built, RenderError> {
    let folds: Vec<u32> = {
        let mut all: Vec<u32> = input.units.iter().filter_map(|u| u.fold).collect();
        all.extend(input.regions.iter().map(|r| r.fold));
        all.sort_unstable();
        all.dedup();
        all
    };
    if folds.binary_search(&fold).is_err() {
        return Err(RenderError::NoSuchFold { fold, folds });
    }
    let (mut test, mut training, mut excluded, mut none) = (
        ShapeGroup::default(),
        ShapeGroup::default(),
        ShapeGroup::default(),
        ShapeGroup::default(),
    );
    let (mut n_test, mut n_training, mut n_excluded, mut n_none) = (0u64, 0u64, 0u64, 0u64);
    for unit in &input.units {
        match unit.fold {
            Some(f) if f == fold => {
                test.add(&unit.geometry, frame);
                n_test += 1;
            }
            _ if unit.excluded_from.contains(&fold) => {
                excluded.add(&unit.geometry, frame);
                n_excluded += 1;
            }
            Some(_) => {
                training.add(&unit.geometry, frame);
                n_training += 1;
            }
            None => {
                none.add(&unit.geometry, frame);
                n_none += 1;
            }
        }
    }
    let excluded_fill = Fill::Hatched {
        base: BACKGROUND,
        ink: SPLIT_EXCLUDED_HATCH,
        overlay: Overlay::Hatch,
    };
    let mut classes = vec![
        Class {
            group: training,
            style: solid(SPLIT_TRAINING),
            label: "Training units".to_string(),
            units: n_training,
        },
        Class {
            group: excluded,
            style: Style {
                fill: excluded_fill,
                stroke: None,
            },
            label: "Excluded from training".to_string(),
            units: n_excluded,
        },
    ];
    if n_none > 0 {
        classes.push(no_value_class(none, "No fold", n_none));
    }
    classes.push(Class {
        group: test,
        style: solid(SPLIT_TEST),
        label: format!("Test units of fold {fold}"),
        units: n_test,
    });
    let mut layers = vec![Layer {
        classes,
        in_legend: true,
    }];
    let mut notes = vec![format!(
        "Fold {fold}: the model is fitted on the training units and scored on the test units; \
         excluded units are left out of its fit."
    )];
    let mut outline = ShapeGroup::default();
    for region in input.regions.iter().filter(|r| r.fold == fold) {
        for polygon in &region.geometry {
            outline.add_polygon(polygon, frame);
        }
    }
    if !outline.is_empty() {
        layers.push(Layer {
            classes: vec![Class {
                group: outline,
                style: Style {
                    fill: Fill::None,
                    stroke: Some(Stroke {
                        colour: INK,
                        width: 1.5,
                        dashed: true,
                        opacity: 1.0,
                    }),
                },
                label: format!("Region of fold {fold}"),
                units: 0,
            }],
            in_legend: true,
        });
        notes.push(format!("The dashed line is the region of fold {fold}."));
    }
    let legend = Legend {
        title: format!("Split of fold {fold}"),
        entries: Vec::new(),
        notes,
    };
    Ok((layers, legend, Vec::new()))
}

/// Groups units into the classes of `values` (one per unit, `None` = no value).
fn classed_groups(
    units: &[MapUnit],
    frame: &MapFrame,
    classes: Option<&Classes>,
    value: impl Fn(&MapUnit) -> Option<f64>,
) -> (Vec<ShapeGroup>, ShapeGroup, u64) {
    let mut groups = vec![ShapeGroup::default(); classes.map_or(0, Classes::len)];
    let mut none = ShapeGroup::default();
    let mut n_none = 0u64;
    for unit in units {
        match (value(unit).filter(|v| v.is_finite()), classes) {
            (Some(v), Some(c)) => groups[c.class_of(v)].add(&unit.geometry, frame),
            _ => {
                none.add(&unit.geometry, frame);
                n_none += 1;
            }
        }
    }
    (groups, none, n_none)
}

fn error_layers(input: &MapInput, frame: &MapFrame, options: &MapOptions) -> Built {
    let values: Vec<f64> = input.units.iter().filter_map(|u| u.abs_error).collect();
    let classes = quantile_classes(&values, options.error_classes);
    let (groups, none, n_none) =
        classed_groups(&input.units, frame, classes.as_ref(), |u| u.abs_error);
    let mut drawn = Vec::new();
    if n_none > 0 {
        drawn.push(no_value_class(none, "No value", n_none));
    }
    let mut notes = Vec::new();
    if let Some(classes) = &classes {
        let colours = sequential(classes.len());
        let labels = classes.labels(&input.target_unit);
        for (i, group) in groups.into_iter().enumerate() {
            drawn.push(Class {
                group,
                style: solid(colours[i]),
                label: labels[i].clone(),
                units: classes.counts[i],
            });
        }
        notes.push(format!(
            "Quantile classes (about equal numbers of units), breaks rounded to {} decimal{}; \
             each class includes its lower bound.",
            classes.decimals,
            if classes.decimals == 1 { "" } else { "s" }
        ));
    }
    notes.push(
        "Darker is a larger error. Where units share a pixel, the larger error shows.".to_string(),
    );
    let legend = Legend {
        title: with_unit_title(
            &format!("Absolute error of {}", input.target),
            &input.target_unit,
        ),
        entries: Vec::new(),
        notes,
    };
    (
        vec![Layer {
            classes: drawn,
            in_legend: true,
        }],
        legend,
        Vec::new(),
    )
}

fn with_unit_title(title: &str, unit: &str) -> String {
    if unit.is_empty() {
        title.to_string()
    } else {
        format!("{title} ({unit})")
    }
}

fn residual_layers(input: &MapInput, frame: &MapFrame, options: &MapOptions) -> Built {
    let values: Vec<f64> = input.units.iter().filter_map(|u| u.residual).collect();
    let classes = symmetric_classes(&values, options.residual_classes_per_side);
    let (groups, none, n_none) =
        classed_groups(&input.units, frame, classes.as_ref(), |u| u.residual);
    let mut notes = Vec::new();
    let mut legend_order = Vec::new();
    if let Some(classes) = &classes {
        let side = classes.breaks.len() / 2;
        let colours = if side == 0 {
            vec![diverging(1)[1]]
        } else {
            diverging(side)
        };
        let labels = classes.labels(&input.target_unit);
        for (i, group) in groups.into_iter().enumerate() {
            legend_order.push(Class {
                group,
                style: solid(colours[i]),
                label: labels[i].clone(),
                units: classes.counts[i],
            });
        }
        notes.push(format!(
            "Classes symmetric about zero: breaks at quantiles of the absolute residual, rounded to {} decimal{}; \
             each class includes its lower bound.",
            classes.decimals,
            if classes.decimals == 1 { "" } else { "s" }
        ));
    }
    notes.push(
        "Residual = observed \u{2212} predicted. Blue: the model predicted too high; \
         orange: too low. Where units share a pixel, the residual farthest from zero shows."
            .to_string(),
    );
    // Draw from the centre class outwards so the extremes end on top; the legend
    // keeps value order.
    let centre = legend_order.len() / 2;
    let mut order: Vec<usize> = (0..legend_order.len()).collect();
    order.sort_by_key(|i| (i.abs_diff(centre), *i));
    let legend_entries: Vec<(String, u64, Style)> = legend_order
        .iter()
        .map(|c| (c.label.clone(), c.units, c.style))
        .collect();
    let mut slots: Vec<Option<Class>> = legend_order.into_iter().map(Some).collect();
    let mut drawn = Vec::new();
    if n_none > 0 {
        drawn.push(no_value_class(none, "No value", n_none));
    }
    for i in order {
        if let Some(class) = slots[i].take() {
            drawn.push(class);
        }
    }
    let mut legend = Legend {
        title: with_unit_title(&format!("Residual of {}", input.target), &input.target_unit),
        entries: Vec::new(),
        notes,
    };
    // The residual legend lists classes by value, not by drawing order.
    if n_none > 0 {
        legend.entries.push(LegendEntry {
            fill: Fill::Solid(NO_VALUE),
            stroke: None,
            label: "No value".to_string(),
            detail: plural(n_none),
        });
    }
    for (label, units, style) in legend_entries {
        legend.entries.push(LegendEntry {
            fill: style.fill,
            stroke: None,
            label,
            detail: plural(units),
        });
    }
    (
        vec![Layer {
            classes: drawn,
            in_legend: false,
        }],
        legend,
        Vec::new(),
    )
}

fn write_document(
    input: &MapInput,
    kind: MapKind,
    options: &MapOptions,
    frame: &MapFrame,
    layers: Vec<Layer>,
    legend: &Legend,
    labels: &[(f64, f64, String)],
) -> Result<String, RenderError> {
    let prefix = &options.id_prefix;
    let (w, h) = (options.width, options.height);
    let kind_name = match kind {
        MapKind::Folds => "Fold layout".to_string(),
        MapKind::Split { fold } => format!("Split of fold {fold}"),
        MapKind::Error => "Absolute error".to_string(),
        MapKind::Residual => "Residual".to_string(),
    };
    let title = if input.title.is_empty() {
        kind_name.clone()
    } else {
        format!("{kind_name} \u{2014} {}", input.title)
    };
    let mut legend = legend.clone();
    let mut body = String::new();
    let mut patterns: Vec<String> = Vec::new();
    let mut rasterised = false;
    let want_pattern = |fill: Fill, patterns: &mut Vec<String>| {
        if let Some(pattern) = fill.svg_pattern(prefix) {
            if !patterns.contains(&pattern) {
                patterns.push(pattern);
            }
        }
    };
    for layer in &layers {
        for class in &layer.classes {
            want_pattern(class.style.fill, &mut patterns);
            if layer.in_legend && !class.label.is_empty() {
                legend.entries.push(LegendEntry {
                    fill: class.style.fill,
                    stroke: class.style.stroke,
                    label: class.label.clone(),
                    detail: if class.units > 0 || class.style.fill != Fill::None {
                        plural(class.units)
                    } else {
                        String::new()
                    },
                });
            }
        }
        let vertices: usize = layer.classes.iter().map(|c| c.group.vertex_count()).sum();
        if vertices > VECTOR_VERTEX_LIMIT {
            rasterised = true;
            let groups: Vec<(&ShapeGroup, Style)> =
                layer.classes.iter().map(|c| (&c.group, c.style)).collect();
            let png = rasterise(frame, &groups)?;
            let _ = write!(
                body,
                "<image class=\"raster-layer\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" \
                 preserveAspectRatio=\"none\" style=\"image-rendering:pixelated\" href=\"data:image/png;base64,{}\"/>",
                frame.panel_x,
                frame.panel_y,
                frame.panel_width.ceil(),
                frame.panel_height.ceil(),
                base64::engine::general_purpose::STANDARD.encode(png)
            );
        } else {
            for (index, class) in layer.classes.iter().enumerate() {
                write_class(&mut body, class, index, prefix);
            }
        }
    }
    for entry in &legend.entries {
        want_pattern(entry.fill, &mut patterns);
    }

    let mut out = String::with_capacity(body.len() + 8192);
    let _ = write!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"geofold-map\" data-kind=\"{}\" \
         width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" role=\"img\" \
         aria-labelledby=\"{prefix}-title {prefix}-desc\" \
         font-family=\"DejaVu Sans, Verdana, Arial, sans-serif\">",
        kind.slug()
    );
    let _ = write!(
        out,
        "<title id=\"{prefix}-title\">{}</title><desc id=\"{prefix}-desc\">{}</desc>",
        escape(&title),
        escape(&describe(input, kind, rasterised))
    );
    let _ = write!(
        out,
        "<defs><clipPath id=\"{prefix}-panel\"><rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/></clipPath>{}</defs>",
        frame.panel_x,
        frame.panel_y,
        frame.panel_width,
        frame.panel_height,
        patterns.concat()
    );
    let _ = write!(
        out,
        "<rect width=\"{w}\" height=\"{h}\" fill=\"{BACKGROUND}\"/>"
    );
    let _ = write!(
        out,
        "<text x=\"{MARGIN}\" y=\"26\" font-size=\"16\" font-weight=\"bold\" fill=\"{INK}\">{}</text>",
        escape(&title)
    );
    let _ = write!(
        out,
        "<g class=\"layers\" clip-path=\"url(#{prefix}-panel)\">{body}"
    );
    for (x, y, text) in labels {
        let _ = write!(
            out,
            "<text class=\"fold-label\" x=\"{}\" y=\"{}\" font-size=\"13\" font-weight=\"bold\" \
             text-anchor=\"middle\" fill=\"{INK}\" stroke=\"#ffffff\" stroke-width=\"3\" \
             paint-order=\"stroke\">{}</text>",
            fixed(*x, 1),
            fixed(*y + 4.5, 1),
            escape(text)
        );
    }
    out.push_str("</g>");
    let _ = write!(
        out,
        "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#999999\" stroke-width=\"0.5\"/>",
        frame.panel_x, frame.panel_y, frame.panel_width, frame.panel_height
    );
    write_scale_bar(&mut out, frame);
    write_north_arrow(&mut out, frame, input.crs.geographic);
    legend.write_svg(
        &mut out,
        f64::from(w) - LEGEND_WIDTH + MARGIN,
        TITLE_HEIGHT,
        prefix,
    );
    write_caption(&mut out, input, frame, rasterised, h);
    out.push_str("</svg>");
    Ok(out)
}

fn write_class(out: &mut String, class: &Class, index: usize, prefix: &str) {
    if class.group.is_empty() {
        return;
    }
    let mut d = String::new();
    class.group.write_fill_path(&mut d);
    if !d.is_empty() {
        let _ = write!(
            out,
            "<path class=\"class\" data-class=\"{index}\" fill=\"{}\" fill-rule=\"nonzero\"",
            class.style.fill.svg_paint(prefix)
        );
        write_stroke(out, class.style.stroke);
        let _ = write!(out, " d=\"{d}\"/>");
    }
    let mut lines = String::new();
    class.group.write_line_path(&mut lines);
    if !lines.is_empty() {
        let colour = match class.style.fill {
            Fill::Solid(c) | Fill::Hatched { base: c, .. } => c,
            Fill::None => INK,
        };
        let _ = write!(
            out,
            "<path class=\"class-lines\" data-class=\"{index}\" fill=\"none\" stroke=\"{colour}\" \
             stroke-width=\"2\" d=\"{lines}\"/>"
        );
    }
}

fn write_stroke(out: &mut String, stroke: Option<Stroke>) {
    if let Some(s) = stroke {
        let _ = write!(
            out,
            " stroke=\"{}\" stroke-width=\"{}\" stroke-opacity=\"{}\" stroke-linejoin=\"round\"",
            s.colour, s.width, s.opacity
        );
        if s.dashed {
            out.push_str(" stroke-dasharray=\"6 4\"");
        }
    }
}

fn write_scale_bar(out: &mut String, frame: &MapFrame) {
    let (_, pixels, label) = frame.scale_bar();
    let x = frame.panel_x + 12.0;
    let y = frame.panel_y + frame.panel_height - 16.0;
    let half = pixels / 2.0;
    let _ = write!(
        out,
        "<g class=\"scale-bar\" font-size=\"11\" fill=\"{INK}\">\
         <rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"30\" fill=\"#ffffff\" fill-opacity=\"0.8\"/>\
         <rect x=\"{x}\" y=\"{y}\" width=\"{}\" height=\"6\" fill=\"{INK}\" stroke=\"{INK}\" stroke-width=\"1\"/>\
         <rect x=\"{}\" y=\"{y}\" width=\"{}\" height=\"6\" fill=\"#ffffff\" stroke=\"{INK}\" stroke-width=\"1\"/>\
         <text x=\"{x}\" y=\"{}\" text-anchor=\"middle\">0</text>\
         <text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text></g>",
        x - 8.0,
        y - 18.0,
        pixels + 40.0,
        fixed(half, 2),
        fixed(x + half, 2),
        fixed(half, 2),
        y - 4.0,
        fixed(x + pixels, 2),
        y - 4.0,
        escape(&label)
    );
}

fn write_north_arrow(out: &mut String, frame: &MapFrame, geographic: bool) {
    let x = frame.panel_x + frame.panel_width - 28.0;
    let y = frame.panel_y + 12.0;
    let note = if geographic { "north" } else { "grid north" };
    let _ = write!(
        out,
        "<g class=\"north-arrow\" fill=\"{INK}\">\
         <rect x=\"{}\" y=\"{}\" width=\"52\" height=\"52\" fill=\"#ffffff\" fill-opacity=\"0.8\"/>\
         <path d=\"M{x} {y}L{} {}L{x} {}Z\" fill=\"{INK}\"/>\
         <path d=\"M{x} {y}L{} {}L{x} {}Z\" fill=\"#ffffff\" stroke=\"{INK}\" stroke-width=\"1\"/>\
         <text x=\"{x}\" y=\"{}\" font-size=\"12\" font-weight=\"bold\" text-anchor=\"middle\">N</text>\
         <text x=\"{x}\" y=\"{}\" font-size=\"8\" text-anchor=\"middle\">{note}</text></g>",
        x - 26.0,
        y - 6.0,
        x - 7.0,
        y + 22.0,
        y + 16.0,
        x + 7.0,
        y + 22.0,
        y + 16.0,
        y + 34.0,
        y + 43.0,
    );
}

fn write_caption(
    out: &mut String,
    input: &MapInput,
    frame: &MapFrame,
    rasterised: bool,
    height: u32,
) {
    let crs = &input.crs;
    let mut first = format!("EPSG:{} {}", crs.srid, crs.name);
    match frame.standard_parallel {
        Some(phi) => {
            let _ = write!(
                first,
                " \u{00b7} drawn in the equirectangular projection, standard parallel {}\u{00b0}{}; \
                 scale true east\u{2013}west along it (geodesic length, WGS 84)",
                fixed(phi.abs(), 2),
                if phi < 0.0 { "S" } else { "N" }
            );
        }
        None => {
            let _ = write!(first, " ({}) \u{00b7} up is grid north", crs.units_name);
        }
    }
    let second = format!(
        "{} drawn{}",
        plural(input.units.len() as u64),
        if rasterised {
            " \u{00b7} dense layer rasterised at 1 pixel per map pixel"
        } else {
            " \u{00b7} geometry simplified to half a pixel"
        }
    );
    let y = f64::from(height) - CAPTION_HEIGHT + 16.0;
    let _ = write!(
        out,
        "<g class=\"caption\" font-size=\"10.5\" fill=\"#444444\">\
         <text x=\"{MARGIN}\" y=\"{y}\">{}</text><text x=\"{MARGIN}\" y=\"{}\">{}</text></g>",
        escape(&first),
        y + 14.0,
        escape(&second)
    );
}

/// A sentence for screen readers and the `<desc>` element.
fn describe(input: &MapInput, kind: MapKind, rasterised: bool) -> String {
    let what = match kind {
        MapKind::Folds => "Map of the spatial folds".to_string(),
        MapKind::Split { fold } => {
            format!("Map of the test, training and excluded units of fold {fold}")
        }
        MapKind::Error => format!("Map of the absolute held-out error of {}", input.target),
        MapKind::Residual => format!("Map of the held-out residual of {}", input.target),
    };
    format!(
        "{what}; {} units{}.",
        count(input.units.len() as u64),
        if rasterised {
            ", drawn as an image"
        } else {
            ""
        }
    )
}

#[cfg(test)]
mod tests;
