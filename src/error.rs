//! The one error type of geofold and its mapping to exit codes.
//!
//! Every variant says *where* the problem is (table, column, row id, fold, file),
//! because the people who read these messages are analysts and schedulers, not
//! the authors. Exit codes follow sysexits(3) where one fits; they are a contract
//! documented in the README and in `geofold --help`.

use std::fmt;

/// Exit codes. Schedulers act on these, so they never change meaning.
pub mod exit {
    /// Everything worked.
    pub const OK: i32 = 0;
    /// Results written, and a drift gate was breached: a result, not an error
    /// (as grep's 1 for "no match").
    pub const GATE_BREACHED: i32 = 1;
    /// Busy: another run of the same job holds its lock; nothing was done.
    pub const BUSY: i32 = 2;
    /// Usage error: bad flags or arguments (EX_USAGE).
    pub const USAGE: i32 = 64;
    /// Bad input data: duplicate ids, a skipped row under `--strict`, an unfittable fold (EX_DATAERR).
    pub const DATA: i32 = 65;
    /// The source table, schema, column, file or layer does not exist (EX_NOINPUT).
    pub const NO_INPUT: i32 = 66;
    /// The database server cannot be reached, or PostGIS is missing (EX_UNAVAILABLE).
    pub const UNAVAILABLE: i32 = 69;
    /// An internal error: a bug in geofold (EX_SOFTWARE).
    pub const SOFTWARE: i32 = 70;
    /// The output file or table cannot be created (EX_CANTCREAT).
    pub const CANT_CREATE: i32 = 73;
    /// Reading or writing a file failed (EX_IOERR).
    pub const IO: i32 = 74;
    /// A temporary failure: connection lost, lock or statement timeout; retry later (EX_TEMPFAIL).
    pub const TEMPFAIL: i32 = 75;
    /// Permission denied by the server or the file system (EX_NOPERM).
    pub const NO_PERMISSION: i32 = 77;
    /// A bad connection string or configuration (EX_CONFIG).
    pub const CONFIG: i32 = 78;

    /// Exit codes from the most to the least severe: what `run --config`
    /// returns when its jobs end differently. Problems a person must fix
    /// (a bug, the configuration, the input, permissions) come before those a
    /// later try may cure (an unreachable server, a temporary failure), then
    /// busy, then a breached gate, then success.
    pub const SEVERITY: [i32; 13] = [
        SOFTWARE,
        CONFIG,
        USAGE,
        NO_PERMISSION,
        NO_INPUT,
        DATA,
        CANT_CREATE,
        IO,
        UNAVAILABLE,
        TEMPFAIL,
        BUSY,
        GATE_BREACHED,
        OK,
    ];

    /// The most severe of several exit codes ([`SEVERITY`]; a code not in it
    /// counts as [`SOFTWARE`]). OK for none.
    pub fn worst(codes: impl IntoIterator<Item = i32>) -> i32 {
        let rank = |code: i32| SEVERITY.iter().position(|&c| c == code).unwrap_or(0);
        codes
            .into_iter()
            .map(|code| if rank(code) == 0 { SOFTWARE } else { code })
            .min_by_key(|&code| rank(code))
            .unwrap_or(OK)
    }
}

/// Where in the input a problem sits: `table.column` and, when known, the row id.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Location {
    /// The table, layer or file, as the user named it.
    pub table: String,
    /// The column at fault, if one is.
    pub column: Option<String>,
    /// The value of the id column of the row at fault, if one is.
    pub row_id: Option<String>,
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.table)?;
        if let Some(column) = &self.column {
            write!(f, ".{column}")?;
        }
        if let Some(row_id) = &self.row_id {
            write!(f, " (row id={row_id})")?;
        }
        Ok(())
    }
}

