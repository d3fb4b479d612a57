//! `geofold map`: one map of a stored run, as SVG or PNG, for e-mail and
//! slides: the fold layout, one fold's split, the absolute error or the
//! residual. The format follows the file name (`.svg`, `.png`); PNGs are
//! rendered in Rust with an embedded font, so nothing needs installing.

use std::path::PathBuf;

use clap::{Args, ValueEnum};
use serde::Serialize;

use super::output::{read_run, render_error, split_fold, write_atomically, RunArgs};
use super::store::StoreArgs;
use crate::error::Error;
use crate::readback::load::Reading;
use crate::readback::map::take_map_input;
use crate::render::{render_map_svg, svg_to_png, MapKind, MapOptions};

/// Which map.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Layer {
    /// Fold regions coloured by fold (units coloured by fold when the scheme has no regions).
    Folds,
    /// One fold's test, training and excluded units (--fold, default 1).
    Split,
    /// Absolute held-out error per unit, on a sequential scale.
    Error,
    /// Held-out residual (observed − predicted) per unit, on a scale centred on zero.
    Residual,
}

/// `geofold map`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = crate::cli::EXIT_STATUS_HELP)]
pub struct MapArgs {
    #[command(flatten)]
    #[allow(missing_docs)]
    pub store: StoreArgs,
    #[command(flatten)]
    #[allow(missing_docs)]
    pub run: RunArgs,
    /// The map to draw.
    #[arg(long, value_enum)]
    pub layer: Layer,
    /// With --layer split: the fold (from 1; default: the lowest).
    #[arg(long, value_name = "K")]
    pub fold: Option<u32>,
    /// The file to write: FILE.svg or FILE.png (replaced when it exists; written whole or not
    /// at all).
    #[arg(long, value_name = "FILE.svg|FILE.png")]
    pub to: PathBuf,
    /// Width in pixels (the height is two thirds of it).
    #[arg(long, value_name = "PX", default_value_t = 960,
          value_parser = clap::value_parser!(u32).range(450..=4000))]
    pub width: u32,
    /// The target's unit for the legends (for example mg/L); the results store does not
    /// record it.
    #[arg(long, value_name = "UNIT", default_value = "")]
    pub target_unit: String,
    /// Print what was written as JSON.
    #[arg(long)]
    pub json: bool,
}

/// What `map` wrote.
#[derive(Debug, Clone, Serialize)]
pub struct MapWritten {
    /// The file.
    pub file: String,
    /// `svg` or `png`.
    pub format: &'static str,
    /// Its size in bytes.
    pub bytes: u64,
    /// `folds`, `split-K`, `error` or `residual`.
    pub map: String,
    /// Width and height in pixels.
    pub size: (u32, u32),
    /// The run.
    pub run_id: String,
    /// Its job.
    pub job: String,
    /// The results store read.
    pub store: String,
    /// Units drawn.
    pub units_drawn: u64,
    /// Units left off for want of a geometry.
    pub units_without_geometry: u64,
}

impl MapWritten {
    /// The human summary.
    pub fn to_text(&self) -> String {
        let mut text = format!(
            "wrote {} ({} {}x{}, {} bytes): map {} of run {} of job {}, {} units",
            self.file,
            self.format,
            self.size.0,
            self.size.1,
            self.bytes,
            self.map,
            self.run_id,
            self.job,
            self.units_drawn
        );
        if self.units_without_geometry > 0 {
            text.push_str(&format!(
                "; {} unit(s) without a geometry left off",
                self.units_without_geometry
            ));
        }
        text
    }
}

/// Runs `geofold map`.
///
/// # Errors
/// 64 for a bad run id, a file name that is neither .svg nor .png, --fold
/// without --layer split, or a fold the run does not have; 66 for an unknown
/// run or job, or when no unit's geometry can be found; 65 for a run that did
/// not succeed; 73
/// when the file cannot be written; database and file errors.
pub fn run(args: &MapArgs) -> Result<MapWritten, Error> {
    let format = match args
        .to
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
        .as_deref()
    {
        Some("svg") => "svg",
        Some("png") => "png",
        _ => {
            return Err(Error::Usage(format!(
                "--to {}: name a .svg or a .png file",
                args.to.display()
            )))
        }
    };
    if args.fold.is_some() && args.layer != Layer::Split {
        return Err(Error::Usage("--fold goes with --layer split".into()));
    }
    let (store, mut stored) = read_run(
        &args.store,
        &args.run,
        Reading {
            units: true,
            job: false,
        },
    )?;
    let kind = match args.layer {
        Layer::Folds => MapKind::Folds,
        Layer::Split => MapKind::Split {
            fold: split_fold(&stored, args.fold)?,
        },
        Layer::Error => MapKind::Error,
        Layer::Residual => MapKind::Residual,
    };
    let input = take_map_input(&mut stored, &args.target_unit);
    if input.units.is_empty() {
        return Err(Error::NotFound {
            what: format!(
                "a geometry for any of the {} units of run {}: {}",
                stored.units.len(),
                stored.run.run_id,
                stored
                    .geometry_problem
                    .clone()
                    .unwrap_or_else(|| "the source has none of their ids".to_string())
            ),
        });
    }
    let options = MapOptions {
        width: args.width,
        height: args.width * 2 / 3,
        ..MapOptions::default()
    };
    let svg =
        render_map_svg(&input, kind, &options).map_err(|e| render_error(e, &stored.run.run_id))?;
    let bytes = if format == "png" {
        svg_to_png(&svg, args.width).map_err(|e| render_error(e, &stored.run.run_id))?
    } else {
        svg.into_bytes()
    };
    write_atomically(&args.to, &bytes)?;
    Ok(MapWritten {
        file: args.to.display().to_string(),
        format,
        bytes: bytes.len() as u64,
        map: kind.slug(),
        size: (options.width, options.height),
        run_id: stored.run.run_id.clone(),
        job: stored.run.job.clone(),
        store: store.location(),
        units_drawn: input.units.len() as u64,
        units_without_geometry: stored.units_without_geometry,
    })
}
