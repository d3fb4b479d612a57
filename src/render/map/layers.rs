//! The classed layers of each map kind: folds, one fold's split, absolute error, residual.

use super::*;

pub(super) fn fold_fill(fold: u32) -> Fill {
    let (colour, overlay) = fold_style(fold);
    Fill::Hatched {
        base: colour,
        ink: INK,
        overlay,
    }
}

pub(super) fn fold_layers(input: &MapInput, frame: &MapFrame) -> Built {
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
pub(super) fn region_label(
    region: &crate::render::input::FoldRegion,
    frame: &MapFrame,
) -> Option<(f64, f64, String)> {
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
pub(super) fn mean_unit_pixels(units: &[MapUnit], frame: &MapFrame) -> f64 {
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

pub(super) fn no_value_class(group: ShapeGroup, label: &str, units: u64) -> Class {
    Class {
        group,
        style: solid(NO_VALUE),
        label: label.to_string(),
        units,
    }
}

pub(super) fn split_layers(
    input: &MapInput,
    frame: &MapFrame,
    fold: u32,
) -> Result<Built, RenderError> {
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
pub(super) fn classed_groups(
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

pub(super) fn error_layers(input: &MapInput, frame: &MapFrame, options: &MapOptions) -> Built {
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

pub(super) fn with_unit_title(title: &str, unit: &str) -> String {
    if unit.is_empty() {
        title.to_string()
    } else {
        format!("{title} ({unit})")
    }
}

pub(super) fn residual_layers(input: &MapInput, frame: &MapFrame, options: &MapOptions) -> Built {
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