/// Everything that can stop a geofold run.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// The command line does not make sense.
    #[error("usage: {0}")]
    Usage(String),
    /// A connection string or configuration value is wrong.
    #[error("configuration: {0}")]
    Config(String),
    /// The named table, schema, column, file or layer does not exist.
    #[error("not found: {what}")]
    NotFound {
        /// What is missing, e.g. `column "rain" of table public.catchments`.
        what: String,
    },
    /// The input data cannot be used as they are. Lists every problem found.
    #[error("bad input: {}", format_problems(problems))]
    Input {
        /// One entry per problem, each naming its location.
        problems: Vec<(Location, String)>,
    },
    /// A fold cannot be fitted by the model.
    #[error("cannot fit fold {fold} (repetition {repetition}) with {model}: {problem}")]
    Fit {
        /// Fold number, 1-based as shown to users.
        fold: u32,
        /// Repetition number, 1-based.
        repetition: u32,
        /// The model family.
        model: String,
        /// What is wrong, naming the features involved.
        problem: crate::core::models::FitError,
    },
    /// Another run of the same job holds the job's lock.
    #[error("busy: {what}")]
    Busy {
        /// Which job and who holds it.
        what: String,
    },
    /// A lock or statement timeout ran out.
    #[error("timed out while {action}: {waited}")]
    Timeout {
        /// What geofold was doing.
        action: String,
        /// What it waited for and how long.
        waited: String,
    },
    /// The server or the file system refused for lack of a privilege.
    #[error("permission denied while {action}: {message}")]
    Permission {
        /// What geofold was doing.
        action: String,
        /// What is missing and the grant that gives it.
        message: String,
    },
    /// The fold scheme cannot be built on these units with these options.
    #[error("cannot build folds: {0}")]
    Folds(String),
    /// The server could not be reached or is missing something it needs.
    #[error("database unavailable while {action}: {}", chain(source.as_ref()))]
    Unavailable {
        /// What geofold was doing.
        action: String,
        /// The underlying error.
        source: Box<dyn std::error::Error + Send + Sync>,
    },
    /// A database statement failed.
    #[error("database error while {action}: {message}")]
    Database {
        /// What geofold was doing.
        action: String,
        /// The server's message.
        message: String,
        /// The SQLSTATE, when the server gave one.
        sqlstate: Option<String>,
    },
    /// A GeoPackage or other file problem.
    #[error("{path}: {problem}")]
    File {
        /// The file.
        path: String,
        /// What went wrong; names layer and row id where known.
        problem: String,
        /// What kind of problem, which decides the exit code.
        kind: FileProblem,
    },
    /// An object geofold must create is in the way or cannot be made.
    #[error("cannot create {what}: {problem}")]
    CannotCreate {
        /// The table, view, schema or file.
        what: String,
        /// Why.
        problem: String,
    },
    /// The results store already holds results of another kind (id type or SRID).
    #[error("results store {store}: {problem}")]
    Store {
        /// The schema or file.
        store: String,
        /// What conflicts.
        problem: String,
    },
    /// A job file is wrong at a line.
    #[error("{}", job_file_message(file, *line, job.as_deref(), key.as_deref(), problem))]
    JobFile {
        /// The file as given.
        file: String,
        /// The line at fault, from 1.
        line: usize,
        /// The job (`[job.NAME]`), when the problem is inside one.
        job: Option<String>,
        /// The key at fault, when one is.
        key: Option<String>,
        /// What is wrong.
        problem: String,
    },
    /// A bug in geofold.
    #[error("internal error: {0}")]
    Internal(String),
}

fn job_file_message(
    file: &str,
    line: usize,
    job: Option<&str>,
    key: Option<&str>,
    problem: &str,
) -> String {
    let mut text = format!("{file}:{line}: ");
    match (job, key) {
        (Some(job), Some(key)) => text.push_str(&format!("job {job}, key {key}: ")),
        (Some(job), None) => text.push_str(&format!("job {job}: ")),
        (None, Some(key)) => text.push_str(&format!("key {key}: ")),
        (None, None) => {}
    }
    text.push_str(problem);
    text
}

