//! Dense layers as an embedded image: the classes of a layer painted into a
//! pixmap of the map panel (tiny-skia) and encoded as PNG.
//!
//! **When.** A layer whose simplified geometry would still need more than
//! [`VECTOR_VERTEX_LIMIT`] vertices is drawn this way (see `map.rs`): beyond it the
//! SVG path text (about 9 bytes a vertex) outgrows the picture it describes.
//!
//! **How.** One pixel of the image is one pixel of the map (device scale 1).
//! Fills are painted without anti-aliasing, so every pixel has exactly its
//! class's colour (legend colours can be matched, and the PNG compresses well).
//! Groups are painted in the order given — the map puts the classes that matter
//! most (largest errors, residuals farthest from zero) last — so where several
//! units share a pixel, that class shows. Sub-pixel units are single pixels.

use resvg::tiny_skia::{
    self, FillRule, LineCap, Paint, PathBuilder, Pixmap, PremultipliedColorU8, StrokeDash,
    Transform,
};

use super::colour::Rgb8;
use super::error::RenderError;
use super::frame::MapFrame;
use super::shapes::{ShapeGroup, POINT_RADIUS};
use super::style::{Fill, Style, HATCH_PERIOD};

/// Most vertices a layer may have to be drawn as SVG paths (about 1 MB of path
/// text); above it the layer is rasterised.
pub const VECTOR_VERTEX_LIMIT: usize = 120_000;

/// Rings (or points) per tiny-skia path, to bound the size of one path.
const RINGS_PER_PATH: usize = 20_000;

/// Paints `groups` into a transparent pixmap covering the frame's panel and
/// returns it as PNG bytes.
///
/// # Errors
/// [`RenderError::Png`] if the pixmap cannot be made or the PNG not encoded.
pub fn rasterise(
    frame: &MapFrame,
    groups: &[(&ShapeGroup, Style)],
) -> Result<Vec<u8>, RenderError> {
    // The panel is at most 4000 x 4000 pixels (MapFrame::fit checks the map size).
    let width = frame.panel_width.ceil().max(1.0) as u32;
    let height = frame.panel_height.ceil().max(1.0) as u32;
    let mut pixmap = Pixmap::new(width, height).ok_or_else(|| RenderError::Png {
        action: "allocate the raster layer",
        cause: format!("{width} x {height} pixels"),
    })?;
    let shift = Transform::from_translate(-frame.panel_x as f32, -frame.panel_y as f32);
    for (group, style) in groups {
        paint_fill(&mut pixmap, group, style.fill, frame, shift);
        paint_dots(&mut pixmap, group, style.fill, frame);
        if let Some(stroke) = style.stroke {
            let mut paint = Paint::default();
            paint.set_color(colour(stroke.colour, stroke.opacity));
            paint.anti_alias = true;
            let mut line = tiny_skia::Stroke {
                width: stroke.width,
                line_cap: LineCap::Butt,
                ..tiny_skia::Stroke::default()
            };
            if stroke.dashed {
                line.dash = StrokeDash::new(vec![6.0, 4.0], 0.0);
            }
            for path in ring_paths(group, true) {
                pixmap.stroke_path(&path, &paint, &line, shift, None);
            }
        }
    }
    pixmap.encode_png().map_err(|e| RenderError::Png {
        action: "encode the raster layer",
        cause: e.to_string(),
    })
}

fn colour(rgb: Rgb8, opacity: f32) -> tiny_skia::Color {
    tiny_skia::Color::from_rgba8(
        rgb.r,
        rgb.g,
        rgb.b,
        (opacity.clamp(0.0, 1.0) * 255.0).round() as u8,
    )
}

fn paint_fill(
    pixmap: &mut Pixmap,
    group: &ShapeGroup,
    fill: Fill,
    frame: &MapFrame,
    shift: Transform,
) {
    let tile = hatch_tile(fill);
    let mut paint = Paint {
        anti_alias: false,
        ..Paint::default()
    };
    match fill {
        Fill::None => return,
        Fill::Solid(rgb) => paint.set_color(colour(rgb, 1.0)),
        Fill::Hatched { .. } => {
            let Some(tile) = tile.as_ref() else {
                return;
            };
            // The shader is moved by `shift` with the path: undo it, so the tile
            // repeats from the panel's origin, as Fill::pixel counts pixels.
            paint.shader = tiny_skia::Pattern::new(
                tile.as_ref(),
                tiny_skia::SpreadMode::Repeat,
                tiny_skia::FilterQuality::Nearest,
                1.0,
                Transform::from_translate(frame.panel_x as f32, frame.panel_y as f32),
            );
        }
    }
    for path in ring_paths(group, false) {
        pixmap.fill_path(&path, &paint, FillRule::Winding, shift, None);
    }
}

/// The group's rings and point circles as tiny-skia paths of bounded size.
/// With `rings_only`, the circles are left out (outlines are drawn for rings).
fn ring_paths(group: &ShapeGroup, rings_only: bool) -> Vec<tiny_skia::Path> {
    let mut paths = Vec::new();
    let mut builder = PathBuilder::new();
    let mut in_builder = 0;
    let mut flush = |builder: &mut PathBuilder, in_builder: &mut usize| {
        if *in_builder > 0 {
            let full = std::mem::take(builder);
            if let Some(path) = full.finish() {
                paths.push(path);
            }
            *in_builder = 0;
        }
    };
    for ring in group.rings() {
        let mut pairs = ring.chunks_exact(2);
        if let Some(first) = pairs.next() {
            builder.move_to(first[0], first[1]);
            for pair in pairs {
                builder.line_to(pair[0], pair[1]);
            }
            builder.close();
            in_builder += 1;
        }
        if in_builder >= RINGS_PER_PATH {
            flush(&mut builder, &mut in_builder);
        }
    }
    if !rings_only {
        for [x, y] in &group.points {
            builder.push_circle(*x, *y, POINT_RADIUS);
            in_builder += 1;
            if in_builder >= RINGS_PER_PATH {
                flush(&mut builder, &mut in_builder);
            }
        }
    }
    flush(&mut builder, &mut in_builder);
    paths
}

/// Sub-pixel units: each sets the one pixel it falls in.
fn paint_dots(pixmap: &mut Pixmap, group: &ShapeGroup, fill: Fill, frame: &MapFrame) {
    let (width, height) = (pixmap.width(), pixmap.height());
    let pixels = pixmap.pixels_mut();
    for [x, y] in &group.dots {
        let px = (f64::from(*x) - frame.panel_x).floor();
        let py = (f64::from(*y) - frame.panel_y).floor();
        if px < 0.0 || py < 0.0 || px >= f64::from(width) || py >= f64::from(height) {
            continue;
        }
        let (px, py) = (px as u32, py as u32);
        if let Some(rgb) = fill.pixel(px, py) {
            if let Some(colour) = PremultipliedColorU8::from_rgba(rgb.r, rgb.g, rgb.b, 255) {
                pixels[(py * width + px) as usize] = colour;
            }
        }
    }
}

/// One period of a hatch, painted pixel by pixel with [`Fill::pixel`].
fn hatch_tile(fill: Fill) -> Option<Pixmap> {
    let mut tile = Pixmap::new(HATCH_PERIOD, HATCH_PERIOD)?;
    let pixels = tile.pixels_mut();
    for y in 0..HATCH_PERIOD {
        for x in 0..HATCH_PERIOD {
            let rgb = fill.pixel(x, y)?;
            pixels[(y * HATCH_PERIOD + x) as usize] =
                PremultipliedColorU8::from_rgba(rgb.r, rgb.g, rgb.b, 255)?;
        }
    }
    Some(tile)
}
