//! The self-contained HTML report of one run.
//!
//! One HTML file with everything inside: styles in a `<style>` element, maps and
//! charts as inline SVG (a dense map layer as a PNG `data:` URL inside its SVG),
//! no scripts, no fonts, no external references. A Content-Security-Policy
//! `<meta>` forbids every fetch but `data:` images, so even a reference that
//! slipped in could not reach the network; the Chromium test would see the
//! refusal as a console error.
//!
//! Sections, in order: what the numbers mean (skill, not causes); the run's
//! settings in plain words; pooled and per-fold scores with their spread and the
//! training-mean baseline; random versus spatial folds; the maps; and, when
//! stored, per-fold coefficients, Moran's I of the held-out residuals, the
//! semivariogram and correlogram, the
//! nearest-distance distributions, and the job's score history with its gates.
//! A section whose data is absent is left out.
//!
//! The page is a pure function of its input: no clock, no random ids.

pub mod input;
mod sections;

use std::fmt::Write as _;

use super::error::RenderError;
use super::input::{MapInput, MapKind, MapOptions};
use super::map::render_map_svg;
use super::text::escape;
use input::ReportInput;

/// How the report draws its maps.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ReportOptions {
    /// Size and classes of each map (the id prefix is replaced per map).
    pub map: MapOptions,
    /// The fold whose split is drawn; `None` draws the lowest fold present.
    pub split_fold: Option<u32>,
}

impl Default for ReportOptions {
    fn default() -> ReportOptions {
        ReportOptions {
            map: MapOptions {
                width: 900,
                height: 600,
                ..MapOptions::default()
            },
            split_fold: None,
        }
    }
}

/// The maps a report draws for `maps`: the fold layout, one fold's split, the
/// error and the residual, each left out when its data is absent.
pub fn report_map_kinds(maps: &MapInput, split_fold: Option<u32>) -> Vec<MapKind> {
    let mut kinds = Vec::new();
    let lowest_fold = maps
        .units
        .iter()
        .filter_map(|u| u.fold)
        .chain(maps.regions.iter().map(|r| r.fold))
        .min();
    if lowest_fold.is_some() {
        kinds.push(MapKind::Folds);
    }
    if let Some(fold) = split_fold.or(lowest_fold) {
        kinds.push(MapKind::Split { fold });
    }
    if maps
        .units
        .iter()
        .any(|u| u.abs_error.is_some_and(f64::is_finite))
    {
        kinds.push(MapKind::Error);
    }
    if maps
        .units
        .iter()
        .any(|u| u.residual.is_some_and(f64::is_finite))
    {
        kinds.push(MapKind::Residual);
    }
    kinds
}

/// The report as one HTML document.
///
/// `maps` holds the units and fold regions to draw; `None` leaves the maps out.
///
/// # Errors
/// The errors of [`render_map_svg`] for the maps (for example a `split_fold` no
/// unit has).
pub fn render_report_html(
    report: &ReportInput,
    maps: Option<&MapInput>,
    options: &ReportOptions,
) -> Result<String, RenderError> {
    let mut figures = Vec::new();
    if let Some(maps) = maps {
        for kind in report_map_kinds(maps, options.split_fold) {
            let map_options = MapOptions {
                id_prefix: format!("map-{}", kind.slug()),
                ..options.map.clone()
            };
            figures.push((kind, render_map_svg(maps, kind, &map_options)?));
        }
    }
    let run = &report.run;
    let title = format!("Validation report: {}", run.job);
    let mut page =
        String::with_capacity(64 * 1024 + figures.iter().map(|f| f.1.len()).sum::<usize>());
    let _ = write!(
        page,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; style-src 'unsafe-inline'\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <meta name=\"generator\" content=\"geofold {}\">\
         <title>{}</title><style>{STYLE}</style></head><body>",
        escape(&run.tool_version),
        escape(&title)
    );
    let _ = write!(
        page,
        "<header><h1>{}</h1><p class=\"meta\">Run <code>{}</code> \u{00b7} started {}{} \u{00b7} geofold {}</p></header>",
        escape(&title),
        escape(&run.run_id),
        escape(&run.started),
        run.finished
            .as_ref()
            .map(|f| format!(", finished {}", escape(f)))
            .unwrap_or_default(),
        escape(&run.tool_version)
    );
    sections::meaning(&mut page);
    sections::settings(&mut page, run);
    sections::scores(&mut page, report);
    if let Some(comparison) = &report.comparison {
        sections::comparison(&mut page, report, comparison);
    }
    if let Some(distances) = &report.test_distances {
        sections::test_distances(&mut page, distances);
    }
    if !figures.is_empty() {
        sections::maps(&mut page, &figures);
    }
    if !report.coefficients.is_empty() {
        sections::coefficients(&mut page, &report.coefficients);
    }
    if report.held_out_moran.is_some()
        || report.semivariogram.is_some()
        || report.correlogram.is_some()
    {
        sections::autocorrelation(&mut page, report);
    }
    if let Some(distances) = &report.nearest_distances {
        sections::nearest_distances(&mut page, distances);
    }
    if !report.history.is_empty() {
        sections::history(&mut page, &report.history);
    }
    let _ = writeln!(
        page,
        "<footer><p>Made by geofold {} from run <code>{}</code> of job {}. Validation scores describe \
         predictive skill, not causes; they do not replace domain judgment, local rules or licensed practice.</p>\
         </footer></body></html>",
        escape(&run.tool_version),
        escape(&run.run_id),
        escape(&run.job)
    );
    Ok(page)
}

/// The page's styles: plain, printable, no external fonts.
const STYLE: &str = "\
body{font-family:'DejaVu Sans',Verdana,Arial,sans-serif;color:#222;background:#fff;max-width:1000px;margin:0 auto;padding:24px;line-height:1.45}\
h1{font-size:1.6em;margin:0 0 .2em}h2{font-size:1.25em;margin:1.8em 0 .5em;border-bottom:1px solid #ccc;padding-bottom:.2em}\
h3{font-size:1.05em;margin:1.2em 0 .4em}.meta{color:#555;margin:0}code{font-size:.92em}\
.notice{border-left:4px solid #4455bb;background:#f3f5fb;padding:.6em 1em;margin:1.2em 0}\
table{border-collapse:collapse;margin:.5em 0 1em}th,td{border:1px solid #d0d0d0;padding:.25em .6em;text-align:left;vertical-align:top}\
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}th{background:#f2f2f2}\
dl.settings{display:grid;grid-template-columns:max-content 1fr;gap:.25em 1.2em}dl.settings dt{font-weight:bold}dl.settings dd{margin:0}\
figure{margin:1em 0}figure svg{max-width:100%;height:auto}figcaption{color:#444;font-size:.92em}\
.sentence{font-size:1.05em}.advice{white-space:pre-line}footer{margin-top:2.5em;color:#555;font-size:.9em;border-top:1px solid #ccc}";

#[cfg(test)]
mod tests;