/// An error and its causes, joined by ": " (each cause once: a cause whose
/// text its parent already contains is not repeated).
pub fn chain(error: &(dyn std::error::Error + 'static)) -> String {
    let mut text = error.to_string();
    let mut source = error.source();
    while let Some(cause) = source {
        let cause_text = cause.to_string();
        if !text.contains(&cause_text) {
            text.push_str(": ");
            text.push_str(&cause_text);
        }
        source = cause.source();
    }
    text
}

/// What kind of file problem an [`Error::File`] is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileProblem {
    /// The file, layer or column does not exist.
    Missing,
    /// The file's content cannot be used (not a GeoPackage, bad rows).
    BadContent,
    /// The file cannot be created.
    CannotCreate,
    /// Reading or writing failed.
    Io,
    /// Another program holds a lock longer than geofold waits.
    Locked,
    /// The file system refused.
    Permission,
    /// An SQLite error geofold does not expect: a bug.
    Unexpected,
}

fn format_problems(problems: &[(Location, String)]) -> String {
    let shown: Vec<String> = problems
        .iter()
        .take(20)
        .map(|(location, problem)| format!("{location}: {problem}"))
        .collect();
    let mut text = shown.join("; ");
    if problems.len() > shown.len() {
        text.push_str(&format!("; and {} more", problems.len() - shown.len()));
    }
    text
}

impl Error {
    /// One bad-input problem at one location.
    pub fn input(
        table: &str,
        column: Option<&str>,
        row_id: Option<String>,
        problem: impl Into<String>,
    ) -> Error {
        Error::Input {
            problems: vec![(
                Location {
                    table: table.to_string(),
                    column: column.map(str::to_string),
                    row_id,
                },
                problem.into(),
            )],
        }
    }

    /// The exit code a scheduler sees for this error.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Usage(_) => exit::USAGE,
            Error::Config(_) => exit::CONFIG,
            Error::NotFound { .. } => exit::NO_INPUT,
            Error::Input { .. } | Error::Fit { .. } | Error::Folds(_) | Error::Store { .. } => {
                exit::DATA
            }
            Error::Busy { .. } => exit::BUSY,
            Error::Timeout { .. } => exit::TEMPFAIL,
            Error::Permission { .. } => exit::NO_PERMISSION,
            Error::CannotCreate { .. } => exit::CANT_CREATE,
            Error::Unavailable { .. } => exit::UNAVAILABLE,
            Error::Database { sqlstate, .. } => database_exit_code(sqlstate.as_deref()),
            Error::File { kind, .. } => match kind {
                FileProblem::Missing => exit::NO_INPUT,
                FileProblem::BadContent => exit::DATA,
                FileProblem::CannotCreate => exit::CANT_CREATE,
                FileProblem::Io => exit::IO,
                FileProblem::Locked => exit::TEMPFAIL,
                FileProblem::Permission => exit::NO_PERMISSION,
                FileProblem::Unexpected => exit::SOFTWARE,
            },
            Error::JobFile { .. } => exit::CONFIG,
            Error::Internal(_) => exit::SOFTWARE,
        }
    }

    /// A short machine-readable kind for `--json` error objects.
    pub fn kind(&self) -> &'static str {
        match self {
            Error::Usage(_) => "usage",
            Error::Config(_) => "config",
            Error::NotFound { .. } => "not_found",
            Error::Input { .. } => "input",
            Error::Fit { .. } => "fit",
            Error::Folds(_) => "folds",
            Error::Busy { .. } => "busy",
            Error::Timeout { .. } => "timeout",
            Error::Permission { .. } => "permission",
            Error::CannotCreate { .. } => "cannot_create",
            Error::Unavailable { .. } => "unavailable",
            Error::Database { .. } => "database",
            Error::File { .. } => "file",
            Error::Store { .. } => "store",
            Error::JobFile { .. } => "job_file",
            Error::Internal(_) => "internal",
        }
    }
}

