//! Writing what `report` and `map` make: the bytes go to a temporary file in
//! the target's directory, which is renamed over the target only when it is
//! complete, so a failure leaves no half-written file (and an earlier file of
//! that name as it was). Also the shared run choice and the mapping of
//! rendering errors to geofold's errors.

use std::io::Write as _;
use std::path::Path;

use clap::Args;

use super::store::StoreArgs;
use crate::adapters::history::Store;
use crate::error::{Error, FileProblem, Location};
use crate::readback::load::{load, Reading, RunChoice};
use crate::readback::StoredRun;
use crate::render::RenderError;

/// Which run to draw.
#[derive(Debug, Clone, Args)]
#[group(required = true, multiple = false)]
pub struct RunArgs {
    /// The run to draw (a run id, as geofold history lists).
    #[arg(long, value_name = "RUN_ID")]
    pub run: Option<String>,
    /// Draw the latest successful run of this job.
    #[arg(long, value_name = "NAME")]
    pub job: Option<String>,
}

impl RunArgs {
    /// The run asked for.
    ///
    /// # Errors
    /// [`Error::Usage`] for a run id that is not a UUID or a bad job label.
    pub fn choice(&self) -> Result<RunChoice, Error> {
        match (&self.run, &self.job) {
            (Some(text), _) => Ok(RunChoice::Run(super::store::run_id(text)?)),
            (None, Some(job)) => {
                crate::adapters::check_job(job)?;
                Ok(RunChoice::Job(job.clone()))
            }
            (None, None) => Err(Error::Usage("name --run RUN_ID or --job NAME".into())),
        }
    }
}

/// Opens the store named and reads the run asked for with `reading`.
///
/// # Errors
/// As [`RunArgs::choice`], [`StoreArgs::open`] and [`load`].
pub fn read_run(
    store: &StoreArgs,
    run: &RunArgs,
    reading: Reading,
) -> Result<(Box<dyn Store>, StoredRun), Error> {
    let choice = run.choice()?;
    let mut opened = store.open(run.job.as_deref())?;
    let stored = load(opened.as_mut(), &choice, reading)?;
    Ok((opened, stored))
}

/// The fold whose split is drawn: `fold`, or the run's lowest.
///
/// # Errors
/// [`Error::Usage`] (64) for a fold the run does not have, naming its folds.
pub fn split_fold(stored: &StoredRun, fold: Option<u32>) -> Result<u32, Error> {
    let folds = stored.fold_numbers();
    let fold = fold.or_else(|| folds.first().copied()).unwrap_or(1);
    if folds.contains(&fold) {
        return Ok(fold);
    }
    let list: Vec<String> = folds.iter().map(u32::to_string).collect();
    Err(Error::Usage(format!(
        "--fold {fold}: run {} has folds {}",
        stored.run.run_id,
        if list.is_empty() {
            "none".to_string()
        } else {
            list.join(", ")
        }
    )))
}

/// A rendering error of run `run_id` as geofold's error: a fold the run does
/// not have or a size out of range is a usage error (64); input that cannot
/// be drawn is bad data (65).
pub fn render_error(error: RenderError, run_id: &str) -> Error {
    match error {
        RenderError::NoSuchFold { .. } | RenderError::Size { .. } => {
            Error::Usage(format!("run {run_id}: {error}"))
        }
        RenderError::Input { .. } => Error::Input {
            problems: vec![(
                Location {
                    table: format!("run {run_id}"),
                    column: None,
                    row_id: None,
                },
                error.to_string(),
            )],
        },
        RenderError::Png { .. } => Error::Internal(error.to_string()),
    }
}

fn cannot_create(path: &Path, why: String) -> Error {
    Error::File {
        path: path.display().to_string(),
        problem: format!("cannot write the output: {why}; nothing was written"),
        kind: FileProblem::CannotCreate,
    }
}

/// Writes `bytes` to `path` through a temporary file in the same directory.
///
/// # Errors
/// [`Error::File`] with exit 73 when the directory is missing or not
/// writable, or the file cannot be replaced; nothing is left behind.
pub fn write_atomically(path: &Path, bytes: &[u8]) -> Result<(), Error> {
    let directory = match path.parent() {
        Some(dir) if !dir.as_os_str().is_empty() => dir.to_path_buf(),
        _ => std::path::PathBuf::from("."),
    };
    if path.is_dir() {
        return Err(cannot_create(path, "it is a directory".into()));
    }
    let name = path
        .file_name()
        .ok_or_else(|| cannot_create(path, "it names no file".into()))?;
    let temporary = directory.join(format!(
        ".{}.geofold-{}.tmp",
        name.to_string_lossy(),
        std::process::id()
    ));
    let written = (|| {
        let mut file = std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&temporary)?;
        file.write_all(bytes)?;
        file.sync_all()?;
        std::fs::rename(&temporary, path)
    })();
    written.map_err(|error| {
        let _ = std::fs::remove_file(&temporary);
        cannot_create(path, error.to_string())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_failed_write_leaves_nothing_and_a_good_one_replaces_the_file() {
        let dir = std::env::temp_dir().join(format!("geofold-output-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let target = dir.join("map.svg");
        write_atomically(&target, b"first").unwrap();
        write_atomically(&target, b"second").unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"second");
        let missing = dir.join("no-such-dir").join("map.svg");
        let error = write_atomically(&missing, b"x").unwrap_err();
        assert_eq!(error.exit_code(), crate::error::exit::CANT_CREATE);
        let left: Vec<_> = std::fs::read_dir(&dir).unwrap().collect();
        assert_eq!(left.len(), 1, "only map.svg remains: {left:?}");
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
