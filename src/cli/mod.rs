//! The command line: one module per subcommand, each with its arguments, help
//! and `run`.

pub mod compare;
pub mod completions;
pub mod config_check;
pub mod demo;
pub mod export;
pub mod history;
pub mod inspect;
pub mod man;
pub mod map;
pub mod output;
pub mod pin;
pub mod prune;
pub mod report;
pub mod run;
pub mod run_jobs;
pub mod score;
pub mod store;

use clap::{Parser, Subcommand, ValueEnum};

/// Exit status table shown by `--help` and the man page.
pub const EXIT_STATUS_HELP: &str = "\
EXIT STATUS
  0   ok: results written; or --skip-unchanged found nothing new; or config-check found no problem
  1   results written, and a drift gate (--gate) was breached; the summary names the gate,
      the value, the baseline and the limit
  2   busy: another run of the same job is running (see --wait); nothing was done
  64  usage: bad options or arguments
  65  bad input data: duplicate ids, a row skipped under --strict, an unfittable fold
      (constant or collinear feature, separation, no convergence), a target that does not
      fit the model (not 0/1, a negative or non-integer count, a non-positive exposure), a
      held-out level unseen in training, predictions for geofold score that miss, repeat or
      misplace units, a geometry column mixing SRIDs, a results store geofold did not make;
      folds that cannot be built (a block larger than the study area, fewer blocks, clusters
      or groups than folds, a radius or matching leaving too few training units), prediction
      locations in another SRID, a group column that is not integer or text
  66  the source table, schema, column, file or layer, the prediction table or layer, or the
      job file does not exist
  69  the database server is unreachable (after retrying one that is not up yet), or PostGIS
      is not installed
  70  internal error (a bug: please report it)
  73  the output file or table cannot be created
  74  reading or writing a file failed
  75  temporary failure (connection lost, lock or statement timeout, file locked): the run was
      rolled back and marked failed; retry later
  77  permission denied
  78  bad connection string, configuration or job file (the message names file, line and key)

  run --config returns the worst outcome of its jobs, in this order: 70, 78, 64, 77, 66, 65,
  73, 74 (a person must fix something), then 69, 75 (a later try may work), then 2, then 1,
  then 0.

ENVIRONMENT
  Without --db, and for whatever --db leaves out, the connection service file and the PG*
  variables (PGHOST, PGPORT, PGDATABASE, PGUSER, PGPASSWORD, PGSSLMODE, PGAPPNAME, …) are read
  as libpq does; a missing password is looked up in PGPASSFILE or ~/.pgpass.
  GEOFOLD_CONNECT_RETRY (seconds, default 30) bounds the retrying of a server that is not up.
  GEOFOLD_LOG_FORMAT sets --log-format. RUST_LOG sets the log filter; NO_COLOR turns colour
  off; CI (set, not empty) turns progress bars off.";

/// How log lines on stderr look.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LogFormat {
    /// Lines for people.
    Text,
    /// One JSON object per line, for log collectors.
    Json,
}

/// Spatial cross-validation of predictive models, in and out of PostGIS and GeoPackage.
///
/// Validation scores describe predictive skill for places not seen in training; they
/// say nothing about causes, and they do not replace domain judgment, local rules or
/// licensed practice.
#[derive(Debug, Parser)]
#[command(name = "geofold", version, after_long_help = EXIT_STATUS_HELP)]
pub struct Cli {
    /// More log output on stderr (-v info, -vv debug, -vvv trace).
    #[arg(short, long, action = clap::ArgAction::Count, global = true, conflicts_with = "quiet")]
    pub verbose: u8,
    /// Only errors on stderr, and no progress bars.
    #[arg(short, long, global = true)]
    pub quiet: bool,
    /// Log lines on stderr as text or as JSON (one object per line, for log collectors).
    #[arg(
        long,
        global = true,
        value_enum,
        default_value = "text",
        env = "GEOFOLD_LOG_FORMAT"
    )]
    pub log_format: LogFormat,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Validate a model with spatial folds and write the results back (or run a job file's jobs).
    Run(Box<run::RunArgs>),
    /// Check a job file without connecting to anything; every problem with its line.
    ConfigCheck(config_check::ConfigCheckArgs),
    /// List runs with their status and scores, newest first.
    History(history::HistoryArgs),
    /// Compare two runs: scores, per-fold changes, units added or removed, largest error changes.
    Compare(compare::CompareArgs),
    /// Pin a run as its job's baseline for relative drift gates.
    Pin(pin::PinArgs),
    /// Remove runs beyond an age or a count (never a pinned baseline), in one transaction.
    Prune(prune::PruneArgs),
    /// Write the invented demo scenario, validate it with grid and random folds, and say where to look.
    Demo(demo::DemoArgs),
    /// Copy one run's results (or a job's latest) from PostGIS into a GeoPackage.
    Export(export::ExportArgs),
    /// Write one self-contained HTML report of a run (or a job's latest): settings, scores,
    /// maps, diagnostics and the job's history.
    Report(report::ReportArgs),
    /// Draw one map of a run (or a job's latest) as SVG or PNG: folds, one fold's split, error
    /// or residual.
    Map(map::MapArgs),
    /// Measure spatial autocorrelation of the target and of a model's residuals, the
    /// semivariogram, and advise a block size and exclusion radius.
    Inspect(Box<inspect::InspectArgs>),
    /// Print shell completions.
    Completions(completions::CompletionsArgs),
    /// Print the man page (or write every page into a directory).
    Man(man::ManArgs),
    /// Score the held-out predictions of a model fitted elsewhere, for a run made with
    /// geofold run --assign-only.
    Score(score::ScoreArgs),
}
