//! Writing a map as an SVG document: classes, legend, scale bar, north arrow and caption.

use super::*;
use crate::render::frame::trim_number;

pub(super) fn write_document(
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
    write_scale_bar(&mut out, frame, input.crs.srid <= 0);
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

pub(super) fn write_class(out: &mut String, class: &Class, index: usize, prefix: &str) {
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

pub(super) fn write_stroke(out: &mut String, stroke: Option<Stroke>) {
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

/// The scale bar; with no CRS (`undefined`) its length is in coordinate units.
pub(super) fn write_scale_bar(out: &mut String, frame: &MapFrame, undefined: bool) {
    let (length, pixels, label) = frame.scale_bar();
    let label = if undefined {
        format!("{} coordinate units", trim_number(length))
    } else {
        label
    };
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

pub(super) fn write_north_arrow(out: &mut String, frame: &MapFrame, geographic: bool) {
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

pub(super) fn write_caption(
    out: &mut String,
    input: &MapInput,
    frame: &MapFrame,
    rasterised: bool,
    height: u32,
) {
    let crs = &input.crs;
    let mut first = if crs.srid > 0 {
        format!("EPSG:{} {}", crs.srid, crs.name)
    } else {
        format!(
            "No coordinate reference system is defined (SRID {}): coordinates are drawn as plain units",
            crs.srid
        )
    };
    match frame.standard_parallel {
        _ if crs.srid <= 0 => {}
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
pub(super) fn describe(input: &MapInput, kind: MapKind, rasterised: bool) -> String {
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
