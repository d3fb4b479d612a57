//! geofold's entry point: parse, run, print, and map the outcome to an exit code.

use std::io::Write;

use clap::Parser;
use geofold::cli::{Cli, Command};
use geofold::error::{exit, Error};
use geofold::report::Summary;

fn main() {
    std::panic::set_hook(Box::new(|info| {
        eprintln!("geofold: internal error (a bug; please report it): {info}");
        std::process::exit(exit::SOFTWARE);
    }));
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(error) => {
            let _ = error.print();
            std::process::exit(if error.use_stderr() {
                exit::USAGE
            } else {
                exit::OK
            });
        }
    };
    init_logging(cli.verbose, cli.quiet);
    let (json, outcome) = match &cli.command {
        Command::Run(args) => (
            args.output.json,
            geofold::cli::run::run(args).map(Output::Summary),
        ),
        Command::Demo(args) => (
            args.json,
            geofold::cli::demo::run(args).map(|(s, hint)| Output::Demo(s, hint)),
        ),
        Command::Export(args) => (
            args.json,
            geofold::cli::export::run(args).map(Output::Export),
        ),
        Command::Score(args) => (
            args.json,
            geofold::cli::score::run(args).map(Output::Summary),
        ),
    };
    std::process::exit(finish(json, outcome));
}

enum Output {
    Summary(Summary),
    Demo(Summary, String),
    Export(geofold::cli::export::ExportReport),
}

fn finish(json: bool, outcome: Result<Output, Error>) -> i32 {
    let mut stdout = std::io::stdout().lock();
    match outcome {
        Ok(output) => {
            let text = match (&output, json) {
                (Output::Summary(s), true) | (Output::Demo(s, _), true) => {
                    serde_json::to_string_pretty(s).unwrap_or_default()
                }
                (Output::Summary(s), false) => s.to_text(),
                (Output::Demo(s, hint), false) => format!("{}\n{hint}", s.to_text()),
                (Output::Export(report), true) => {
                    serde_json::to_string_pretty(report).unwrap_or_default()
                }
                (Output::Export(report), false) => report.to_text(),
            };
            // A closed pipe (geofold run … | head) is not a failure.
            let _ = writeln!(stdout, "{text}");
            exit::OK
        }
        Err(error) => {
            let code = error.exit_code();
            eprintln!("geofold: {error}");
            if json {
                let sqlstate = match &error {
                    Error::Database { sqlstate, .. } => sqlstate.clone(),
                    _ => None,
                };
                let document = serde_json::json!({
                    "schema_version": geofold::report::JSON_SCHEMA_VERSION,
                    "status": "failed",
                    "exit_code": code,
                    "error": { "kind": error.kind(), "message": error.to_string(), "sqlstate": sqlstate },
                });
                let _ = writeln!(
                    stdout,
                    "{}",
                    serde_json::to_string_pretty(&document).unwrap_or_default()
                );
            }
            code
        }
    }
}

fn init_logging(verbose: u8, quiet: bool) {
    let level = match (quiet, verbose) {
        (true, _) => "error",
        (false, 0) => "warn",
        (false, 1) => "info",
        (false, 2) => "debug",
        _ => "trace",
    };
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(format!("geofold={level}")));
    let ansi = std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty())
        && std::io::IsTerminal::is_terminal(&std::io::stderr());
    tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_ansi(ansi)
        .init();
}
