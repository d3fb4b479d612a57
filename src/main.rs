//! geofold's entry point: parse, run, print, and map the outcome to an exit code.

use std::io::Write;

use clap::{CommandFactory, FromArgMatches};
use geofold::cli::run_jobs::error_json;
use geofold::cli::{Cli, Command, LogFormat};
use geofold::error::{exit, Error};
use geofold::jobs::Overrides;
use geofold::pipeline::Outcome;
use geofold::progress::{Bars, Progress, Silent};

fn main() {
    std::panic::set_hook(Box::new(|info| {
        eprintln!("geofold: internal error (a bug; please report it): {info}");
        std::process::exit(exit::SOFTWARE);
    }));
    let parsed = Cli::command()
        .try_get_matches()
        .and_then(|matches| Cli::from_arg_matches(&matches).map(|cli| (cli, matches)));
    let (cli, matches) = match parsed {
        Ok(parsed) => parsed,
        Err(error) => {
            let _ = error.print();
            std::process::exit(if error.use_stderr() {
                exit::USAGE
            } else {
                exit::OK
            });
        }
    };
    init_logging(cli.verbose, cli.quiet, cli.log_format);
    let json = match &cli.command {
        Command::Run(args) => args.output.json,
        Command::ConfigCheck(args) => args.json,
        Command::History(args) => args.json,
        Command::Compare(args) => args.json,
        Command::Pin(args) => args.json,
        Command::Prune(args) => args.json,
        Command::Demo(args) => args.json,
        Command::Export(args) => args.json,
        Command::Inspect(args) => args.json,
        Command::Report(args) => args.json,
        Command::Map(args) => args.json,
        Command::Score(args) => args.json,
        Command::Completions(_) | Command::Man(_) => false,
    };
    let bars = if cli.quiet
        || json
        || cli.log_format == LogFormat::Json
        || std::env::var_os("CI").is_some_and(|v| !v.is_empty())
    {
        None
    } else {
        Bars::on_terminal()
    };
    let progress: &dyn Progress = match &bars {
        Some(bars) => bars,
        None => &Silent,
    };
    let outcome = match &cli.command {
        Command::Run(args) if args.schedule.config.is_some() => {
            let overrides = matches
                .subcommand_matches("run")
                .map(Overrides::from_matches)
                .unwrap_or_default();
            geofold::cli::run_jobs::run(args, &overrides, progress)
                .map(|r| Printed::new(r.exit_code, r.to_text(), &r))
        }
        Command::Run(args) => geofold::cli::run::run(args, progress).map(|outcome| match outcome {
            Outcome::Finished(s) => Printed::new(s.exit_code, s.to_text(), &s),
            Outcome::Unchanged(u) => Printed::new(
                exit::OK,
                u.to_text(),
                &serde_json::json!({
                    "schema_version": geofold::report::JSON_SCHEMA_VERSION,
                    "status": "unchanged",
                    "exit_code": exit::OK,
                    "unchanged": u,
                }),
            ),
        }),
        Command::ConfigCheck(args) => geofold::cli::config_check::run(args)
            .map(|r| Printed::new(r.exit_code, r.to_text(), &r)),
        Command::History(args) => {
            geofold::cli::history::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Compare(args) => {
            geofold::cli::compare::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Pin(args) => {
            geofold::cli::pin::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Prune(args) => {
            geofold::cli::prune::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Demo(args) => {
            geofold::cli::demo::run(args).map(|d| Printed::new(d.exit_code, d.to_text(), &d))
        }
        Command::Export(args) => {
            geofold::cli::export::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Score(args) => {
            geofold::cli::score::run(args).map(|s| Printed::new(s.exit_code, s.to_text(), &s))
        }
        Command::Inspect(args) => {
            geofold::cli::inspect::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Report(args) => {
            geofold::cli::report::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Map(args) => {
            geofold::cli::map::run(args).map(|r| Printed::new(exit::OK, r.to_text(), &r))
        }
        Command::Completions(args) => {
            geofold::cli::completions::run(args).map(|()| Printed::nothing())
        }
        Command::Man(args) => geofold::cli::man::run(args).map(|()| Printed::nothing()),
    };
    drop(bars);
    std::process::exit(finish(json, cli.log_format, outcome));
}

/// What a subcommand prints: text, or its JSON document, and its exit code.
struct Printed {
    code: i32,
    text: Option<String>,
    json: serde_json::Value,
}

impl Printed {
    fn new(code: i32, text: String, json: &impl serde::Serialize) -> Printed {
        Printed {
            code,
            text: Some(text),
            json: serde_json::to_value(json).unwrap_or_default(),
        }
    }

    /// For subcommands that wrote their output themselves.
    fn nothing() -> Printed {
        Printed {
            code: exit::OK,
            text: None,
            json: serde_json::Value::Null,
        }
    }
}

fn finish(json: bool, log_format: LogFormat, outcome: Result<Printed, Error>) -> i32 {
    let mut stdout = std::io::stdout().lock();
    match outcome {
        Ok(printed) => {
            let text = match (json, printed.text) {
                (_, None) => return printed.code,
                (true, Some(_)) => serde_json::to_string_pretty(&printed.json).unwrap_or_default(),
                (false, Some(text)) => text,
            };
            // A closed pipe (geofold run … | head) is not a failure.
            let _ = writeln!(stdout, "{}", text.trim_end());
            printed.code
        }
        Err(error) => {
            let code = error.exit_code();
            // One JSON object per line on stderr under --log-format json; a plain line otherwise.
            match log_format {
                LogFormat::Json => {
                    tracing::error!(exit_code = code, kind = error.kind(), "{error}")
                }
                LogFormat::Text => eprintln!("geofold: {error}"),
            }
            if json {
                let document = serde_json::json!({
                    "schema_version": geofold::report::JSON_SCHEMA_VERSION,
                    "status": "failed",
                    "exit_code": code,
                    "error": error_json(&error),
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

fn init_logging(verbose: u8, quiet: bool, format: LogFormat) {
    let level = match (quiet, verbose) {
        (true, _) => "error",
        (false, 0) => "warn",
        (false, 1) => "info",
        (false, 2) => "debug",
        _ => "trace",
    };
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(format!("geofold={level}")));
    match format {
        LogFormat::Json => tracing_subscriber::fmt()
            .json()
            .flatten_event(true)
            .with_current_span(true)
            .with_span_list(false)
            .with_env_filter(filter)
            .with_writer(std::io::stderr)
            .init(),
        LogFormat::Text => {
            let ansi = std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty())
                && std::io::IsTerminal::is_terminal(&std::io::stderr());
            tracing_subscriber::fmt()
                .with_env_filter(filter)
                .with_writer(std::io::stderr)
                .with_ansi(ansi)
                .init()
        }
    }
}
