//! `geofold man`: man pages generated from the command-line definition
//! (clap_mangen), with the exit status table of `--help`.

use std::path::PathBuf;

use clap::{Args, CommandFactory};

use crate::error::{Error, FileProblem};

/// `geofold man`.
#[derive(Debug, Clone, Args)]
pub struct ManArgs {
    /// Write geofold.1 and one page per subcommand (geofold-run.1, …) into this directory
    /// instead of printing geofold.1.
    #[arg(long, value_name = "DIR")]
    pub out_dir: Option<PathBuf>,
}

/// Prints the page, or writes every page into `--out-dir`.
///
/// # Errors
/// A directory that cannot be written (73, 74).
pub fn run(args: &ManArgs) -> Result<(), Error> {
    let command = super::Cli::command();
    let io = |path: &std::path::Path, e: std::io::Error, kind| Error::File {
        path: path.display().to_string(),
        problem: format!("cannot write the man pages: {e}"),
        kind,
    };
    match &args.out_dir {
        Some(dir) => {
            if !dir.is_dir() {
                return Err(io(
                    dir,
                    std::io::Error::other("not a directory"),
                    FileProblem::CannotCreate,
                ));
            }
            clap_mangen::generate_to(command, dir).map_err(|e| io(dir, e, FileProblem::Io))
        }
        None => {
            let mut out = std::io::stdout().lock();
            // A closed pipe (geofold man | head) is not a failure.
            let _ = clap_mangen::Man::new(command).render(&mut out);
            Ok(())
        }
    }
}
