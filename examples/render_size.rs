//! Size benchmark of the maps and the report at 1,000,000 units.
//!
//! Generates 1,000 × 1,000 invented square units of 100 m (folds by blocks of
//! 100 × 100 cells, five folds, a one-cell buffer), then renders the fold map and
//! the error map as SVG, the error map as PNG, and the whole report with its four
//! maps, and prints each output's size and the time it took.
//!
//! ```sh
//! cargo run --release --example render_size            # 1,000,000 units
//! cargo run --release --example render_size -- 300     # 300 x 300 units
//! cargo run --release --example render_size -- 1000 out # also write the files into out/
//! ```
//!
//! Recorded result, 2026-12-02, on the project's `rust` machine (2 shared cores,
//! 24 GiB, Debian 12, rustc 1.95.0), `cargo run --release --example render_size`:
//!
//! ```text
//! units: 1000000 (1000 x 1000), generated in 0.13 s
//! folds    SVG:       9796 bytes in 0.12 s
//! error    SVG:     296985 bytes in 0.42 s (dense layer rasterised)
//! error    PNG:     260972 bytes in 0.10 s
//! report HTML (4 maps, all sections): 509496 bytes (0.51 MB) in 0.89 s
//! ```
//!
//! Peak memory 279 MB (`/usr/bin/time -v`, most of it the generated input).
//! Headless Chromium opened that report and took a 1100 × 5000 screenshot in
//! 1.5 s wall time. At this density (units of half a pixel) every unit of the
//! error map is a one-pixel dot in the embedded image; the fold map draws only
//! the 100 fold blocks, unit outlines being left out below 6 px.

use std::time::Instant;

use geofold::render::fixtures::{full_report, grid_map};
use geofold::render::report::{render_report_html, ReportOptions};
use geofold::render::{render_map_svg, svg_to_png, MapKind, MapOptions};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let side: u32 = match std::env::args().nth(1) {
        Some(arg) => arg.parse()?,
        None => 1000,
    };
    let out_dir = std::env::args().nth(2).map(std::path::PathBuf::from);
    let started = Instant::now();
    let input = grid_map(side, side, 100.0, (side / 10).max(1), 5);
    println!(
        "units: {} ({side} x {side}), generated in {:.2} s",
        input.units.len(),
        started.elapsed().as_secs_f64()
    );
    let options = MapOptions::default();
    for kind in [MapKind::Folds, MapKind::Error] {
        let started = Instant::now();
        let svg = render_map_svg(&input, kind, &options)?;
        let svg_seconds = started.elapsed().as_secs_f64();
        println!(
            "{:<8} SVG: {:>10} bytes in {svg_seconds:.2} s{}",
            kind.slug(),
            svg.len(),
            if svg.contains("raster-layer") {
                " (dense layer rasterised)"
            } else {
                ""
            }
        );
        if let Some(dir) = &out_dir {
            std::fs::write(dir.join(format!("{}.svg", kind.slug())), &svg)?;
        }
        if kind == MapKind::Error {
            let started = Instant::now();
            let png = svg_to_png(&svg, options.width)?;
            if let Some(dir) = &out_dir {
                std::fs::write(dir.join("error.png"), &png)?;
            }
            println!(
                "{:<8} PNG: {:>10} bytes in {:.2} s",
                kind.slug(),
                png.len(),
                started.elapsed().as_secs_f64()
            );
        }
    }
    let started = Instant::now();
    let html = render_report_html(&full_report(), Some(&input), &ReportOptions::default())?;
    println!(
        "report HTML (4 maps, all sections): {} bytes ({:.2} MB) in {:.2} s",
        html.len(),
        html.len() as f64 / 1e6,
        started.elapsed().as_secs_f64()
    );
    if let Some(dir) = &out_dir {
        std::fs::write(dir.join("report.html"), &html)?;
    }
    Ok(())
}
