//! SVG to PNG in Rust: usvg parses, resvg renders with tiny-skia, and the text
//! uses DejaVu Sans shipped inside the binary (the `dejavu` crate), so a PNG
//! needs no system library or installed font at run time and looks the same on
//! every machine.

use std::sync::{Arc, OnceLock};

use resvg::tiny_skia::{Pixmap, Transform};
use resvg::usvg;

use super::error::RenderError;

/// Widths a PNG may be asked for, in pixels.
pub const PNG_WIDTHS: std::ops::RangeInclusive<u32> = 16..=8000;

/// The embedded fonts, loaded once.
fn fonts() -> Arc<usvg::fontdb::Database> {
    static FONTS: OnceLock<Arc<usvg::fontdb::Database>> = OnceLock::new();
    FONTS
        .get_or_init(|| {
            let mut db = usvg::fontdb::Database::new();
            db.load_font_data(dejavu::sans::regular().to_vec());
            db.load_font_data(dejavu::sans::bold().to_vec());
            db.set_sans_serif_family("DejaVu Sans");
            Arc::new(db)
        })
        .clone()
}

/// Renders an SVG document to PNG bytes, `width` pixels wide and as tall as the
/// SVG's aspect ratio makes it. Text is set in the embedded DejaVu Sans whatever
/// family the SVG names.
///
/// # Errors
/// [`RenderError::Size`] for a width outside [`PNG_WIDTHS`] (or a height that
/// would exceed 8000 pixels), [`RenderError::Png`] when the SVG does not parse or
/// the PNG cannot be encoded.
pub fn svg_to_png(svg: &str, width: u32) -> Result<Vec<u8>, RenderError> {
    if !PNG_WIDTHS.contains(&width) {
        return Err(RenderError::Size {
            what: "PNG width",
            value: width,
            range: "16 to 8000 pixels",
        });
    }
    let options = usvg::Options {
        font_family: "DejaVu Sans".to_string(),
        fontdb: fonts(),
        // Only data: URLs are resolved: an href naming a file is ignored, so
        // rendering never reads the disk.
        resources_dir: None,
        image_href_resolver: usvg::ImageHrefResolver {
            resolve_data: usvg::ImageHrefResolver::default_data_resolver(),
            resolve_string: Box::new(|_, _| None),
        },
        ..usvg::Options::default()
    };
    let tree = usvg::Tree::from_str(svg, &options).map_err(|e| RenderError::Png {
        action: "parse the SVG",
        cause: e.to_string(),
    })?;
    let size = tree.size();
    let scale = width as f32 / size.width();
    let height = (size.height() * scale).round().max(1.0);
    if height > 8000.0 {
        return Err(RenderError::Size {
            what: "PNG height",
            value: height as u32,
            range: "at most 8000 pixels",
        });
    }
    let mut pixmap = Pixmap::new(width, height as u32).ok_or_else(|| RenderError::Png {
        action: "allocate the image",
        cause: format!("{width} x {height} pixels"),
    })?;
    pixmap.fill(resvg::tiny_skia::Color::WHITE);
    resvg::render(
        &tree,
        Transform::from_scale(scale, scale),
        &mut pixmap.as_mut(),
    );
    pixmap.encode_png().map_err(|e| RenderError::Png {
        action: "encode the image",
        cause: e.to_string(),
    })
}
