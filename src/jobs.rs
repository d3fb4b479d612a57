//! Job files: named jobs in TOML, each turned into the same `run` options
//! the command line gives, and so into a [`RunSpec`].
//!
//! ```toml
//! [job.nitrate]
//! db = "service=agency_gis"
//! table = "hydro.subcatchments"
//! target = "nitrate_mg_l"
//! features = ["farmland_share", "rainfall_mm"]
//! block-size = 4000
//! gate = ["rmse<=+10%"]
//! ```
//!
//! # Rules
//! - The file holds only `[job.NAME]` tables; NAME is the job label. Jobs run
//!   in file order.
//! - A job's keys are the long option names of `geofold run` without the
//!   dashes (`block-size`, `results-schema`, `lock-timeout`, `gate`, …). A
//!   flag takes `true` or `false`; an option that may be repeated (`gate`,
//!   `features`) takes a list or one value; every other option one string or
//!   number. `config`, `job` and `json` belong to the command line, not to a job.
//! - Every key is looked up in the definition of `run` itself and handed to
//!   the same parser, so a new option of `run` is a job key with no second
//!   edit, and a key `run` does not know is an error naming its line.
//! - Options given on the command line beside `--config` replace the file's
//!   value of the same option in every job.
//! - Errors name the file, the line, the job and the key at fault (exit 78).

use std::ffi::OsString;
use std::path::{Path, PathBuf};

use clap::parser::ValueSource;
use clap::{ArgAction, ArgMatches, Args, Command, FromArgMatches};
use toml::de::{DeTable, DeValue};

use crate::cli::run::RunArgs;
use crate::error::{Error, FileProblem};
use crate::spec::RunSpec;

/// Options that belong to the command line, never to a job.
const COMMAND_LINE_ONLY: &[(&str, &str)] = &[
    ("config", "a job file cannot name another job file"),
    (
        "job",
        "a job's label is the NAME of its [job.NAME] table; leave the key out",
    ),
    (
        "json",
        "--json sets the output of the whole command; give it on the command line",
    ),
];

