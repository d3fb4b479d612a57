//! `geofold report`: one self-contained HTML file about a stored run: its
//! settings in plain words, scores with their spread and the training-mean
//! baseline, the comparison with random folds, the four maps, Moran's I of
//! the held-out residuals, the job's latest inspection and its score history
//! with gates. Reads PostGIS or a GeoPackage alike.

use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use super::output::{read_run, render_error, split_fold, write_atomically, RunArgs};
use super::store::StoreArgs;
use crate::error::Error;
use crate::readback::load::Reading;
use crate::readback::map::take_map_input;
use crate::readback::report::report_input;
use crate::render::report::{render_report_html, report_map_kinds, ReportOptions};

/// `geofold report`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP)]
pub struct ReportArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub run: RunArgs,
    /// The HTML file to write (replaced when it exists; written whole or not at all).
    #[arg(long, value_name = "FILE.html")]
    pub to: PathBuf,
    /// The target's unit, shown with scores and in the map legends (for example mg/L); the
    /// results store does not record it.
    #[arg(long, value_name = "UNIT", default_value = "")]
    pub target_unit: String,
    /// The fold whose split is drawn (default: fold 1).
    #[arg(long, value_name = "K")]
    pub fold: Option<u32>,
    /// Print what was written as JSON.
    #[arg(long)]
    pub json: bool,
}

/// What `report` wrote.
#[derive(Debug, Clone, Serialize)]
pub struct ReportWritten {
    /// The file.
    pub file: String,
    /// Its size in bytes.
    pub bytes: u64,
    /// The run.
    pub run_id: String,
    /// Its job.
    pub job: String,
    /// The results store read.
    pub store: String,
    /// The maps drawn (`folds`, `split-1`, `error`, `residual`).
    pub maps: Vec<String>,
    /// The sections present, in order.
    pub sections: Vec<String>,
    /// Units drawn on the maps.
    pub units_drawn: u64,
    /// Units left off the maps for want of a geometry.
    pub units_without_geometry: u64,
    /// Where the unit geometries came from.
    pub geometries_from: Option<String>,
    /// Why no unit geometry could be read, when none could (the maps are left out).
    pub geometry_problem: Option<String>,
}

impl ReportWritten {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut text = format!(
            "wrote {} ({} bytes): report of run {} of job {} from {}\n  sections: {}\n  maps: {}",
            self.file,
            self.bytes,
            self.run_id,
            self.job,
            self.store,
            self.sections.join(", "),
            if self.maps.is_empty() {
                "none".to_string()
            } else {
                self.maps.join(", ")
            }
        );
        if let Some(problem) = &self.geometry_problem {
            text.push_str(&format!("\n  no maps: {problem}"));
        } else if self.units_without_geometry > 0 {
            text.push_str(&format!(
                "\n  {} unit(s) have no geometry in {} and are left off the maps",
                self.units_without_geometry,
                self.geometries_from.as_deref().unwrap_or("the store")
            ));
        }
        text
    }
}

/// Runs `geofold report`.
///
/// # Errors
/// 64 for a bad run id or fold; 66 for an unknown run or job; 65 for a run
/// that did not succeed; 73 when the file cannot be written; database and
/// file errors.
pub fn run(args: &ReportArgs) -> Result<ReportWritten, Error> {
    let (store, mut stored) = read_run(
        &args.store,
        &args.run,
        Reading {
            units: true,
            job: true,
        },
    )?;
    let report = report_input(&stored, &args.target_unit);
    let maps = take_map_input(&mut stored, &args.target_unit);
    let maps = (!maps.units.is_empty()).then_some(maps);
    let options = ReportOptions {
        split_fold: args.fold,
        ..ReportOptions::default()
    };
    if let (Some(fold), Some(_)) = (args.fold, &maps) {
        split_fold(&stored, Some(fold))?;
    }
    let html = render_report_html(&report, maps.as_ref(), &options)
        .map_err(|e| render_error(e, &stored.run.run_id))?;
    write_atomically(&args.to, html.as_bytes())?;
    let sections = html
        .match_indices("<section id=\"")
        .filter_map(|(at, _)| {
            let rest = &html[at + 13..];
            rest.find('"').map(|end| rest[..end].to_string())
        })
        .collect();
    Ok(ReportWritten {
        file: args.to.display().to_string(),
        bytes: html.len() as u64,
        run_id: stored.run.run_id.clone(),
        job: stored.run.job.clone(),
        store: store.location(),
        maps: maps
            .as_ref()
            .map(|m| {
                report_map_kinds(m, args.fold)
                    .iter()
                    .map(|k| k.slug())
                    .collect()
            })
            .unwrap_or_default(),
        sections,
        units_drawn: maps.as_ref().map_or(0, |m| m.units.len() as u64),
        units_without_geometry: stored.units_without_geometry,
        geometries_from: stored.geometry_origin.as_ref().map(|o| o.read_from.clone()),
        geometry_problem: stored.geometry_problem.clone(),
    })
}
