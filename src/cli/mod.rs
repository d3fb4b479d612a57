//! The command line: one module per subcommand, each with its arguments, help
//! and `run`.

pub mod demo;
pub mod export;
pub mod run;

use clap::{Parser, Subcommand};

/// Exit status table shown by `--help`.
pub const EXIT_STATUS_HELP: &str = "\
EXIT STATUS
  0   ok: results written
  2   busy: another run of the same job is running (see --wait); nothing was done
  64  usage: bad options or arguments
  65  bad input data: duplicate ids, a row skipped under --strict, an unfittable fold,
      a geometry column mixing SRIDs, a results store geofold did not make; folds that
      cannot be built (a block larger than the study area, fewer blocks, clusters or groups
      than folds, a radius or matching leaving too few training units), prediction
      locations in another SRID, a group column that is not integer or text
  66  the source table, schema, column, file or layer, or the prediction table or layer,
      does not exist
  69  the database server is unreachable, or PostGIS is not installed
  70  internal error (a bug: please report it)
  73  the output file or table cannot be created
  74  reading or writing a file failed
  75  temporary failure (connection lost, lock or statement timeout, file locked): retry later
  77  permission denied
  78  bad connection string or configuration

ENVIRONMENT
  Without --db, and for whatever --db leaves out, the connection service file and the PG*
  variables (PGHOST, PGPORT, PGDATABASE, PGUSER, PGPASSWORD, PGSSLMODE, PGAPPNAME, …) are read
  as libpq does; a missing password is looked up in PGPASSFILE or ~/.pgpass.
  RUST_LOG sets the log filter; NO_COLOR turns colour off.";

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
    /// Only errors on stderr.
    #[arg(short, long, global = true)]
    pub quiet: bool,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Validate a model with spatial folds and write the results back.
    Run(Box<run::RunArgs>),
    /// Write the invented demo scenario, validate it with grid and random folds, and say where to look.
    Demo(demo::DemoArgs),
    /// Copy one run's results (or a job's latest) from PostGIS into a GeoPackage.
    Export(export::ExportArgs),
}