/// A value as written in the file.
#[derive(Debug, Clone, PartialEq)]
enum Value {
    Bool(bool),
    Scalar(String),
    List(Vec<String>),
    Other(&'static str),
}

/// One `key = value` of a job.
#[derive(Debug, Clone)]
struct Entry {
    key: String,
    line: usize,
    value: Value,
}

/// One `[job.NAME]` table.
#[derive(Debug, Clone)]
pub struct Job {
    /// Its name, the job label.
    pub name: String,
    /// The line of its table header.
    pub line: usize,
    entries: Vec<Entry>,
}

/// A parsed job file.
#[derive(Debug, Clone)]
pub struct JobFile {
    /// The file as given.
    pub path: PathBuf,
    /// Its jobs, in file order.
    pub jobs: Vec<Job>,
}

/// Options given on the command line beside `--config`: they replace the
/// file's values of the same options.
#[derive(Debug, Clone, Default)]
pub struct Overrides {
    ids: Vec<String>,
    tokens: Vec<OsString>,
}

/// The `run` subcommand's definition, for parsing a job's options.
fn run_command() -> Command {
    RunArgs::augment_args(Command::new("run"))
        .no_binary_name(true)
        .allow_negative_numbers(true)
}

impl Overrides {
    /// The options of `run` given on the command line (`--config`, `--job`
    /// and `--json` excepted), read from its parsed matches.
    pub fn from_matches(matches: &ArgMatches) -> Overrides {
        let mut overrides = Overrides::default();
        for arg in run_command().get_arguments() {
            let id = arg.get_id().as_str();
            let Some(long) = arg.get_long() else {
                continue;
            };
            if COMMAND_LINE_ONLY.iter().any(|(key, _)| *key == id) {
                continue;
            }
            if matches.value_source(id) != Some(ValueSource::CommandLine) {
                continue;
            }
            overrides.ids.push(id.to_string());
            if !arg.get_action().takes_values() {
                overrides.tokens.push(format!("--{long}").into());
                continue;
            }
            if let Ok(Some(values)) = matches.try_get_raw(id) {
                for value in values {
                    let mut token = OsString::from(format!("--{long}="));
                    token.push(value);
                    overrides.tokens.push(token);
                }
            }
        }
        overrides
    }
}

/// The line (from 1) of byte `offset` in `text`.
fn line_of(text: &str, offset: usize) -> usize {
    text.as_bytes()
        .iter()
        .take(offset.min(text.len()))
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}

fn scalar(value: &DeValue<'_>) -> Option<String> {
    match value {
        DeValue::String(text) => Some(text.to_string()),
        DeValue::Integer(number) => i128::from_str_radix(number.as_str(), number.radix())
            .ok()
            .map(|n| n.to_string()),
        DeValue::Float(number) => Some(number.as_str().to_string()),
        _ => None,
    }
}

fn value_of(value: &DeValue<'_>) -> Value {
    match value {
        DeValue::Boolean(flag) => Value::Bool(*flag),
        DeValue::Array(items) => {
            let texts: Option<Vec<String>> =
                items.iter().map(|item| scalar(item.get_ref())).collect();
            texts.map_or(Value::Other("a list of tables or lists"), Value::List)
        }
        DeValue::Datetime(_) => Value::Other("a date"),
        DeValue::Table(_) => Value::Other("a table"),
        other => scalar(other).map_or(Value::Other("a value"), Value::Scalar),
    }
}

impl JobFile {
    /// Reads and parses a job file (its jobs' options are checked by
    /// [`JobFile::spec`]).
    ///
    /// # Errors
    /// A missing or unreadable file (66, 74); TOML that does not parse, or a
    /// file with anything but `[job.NAME]` tables, or none (78, naming the line).
    pub fn load(path: &Path) -> Result<JobFile, Error> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::File {
            path: path.display().to_string(),
            problem: format!("cannot read the job file: {e}"),
            kind: match e.kind() {
                std::io::ErrorKind::NotFound => FileProblem::Missing,
                std::io::ErrorKind::PermissionDenied => FileProblem::Permission,
                std::io::ErrorKind::InvalidData => FileProblem::BadContent,
                _ => FileProblem::Io,
            },
        })?;
        JobFile::parse(path, &text)
    }

    /// Parses job-file text read from `path`.
    ///
    /// # Errors
    /// As [`JobFile::load`].
    pub fn parse(path: &Path, text: &str) -> Result<JobFile, Error> {
        let file = path.display().to_string();
        let fail = |line: usize, key: Option<&str>, problem: String| Error::JobFile {
            file: file.clone(),
            line,
            job: None,
            key: key.map(str::to_string),
            problem,
        };
        let root = DeTable::parse(text).map_err(|e| {
            let line = e.span().map_or(1, |span| line_of(text, span.start));
            fail(
                line,
                None,
                format!("not valid TOML: {}", e.message().trim()),
            )
        })?;
        let mut jobs = Vec::new();
        for (key, value) in root.get_ref() {
            let line = line_of(text, key.span().start);
            if key.get_ref().as_ref() != "job" {
                return Err(fail(
                    line,
                    Some(key.get_ref().as_ref()),
                    "unknown key; a job file holds only [job.NAME] tables".into(),
                ));
            }
            let DeValue::Table(tables) = value.get_ref() else {
                return Err(fail(
                    line,
                    Some("job"),
                    "job must be tables: [job.NAME]".into(),
                ));
            };
            for (name, table) in tables {
                let name_line = line_of(text, name.span().start);
                let name = name.get_ref().to_string();
                let DeValue::Table(keys) = table.get_ref() else {
                    return Err(fail(
                        name_line,
                        Some(&format!("job.{name}")),
                        "a job must be a table: [job.NAME] followed by its keys".into(),
                    ));
                };
                let entries = keys
                    .iter()
                    .map(|(key, value)| Entry {
                        key: key.get_ref().to_string(),
                        line: line_of(text, key.span().start),
                        value: value_of(value.get_ref()),
                    })
                    .collect();
                jobs.push(Job {
                    name,
                    line: name_line,
                    entries,
                });
            }
        }
        if jobs.is_empty() {
            return Err(fail(
                1,
                None,
                "no jobs: a job file holds [job.NAME] tables, one per job".into(),
            ));
        }
        Ok(JobFile {
            path: path.to_path_buf(),
            jobs,
        })
    }

    /// The job of that name.
    ///
    /// # Errors
    /// [`Error::Usage`] naming the jobs there are.
    pub fn job(&self, name: &str) -> Result<&Job, Error> {
        self.jobs
            .iter()
            .find(|job| job.name == name)
            .ok_or_else(|| {
                let names: Vec<&str> = self.jobs.iter().map(|job| job.name.as_str()).collect();
                Error::Usage(format!(
                    "--job {name}: {} has no such job; its jobs are {}",
                    self.path.display(),
                    names.join(", ")
                ))
            })
    }

    fn problem(&self, job: &Job, line: usize, key: Option<&str>, problem: String) -> Error {
        Error::JobFile {
            file: self.path.display().to_string(),
            line,
            job: Some(job.name.clone()),
            key: key.map(str::to_string),
            problem,
        }
    }

    /// The problem of an error about a job's options, placed at the line of
    /// the first key the message names as `--key`.
    fn place(&self, job: &Job, overrides: &Overrides, message: &str) -> Error {
        let message = message.trim_start_matches("usage: ").to_string();
        let mentioned = |key: &str| {
            let option = format!("--{key}");
            message.match_indices(&option).any(|(at, _)| {
                !message[at + option.len()..]
                    .starts_with(|c: char| c.is_ascii_alphanumeric() || c == '-')
            })
        };
        let command = run_command();
        let overridden = |key: &str| {
            command
                .get_arguments()
                .find(|arg| arg.get_long() == Some(key))
                .is_some_and(|arg| overrides.ids.iter().any(|id| id == arg.get_id()))
        };
        if let Some(entry) = job
            .entries
            .iter()
            .find(|e| mentioned(&e.key) && !overridden(&e.key))
        {
            return self.problem(job, entry.line, Some(&entry.key), message);
        }
        let from_command_line = overrides.ids.iter().any(|id| {
            command
                .get_arguments()
                .find(|arg| arg.get_id() == id)
                .and_then(|arg| arg.get_long())
                .is_some_and(&mentioned)
        });
        let message = if from_command_line {
            format!("{message} (an option given on the command line)")
        } else {
            message
        };
        self.problem(job, job.line, None, message)
    }

    /// The `run` arguments of a job: its keys as options, minus those the
    /// command line overrides, plus the command line's.
    fn tokens(&self, job: &Job, overrides: &Overrides) -> Result<Vec<OsString>, Error> {
        let command = run_command();
        let mut tokens = Vec::new();
        for entry in &job.entries {
            let key = entry.key.as_str();
            let at = |problem: String| self.problem(job, entry.line, Some(key), problem);
            if let Some((_, why)) = COMMAND_LINE_ONLY.iter().find(|(k, _)| *k == key) {
                return Err(at(format!("not a job setting: {why}")));
            }
            let Some(arg) = command.get_arguments().find(|a| a.get_long() == Some(key)) else {
                let known: Vec<String> = command
                    .get_arguments()
                    .filter_map(|a| a.get_long().map(str::to_string))
                    .filter(|long| !COMMAND_LINE_ONLY.iter().any(|(k, _)| k == long))
                    .collect();
                let hint = crate::adapters::suggest(&key.replace('_', "-"), &known);
                return Err(at(format!(
                    "unknown key{hint}; a job's keys are the long options of geofold run \
                     (geofold run --help)"
                )));
            };
            if overrides.ids.iter().any(|id| id == arg.get_id()) {
                continue;
            }
            let option = format!("--{key}");
            let repeatable = matches!(arg.get_action(), ArgAction::Append);
            match (&entry.value, arg.get_action().takes_values()) {
                (Value::Bool(true), false) => tokens.push(option.into()),
                (Value::Bool(false), false) => {}
                (_, false) => {
                    return Err(at(format!("{option} is a flag: write true or false")));
                }
                (Value::Bool(_), true) => {
                    return Err(at(format!("{option} takes a value, not true or false")));
                }
                (Value::Scalar(text), true) => tokens.push(format!("{option}={text}").into()),
                (Value::List(items), true) if repeatable => {
                    tokens.extend(items.iter().map(|item| format!("{option}={item}").into()));
                }
                (Value::List(_), true) => {
                    return Err(at(format!("{option} takes one value, not a list")));
                }
                (Value::Other(what), true) => {
                    return Err(at(format!("{what} is not a value of {option}")));
                }
            }
        }
        tokens.extend(overrides.tokens.iter().cloned());
        Ok(tokens)
    }

    /// The `run` options of a job, parsed as the command line parses them.
    ///
    /// # Errors
    /// [`Error::JobFile`] naming the line and key at fault.
    pub fn args(&self, job: &Job, overrides: &Overrides) -> Result<RunArgs, Error> {
        let tokens = self.tokens(job, overrides)?;
        let matches = run_command().try_get_matches_from(tokens).map_err(|e| {
            // clap's message up to its first blank line, without "error: " and the usage.
            let text = e.render().to_string();
            let message: Vec<&str> = text
                .lines()
                .take_while(|line| !line.trim().is_empty())
                .map(str::trim)
                .collect();
            let message = message.join(" ");
            self.place(job, overrides, message.trim_start_matches("error: "))
        })?;
        let mut args = RunArgs::from_arg_matches(&matches)
            .map_err(|e| self.problem(job, job.line, None, e.to_string()))?;
        args.output.job = Some(job.name.clone());
        Ok(args)
    }

    /// The run specification of a job, checked in full (nothing is opened).
    ///
    /// # Errors
    /// [`Error::JobFile`] naming the line and key at fault.
    pub fn spec(&self, job: &Job, overrides: &Overrides) -> Result<RunSpec, Error> {
        let args = self.args(job, overrides)?;
        let spec = args
            .spec()
            .map_err(|e| self.place(job, overrides, &e.to_string()))?;
        spec.check()
            .map_err(|e| self.place(job, overrides, &e.to_string()))?;
        Ok(spec)
    }
}

#[cfg(test)]
mod tests;
