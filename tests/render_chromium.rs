//! The HTML report in a real browser: headless Chromium (Debian's `chromium`,
//! or the binary named by `GEOFOLD_CHROMIUM`) opens the page from a file
//! (helpers in `common/chromium.rs`).
//!
//! **No console errors.** Chromium started with `--enable-logging=stderr --v=0`
//! writes every console message — script errors, refused loads, Content
//! Security Policy violations — to stderr as a line containing `CONSOLE`. The
//! report has no script, so what could go wrong is a load: the page's CSP
//! forbids every fetch but `data:` images, and Chromium reports any attempt as
//! a console message. The test requires no such line, and a control page with
//! one forbidden image must produce one, so the check is shown to be able to fail.
//!
//! **Not blank, and right.** A screenshot (decoded with the `png` crate) of a
//! report with the tiny fixture's maps must show the error map's class colours
//! over the area the fixture's units cover (from the map's own frame), and the
//! DOM Chromium built must hold the sections and the inline SVGs.

mod common;

use std::path::{Path, PathBuf};

use common::chromium::{console_lines, run_chromium, screenshot};
use geofold::render::fixtures::{minimal_report, tiny_map};
use geofold::render::map_frame;
use geofold::render::palette::sequential;
use geofold::render::report::{render_report_html, ReportOptions};

fn write_report(dir: &Path) -> PathBuf {
    let html = render_report_html(
        &minimal_report(),
        Some(&tiny_map()),
        &ReportOptions::default(),
    )
    .unwrap();
    for pattern in ["src=\"http", "href=\"http", "@import", "url(http"] {
        assert!(
            !html.contains(pattern),
            "the report refers to the network: {pattern}"
        );
    }
    let page = dir.join("report.html");
    std::fs::write(&page, html).unwrap();
    page
}

#[test]
fn report_opens_without_console_errors_and_the_check_can_fail() {
    let dir = tempfile::tempdir().unwrap();
    let page = write_report(dir.path());
    let (dom, stderr) = run_chromium(&page, &["--dump-dom".to_string()]);
    assert_eq!(
        console_lines(&stderr),
        Vec::<&str>::new(),
        "console messages on the report"
    );
    // The DOM Chromium parsed holds the sections and the maps as SVG.
    for id in ["meaning", "settings", "scores", "maps"] {
        assert!(
            dom.contains(&format!("<section id=\"{id}\"")),
            "section {id} not in the DOM"
        );
    }
    assert_eq!(
        dom.matches("<svg").count(),
        5,
        "4 maps and the per-fold chart"
    );
    assert!(dom.contains("predictive skill, not causes"));

    // Control: the same page with one forbidden load must give a console line.
    let control = dir.path().join("control.html");
    let html = std::fs::read_to_string(&page).unwrap();
    std::fs::write(
        &control,
        html.replace("</body>", "<img src=\"http://127.0.0.1:9/x.png\"></body>"),
    )
    .unwrap();
    let (_, stderr) = run_chromium(&control, &["--dump-dom".to_string()]);
    assert!(
        !console_lines(&stderr).is_empty(),
        "the console check saw nothing on the control page"
    );
}

#[test]
fn screenshot_shows_the_units_in_their_class_colours() {
    let dir = tempfile::tempdir().unwrap();
    let page = write_report(dir.path());
    let shot = dir.path().join("shot.png");
    let (width, height) = (1100u32, 5200u32);
    let image = screenshot(&page, &shot, width, height);
    assert_eq!((image.width, image.height), (width, height));
    let colour_at = |i: usize| image.colour_at(i);
    let n = (width * height) as usize;

    // Not blank: a good share of non-white pixels and many colours.
    let non_white = (0..n).filter(|i| colour_at(*i) != (255, 255, 255)).count();
    assert!(
        non_white > n / 20,
        "only {non_white} of {n} pixels are not white"
    );
    let mut distinct: Vec<(u8, u8, u8)> = (0..n).step_by(7).map(colour_at).collect();
    distinct.sort_unstable();
    distinct.dedup();
    assert!(distinct.len() > 50, "{} colours", distinct.len());

    // Each fixture unit is one 1 km cell (unit 0 and 1 whole, shown at the map's
    // scale); its class colour must cover about that many pixels. The error map
    // classes of the tiny fixture are 0, 1, 3 and 4 of five (see the fixture).
    let options = ReportOptions::default();
    let frame = map_frame(&tiny_map(), &options.map).unwrap();
    let cell_pixels = (1000.0 * frame.scale).powi(2);
    let ramp = sequential(5);
    for class in [0usize, 1] {
        let c = ramp[class];
        let count = (0..n).filter(|i| colour_at(*i) == (c.r, c.g, c.b)).count() as f64;
        eprintln!("class {class} ({c}): {count} pixels, the cell is {cell_pixels:.0}");
        // Edges are anti-aliased (a pixel's rim of the cell may blend) and the legend
        // swatch adds 23 x 15 pixels: within 5 % of the cell.
        assert!(
            (count - cell_pixels).abs() < 0.05 * cell_pixels,
            "class {class} ({c}): {count} pixels, the cell is {cell_pixels:.0}"
        );
    }
}