/// Maps a SQLSTATE to an exit code (ECOSYSTEM §4.2 of the project notes).
fn database_exit_code(sqlstate: Option<&str>) -> i32 {
    match sqlstate {
        Some(code) if code.starts_with("08") => exit::UNAVAILABLE,
        Some("57014" | "55P03" | "40001" | "40P01" | "57P01" | "53300") => exit::TEMPFAIL,
        Some("42501" | "28P01" | "28000") => exit::NO_PERMISSION,
        Some("42P01" | "42703" | "3F000") => exit::NO_INPUT,
        Some("22023" | "22P02" | "XX000") => exit::DATA,
        // Disk full, out of memory, too many connections: retry later.
        Some(code) if code.starts_with("53") => exit::TEMPFAIL,
        // A server-side rule (a trigger's RAISE, a constraint) rejected the data.
        Some(code) if code.starts_with("P0") || code.starts_with("23") => exit::DATA,
        // An object in the way of one geofold creates (e.g. a table named like the job view).
        Some("42P07" | "42710" | "42809") => exit::CANT_CREATE,
        // The connection dropped without a server error.
        None => exit::TEMPFAIL,
        _ => exit::SOFTWARE,
    }
}

/// Shorthand used throughout the crate.
pub type Result<T, E = Error> = std::result::Result<T, E>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn location_names_table_column_and_row() {
        let error = Error::input("public.parcels", Some("yield"), Some("17".into()), "NULL");
        assert_eq!(
            error.to_string(),
            "bad input: public.parcels.yield (row id=17): NULL"
        );
        assert_eq!(error.exit_code(), exit::DATA);
    }

    #[test]
    fn long_problem_lists_are_cut_with_a_count() {
        let problems = (0..25)
            .map(|i| {
                (
                    Location {
                        table: "t".into(),
                        column: None,
                        row_id: Some(i.to_string()),
                    },
                    "duplicate id".to_string(),
                )
            })
            .collect();
        let text = Error::Input { problems }.to_string();
        assert!(text.ends_with("; and 5 more"), "{text}");
    }

    #[test]
    fn the_worst_exit_code_puts_fixes_before_retries_before_busy_before_gates() {
        assert_eq!(exit::worst([]), exit::OK);
        assert_eq!(exit::worst([0, 1, 0]), exit::GATE_BREACHED);
        assert_eq!(exit::worst([1, 2]), exit::BUSY);
        assert_eq!(exit::worst([2, 75, 1]), exit::TEMPFAIL);
        assert_eq!(exit::worst([75, 65, 69]), exit::DATA);
        assert_eq!(exit::worst([65, 78]), exit::CONFIG);
        assert_eq!(exit::worst([0, 3]), exit::SOFTWARE);
        let mut sorted = exit::SEVERITY.to_vec();
        sorted.sort_unstable();
        sorted.dedup();
        assert_eq!(sorted.len(), exit::SEVERITY.len(), "every code once");
    }

    #[test]
    fn job_file_errors_name_file_line_job_and_key() {
        let error = Error::JobFile {
            file: "nightly.toml".into(),
            line: 7,
            job: Some("nitrate".into()),
            key: Some("block-size".into()),
            problem: "must be positive".into(),
        };
        assert_eq!(
            error.to_string(),
            "nightly.toml:7: job nitrate, key block-size: must be positive"
        );
        assert_eq!(error.exit_code(), exit::CONFIG);
    }

    #[test]
    fn sqlstates_map_to_scheduler_codes() {
        assert_eq!(database_exit_code(Some("08006")), exit::UNAVAILABLE);
        assert_eq!(database_exit_code(Some("55P03")), exit::TEMPFAIL);
        assert_eq!(database_exit_code(Some("42501")), exit::NO_PERMISSION);
        assert_eq!(database_exit_code(Some("42P01")), exit::NO_INPUT);
        assert_eq!(database_exit_code(Some("P0001")), exit::DATA);
        assert_eq!(database_exit_code(Some("53100")), exit::TEMPFAIL);
        assert_eq!(database_exit_code(Some("42809")), exit::CANT_CREATE);
    }
}
