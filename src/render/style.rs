//! How a class is painted: solid colour, or a colour under a hatch, with an
//! optional outline; the same style drives the SVG and the rasterised layer.
//!
//! Hatches are drawn as diagonal stripes in an 8-pixel tile: a pixel (x, y) of
//! the map panel is ink when (x + y) mod 8 < 3 ("/" stripes), and for a
//! cross-hatch also when (x − y) mod 8 < 3 ("\" stripes). The SVG pattern draws
//! the same tile with polygons, so a vector and a rasterised map look alike.

use std::fmt::Write as _;

use super::colour::Rgb8;
use super::palette::Overlay;

/// Period of the hatch tile in pixels.
pub const HATCH_PERIOD: u32 = 8;
/// Width of a hatch stripe, measured along x, in pixels.
pub const HATCH_WIDTH: u32 = 3;

/// The fill of a class.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fill {
    /// No fill (outline only).
    None,
    /// One colour.
    Solid(Rgb8),
    /// `base` colour under stripes of `ink`.
    Hatched {
        /// Colour between the stripes.
        base: Rgb8,
        /// Colour of the stripes.
        ink: Rgb8,
        /// Single or cross hatch ([`Overlay::None`] draws as solid `base`).
        overlay: Overlay,
    },
}

/// The outline of a class.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Stroke {
    /// Line colour.
    pub colour: Rgb8,
    /// Line width in pixels.
    pub width: f32,
    /// Dashed (6 on, 4 off) rather than solid.
    pub dashed: bool,
    /// Opacity 0–1.
    pub opacity: f32,
}

/// Fill and outline of one class.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Style {
    /// The fill.
    pub fill: Fill,
    /// The outline, if any.
    pub stroke: Option<Stroke>,
}

impl Fill {
    /// The colour of pixel (x, y) of the panel under this fill, if any.
    pub fn pixel(self, x: u32, y: u32) -> Option<Rgb8> {
        match self {
            Fill::None => None,
            Fill::Solid(colour) => Some(colour),
            Fill::Hatched { base, ink, overlay } => {
                let forward = (x + y) % HATCH_PERIOD < HATCH_WIDTH;
                // (x - y) mod P without going negative.
                let backward =
                    (x + HATCH_PERIOD * (1 + y / HATCH_PERIOD) - y) % HATCH_PERIOD < HATCH_WIDTH;
                let on = match overlay {
                    Overlay::None => false,
                    Overlay::Hatch => forward,
                    Overlay::CrossHatch => forward || backward,
                };
                Some(if on { ink } else { base })
            }
        }
    }

    /// The SVG paint for this fill: `none`, `#rrggbb`, or `url(#id)` of its pattern.
    pub fn svg_paint(self, id_prefix: &str) -> String {
        match self {
            Fill::None => "none".to_string(),
            Fill::Solid(colour) => colour.to_string(),
            Fill::Hatched {
                base,
                overlay: Overlay::None,
                ..
            } => base.to_string(),
            Fill::Hatched { .. } => format!("url(#{})", self.pattern_id(id_prefix)),
        }
    }

    fn pattern_id(self, id_prefix: &str) -> String {
        match self {
            Fill::Hatched { base, ink, overlay } => format!(
                "{id_prefix}-hatch-{}-{}-{}",
                hex_digits(base),
                hex_digits(ink),
                if overlay == Overlay::CrossHatch {
                    "x"
                } else {
                    "d"
                }
            ),
            _ => String::new(),
        }
    }

    /// The `<pattern>` element this fill needs, if it needs one. The tile is the
    /// 8×8 pixel rule of the module doc drawn as polygons, in map-panel pixels.
    pub fn svg_pattern(self, id_prefix: &str) -> Option<String> {
        let Fill::Hatched { base, ink, overlay } = self else {
            return None;
        };
        if overlay == Overlay::None {
            return None;
        }
        let p = HATCH_PERIOD;
        let w = HATCH_WIDTH;
        let mut out = String::new();
        let _ = write!(
            out,
            "<pattern id=\"{}\" patternUnits=\"userSpaceOnUse\" width=\"{p}\" height=\"{p}\">\
             <rect width=\"{p}\" height=\"{p}\" fill=\"{base}\"/>",
            self.pattern_id(id_prefix)
        );
        // "/" stripes: the bands 0 <= x + y < w and p <= x + y < p + w inside the tile.
        let _ = write!(
            out,
            "<path fill=\"{ink}\" d=\"M0 0L{w} 0L0 {w}ZM{p} 0L{p} {w}L{w} {p}L0 {p}Z"
        );
        if overlay == Overlay::CrossHatch {
            // "\\" stripes: 0 <= x - y < w and -p <= x - y < w - p.
            let _ = write!(
                out,
                "M0 0L{w} 0L{p} {}L{p} {p}ZM0 {}L{w} {p}L0 {p}Z",
                p - w,
                p - w
            );
        }
        out.push_str("\"/>");
        out.push_str("</pattern>");
        Some(out)
    }
}

fn hex_digits(colour: Rgb8) -> String {
    format!("{:02x}{:02x}{:02x}", colour.r, colour.g, colour.b)
}
