//! The PostGIS adapter: a source that streams units with binary COPY and a
//! result store that writes a run with binary COPY inside one transaction.
//!
//! - [`connect`]: connection parameters resolved as libpq does (string,
//!   service file, `PG*` variables, defaults, password file);
//!   [`Session::connect`] tries them with libpq's `sslmode` rules and retries
//!   a server that is not up yet.
//! - [`copy`]: the binary COPY format.
//! - [`read`]: inspecting and streaming the source table; [`locations`]: prediction locations.
//! - [`tls`]: TLS with libpq's six `sslmode` values, roots, revocation lists and client certificates.
//! - [`migrate`]: creating and upgrading the results schema.
//! - [`store`]: the results schema as a result store; [`layers`]: each job's map views;
//!   [`reads`]: reading stored runs back, row by row.

pub mod connect;
pub mod copy;
pub mod layers;
pub mod locations;
pub mod migrate;
pub mod read;
pub mod reads;
pub mod store;
pub mod tls;

use std::collections::BTreeMap;
use std::future::Future;
use std::time::{Duration, Instant};

use tokio::runtime::Runtime;
use tokio_postgres::config::SslMode as DriverSslMode;
use tokio_postgres::tls::MakeTlsConnect;
use tokio_postgres::{Client, NoTls, Socket};

use crate::error::Error;
use connect::{EnvLookup, Resolved, Target};
use tls::{Checks, Connector, SslMode};

/// One connection with the runtime that drives it. Adapters expose blocking
/// methods; the async client stays inside.
pub struct Session {
    /// Drives the connection.
    pub runtime: Runtime,
    /// The client.
    pub client: Client,
    /// `user@host:port/db`, for messages.
    pub description: String,
}

/// The environment variable that sets [`ConnectOptions::retry_for`], in seconds.
pub const RETRY_VARIABLE: &str = "GEOFOLD_CONNECT_RETRY";

/// How long a server that is not up yet is retried by default.
pub const DEFAULT_RETRY_FOR: Duration = Duration::from_secs(30);

/// The first wait between attempts; each later wait doubles, up to [`MAX_RETRY_DELAY`].
pub const FIRST_RETRY_DELAY: Duration = Duration::from_millis(500);

/// The longest wait between two attempts.
pub const MAX_RETRY_DELAY: Duration = Duration::from_secs(8);

/// How geofold connects, beyond the libpq parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct ConnectOptions {
    /// How long to keep trying a server that is not up yet: refused
    /// connections, a missing socket, `connect_timeout` expiring, "the
    /// database system is starting up". Waits start at [`FIRST_RETRY_DELAY`]
    /// and double up to [`MAX_RETRY_DELAY`]; no attempt starts after this
    /// bound (the last one starts at it). Zero tries once. A refused login,
    /// a missing database, a TLS or certificate failure or a bad setting is
    /// never retried.
    pub retry_for: Duration,
    /// The environment to read `PG*` variables and `HOME` from; `None` reads
    /// the process environment.
    pub environment: Option<BTreeMap<String, String>>,
}

impl Default for ConnectOptions {
    fn default() -> ConnectOptions {
        ConnectOptions {
            retry_for: DEFAULT_RETRY_FOR,
            environment: None,
        }
    }
}

impl ConnectOptions {
    /// The defaults, with [`RETRY_VARIABLE`] (seconds, may be fractional) when set.
    ///
    /// # Errors
    /// [`Error::Config`] when the variable is not a number of seconds from 0 to 86400.
    pub fn from_env() -> Result<ConnectOptions, Error> {
        let mut options = ConnectOptions::default();
        if let Some(text) = std::env::var(RETRY_VARIABLE).ok().filter(|v| !v.is_empty()) {
            let seconds = text
                .trim()
                .parse::<f64>()
                .ok()
                .filter(|s| (0.0..=86_400.0).contains(s))
                .ok_or_else(|| {
                    Error::Config(format!(
                        "{RETRY_VARIABLE}={text:?} is not a number of seconds from 0 to 86400"
                    ))
                })?;
            options.retry_for = Duration::from_secs_f64(seconds);
        }
        Ok(options)
    }
}

impl Session {
    /// Connects with `--db` and the libpq environment, as libpq would, and
    /// checks that PostGIS is installed. Retries as [`ConnectOptions::from_env`] says.
    ///
    /// # Errors
    /// See [`Session::connect_with`].
    pub fn connect(db: Option<&str>) -> Result<Session, Error> {
        Session::connect_with(db, &ConnectOptions::from_env()?)
    }

    /// Connects with `--db`, the given options and the libpq environment.
    ///
    /// # Errors
    /// - [`Error::Config`] (78): a bad connection string or value, an unknown
    ///   service, unusable TLS files, no password where the server wants one.
    /// - [`Error::Unavailable`] (69): no server answered within the retry
    ///   bound; TLS required but not offered; the server certificate refused
    ///   (unknown CA, wrong host name, expired, revoked); PostGIS missing.
    /// - [`Error::Database`] with SQLSTATE 28P01 or 28000 (77): the login was
    ///   refused (password, `pg_hba.conf`, client certificate, unknown role).
    /// - [`Error::NotFound`] (66): the database does not exist.
    pub fn connect_with(db: Option<&str>, options: &ConnectOptions) -> Result<Session, Error> {
        let process = |key: &str| std::env::var(key).ok();
        let given = |key: &str| {
            options
                .environment
                .as_ref()
                .and_then(|variables| variables.get(key).cloned())
        };
        let env: EnvLookup<'_> = if options.environment.is_some() {
            &given
        } else {
            &process
        };
        let resolved = connect::resolve(db, env)?;
        let description = resolved.describe();
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .map_err(|e| Error::Internal(format!("cannot start the async runtime: {e}")))?;
        let client = runtime.block_on(connect_retrying(&resolved, options.retry_for))?;
        let session = Session {
            runtime,
            client,
            description,
        };
        session.check_postgis()?;
        Ok(session)
    }

    fn check_postgis(&self) -> Result<(), Error> {
        let found = self
            .runtime
            .block_on(self.client.query_opt(
                "SELECT extversion FROM pg_extension WHERE extname = 'postgis'",
                &[],
            ))
            .map_err(|e| database_error("checking for PostGIS", &e))?;
        if found.is_none() {
            return Err(Error::Unavailable {
                action: format!("checking {}", self.description),
                source: "the PostGIS extension is not installed in this database (CREATE EXTENSION postgis)".into(),
            });
        }
        Ok(())
    }
}

/// Tries every target, and again with doubling waits while every failure says
/// the server may not be up yet, until `retry_for` has passed.
async fn connect_retrying(resolved: &Resolved, retry_for: Duration) -> Result<Client, Error> {
    let started = Instant::now();
    let mut delay = FIRST_RETRY_DELAY;
    let mut connector = None;
    let mut attempts = 0u32;
    loop {
        attempts += 1;
        let failure = match connect_once(resolved, &mut connector).await {
            Ok(client) => return Ok(client),
            Err(failure) => failure,
        };
        let elapsed = started.elapsed();
        if !failure.retryable || elapsed >= retry_for {
            return Err(failure.into_error(resolved, attempts, elapsed));
        }
        let wait = delay.min(retry_for - elapsed);
        tracing::warn!(
            "{}: {}; trying again in {:.1} s (attempt {attempts}, retrying for up to {:.0} s)",
            resolved.describe(),
            failure.message,
            wait.as_secs_f64(),
            retry_for.as_secs_f64()
        );
        tokio::time::sleep(wait).await;
        delay = (delay * 2).min(MAX_RETRY_DELAY);
    }
}

/// One pass over the targets, in order (or shuffled for `load_balance_hosts=random`).
async fn connect_once(
    resolved: &Resolved,
    connector: &mut Option<Connector>,
) -> Result<Client, Failure> {
    let mut order: Vec<&Target> = resolved.targets.iter().collect();
    if resolved.random_order {
        shuffle(&mut order);
    }
    let mut failures = Vec::new();
    for target in order {
        match connect_target(resolved, target, connector).await {
            Ok(client) => return Ok(client),
            Err(failure) => {
                tracing::debug!("{}: {}", target.label(), failure.message);
                failures.push(failure);
            }
        }
    }
    Err(Failure::combine(failures))
}

fn shuffle(order: &mut [&Target]) {
    use rand_core::{Rng, SeedableRng};
    let seed = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_nanos() as u64)
        .unwrap_or(0)
        ^ u64::from(std::process::id());
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    for i in (1..order.len()).rev() {
        let j = (rng.next_u64() % (i as u64 + 1)) as usize;
        order.swap(i, j);
    }
}

/// One target with libpq's `sslmode` rules: no TLS on a Unix socket; `allow`
/// tries without TLS and, if the server refuses, with; `prefer` tries with TLS
/// and, if the handshake fails or the server refuses the TLS session, without
/// (libpq PQconnectPoll, fe-connect.c).
async fn connect_target(
    resolved: &Resolved,
    target: &Target,
    connector: &mut Option<Connector>,
) -> Result<Client, Failure> {
    let mode = if target.is_socket() {
        SslMode::Disable
    } else {
        resolved.tls.mode
    };
    match mode {
        SslMode::Disable => plain(resolved, target).await,
        SslMode::Allow => match plain(resolved, target).await {
            Err(failure) if failure.server_refused => {
                tracing::info!(
                    "{}: refused without TLS ({}); trying with TLS, as sslmode=allow does",
                    target.label(),
                    failure.message
                );
                encrypted(resolved, target, connector, DriverSslMode::Require, mode).await
            }
            other => other,
        },
        SslMode::Prefer => {
            match encrypted(resolved, target, connector, DriverSslMode::Prefer, mode).await {
                Err(failure)
                    if failure.tls_started && (!failure.tls_finished || failure.server_refused) =>
                {
                    if failure.tls_finished {
                        tracing::debug!(
                            "{}: refused over TLS ({}); trying without TLS, as sslmode=prefer does",
                            target.label(),
                            failure.message
                        );
                    } else {
                        tracing::warn!(
                            "{}: the TLS handshake failed ({}); trying without TLS, as sslmode=prefer does",
                            target.label(),
                            failure.message
                        );
                    }
                    plain(resolved, target).await
                }
                other => other,
            }
        }
        SslMode::Require | SslMode::VerifyCa | SslMode::VerifyFull => {
            encrypted(resolved, target, connector, DriverSslMode::Require, mode).await
        }
    }
}

async fn plain(resolved: &Resolved, target: &Target) -> Result<Client, Failure> {
    let config = resolved.config_for(target, DriverSslMode::Disable);
    let outcome = bounded(resolved.connect_timeout, open(config, NoTls)).await;
    if outcome.is_ok() {
        tracing::info!(encrypted = false, "connected to {}", target.label());
    }
    outcome.map_err(|error| Failure::classify(error, target, None, false, false))
}

async fn encrypted(
    resolved: &Resolved,
    target: &Target,
    connector: &mut Option<Connector>,
    driver_mode: DriverSslMode,
    mode: SslMode,
) -> Result<Client, Failure> {
    let connector = match connector {
        Some(connector) => connector,
        None => connector.insert(tls::connector(&resolved.tls).map_err(Failure::fatal)?),
    };
    let (watched, handshake) = connector.watched();
    let config = resolved.config_for(target, driver_mode);
    let outcome = bounded(resolved.connect_timeout, open(config, watched)).await;
    match outcome {
        Ok(client) => {
            tracing::info!(
                encrypted = handshake.finished(),
                checks = ?connector.checks,
                "connected to {}",
                target.label()
            );
            Ok(client)
        }
        Err(error) => {
            let mut failure = Failure::classify(
                error,
                target,
                Some(&connector.checks),
                handshake.started(),
                handshake.finished(),
            );
            if failure.message.contains("server does not support TLS") {
                failure.message = format!(
                    "{}: the server does not offer TLS, and sslmode={} requires it",
                    target.label(),
                    mode.as_str()
                );
            }
            Err(failure)
        }
    }
}

/// Connects and spawns the connection onto the runtime.
async fn open<T>(config: tokio_postgres::Config, tls: T) -> Result<Client, tokio_postgres::Error>
where
    T: MakeTlsConnect<Socket>,
    T::Stream: Send + 'static,
{
    let (client, connection) = config.connect(tls).await?;
    tokio::spawn(drive(connection));
    Ok(client)
}

/// A connection attempt that failed, or took longer than `connect_timeout`.
enum AttemptError {
    Driver(tokio_postgres::Error),
    TimedOut(Duration),
}

/// libpq's `connect_timeout` bounds a whole attempt at one host.
async fn bounded<F>(limit: Option<Duration>, attempt: F) -> Result<Client, AttemptError>
where
    F: Future<Output = Result<Client, tokio_postgres::Error>>,
{
    match limit {
        Some(limit) => match tokio::time::timeout(limit, attempt).await {
            Ok(outcome) => outcome.map_err(AttemptError::Driver),
            Err(_) => Err(AttemptError::TimedOut(limit)),
        },
        None => attempt.await.map_err(AttemptError::Driver),
    }
}

/// How connecting to one target failed.
struct Failure {
    /// The server may just not be up yet: worth another try.
    retryable: bool,
    /// The server answered with an error (libpq's `allow`/`prefer` retry rule).
    server_refused: bool,
    /// TLS began / completed on this attempt.
    tls_started: bool,
    tls_finished: bool,
    /// What went wrong, naming the server, never a password.
    message: String,
    /// The error to report if this is the end.
    error: Option<Error>,
    /// The driver's error, kept as the cause.
    cause: Option<tokio_postgres::Error>,
}

/// The message and cause geofold reports for a connection that could not be made.
#[derive(Debug)]
pub struct ConnectFailure {
    message: String,
    cause: Option<tokio_postgres::Error>,
}

impl std::fmt::Display for ConnectFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for ConnectFailure {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        self.cause
            .as_ref()
            .map(|e| e as &(dyn std::error::Error + 'static))
    }
}

impl Failure {
    /// A failure that ends connecting at once (a configuration problem).
    fn fatal(error: Error) -> Failure {
        Failure {
            retryable: false,
            server_refused: false,
            tls_started: false,
            tls_finished: false,
            message: error.to_string(),
            error: Some(error),
            cause: None,
        }
    }

    fn classify(
        error: AttemptError,
        target: &Target,
        checks: Option<&Checks>,
        tls_started: bool,
        tls_finished: bool,
    ) -> Failure {
        let label = target.label();
        let mut failure = Failure {
            retryable: false,
            server_refused: false,
            tls_started,
            tls_finished,
            message: String::new(),
            error: None,
            cause: None,
        };
        let error = match error {
            AttemptError::TimedOut(limit) => {
                failure.retryable = true;
                failure.message = format!(
                    "{label}: timeout expired after {} s (connect_timeout)",
                    limit.as_secs()
                );
                return failure;
            }
            AttemptError::Driver(error) => error,
        };
        if let Some(db) = error.as_db_error() {
            failure.server_refused = true;
            let code = db.code().code();
            let mut message = db.message().to_string();
            if let Some(detail) = db.detail() {
                message.push_str(&format!(" ({detail})"));
            }
            if code == "28P01" {
                if let Some(file) = target.password.as_ref().and_then(|p| p.from_file.as_ref()) {
                    message.push_str(&format!(
                        " (password retrieved from file \"{}\")",
                        file.display()
                    ));
                }
            }
            failure.message = format!("{label}: {message}");
            failure.error = match code {
                // "the database system is starting up" / "is shutting down": not up yet.
                "57P03" => {
                    failure.retryable = true;
                    None
                }
                "3D000" => Some(Error::NotFound {
                    what: format!("{message} on {label}"),
                }),
                _ => Some(Error::Database {
                    action: format!("connecting to {label}"),
                    message,
                    sqlstate: Some(code.to_string()),
                }),
            };
            failure.cause = Some(error);
            return failure;
        }
        let rustls_error = find_rustls_error(&error);
        let io_kind = find_io_kind(&error);
        let cause_text = std::error::Error::source(&error)
            .map(|cause| cause.to_string())
            .unwrap_or_else(|| error.to_string());
        failure.message = if let Some(tls_error) = rustls_error {
            format!(
                "{label}: {}",
                tls::explain(
                    tls_error,
                    target.tls_name().as_deref(),
                    checks.unwrap_or(&Checks::EncryptOnly)
                )
            )
        } else if cause_text == "password missing" {
            failure.error = Some(Error::Config(format!(
                "{label} asks for a password and none was given (password=, the service, PGPASSWORD, or the password file: passfile, PGPASSFILE, ~/.pgpass)"
            )));
            format!("{label}: password required, none given")
        } else if let Some(rest) = cause_text.strip_prefix("failed to lookup address information: ")
        {
            let name = target.tls_name().unwrap_or_default();
            format!("{label}: could not translate host name \"{name}\" to address: {rest}")
        } else {
            format!("{label}: {cause_text}")
        };
        failure.retryable = rustls_error.is_none()
            && matches!(
                io_kind,
                Some(
                    std::io::ErrorKind::ConnectionRefused
                        | std::io::ErrorKind::NotFound
                        | std::io::ErrorKind::TimedOut
                        | std::io::ErrorKind::ConnectionReset
                        | std::io::ErrorKind::ConnectionAborted
                        | std::io::ErrorKind::HostUnreachable
                        | std::io::ErrorKind::NetworkUnreachable
                        | std::io::ErrorKind::AddrNotAvailable
                )
            );
        failure.cause = Some(error);
        failure
    }

    /// The failures of one pass over several targets: retryable only if every one is.
    fn combine(mut failures: Vec<Failure>) -> Failure {
        if failures.len() == 1 {
            if let Some(only) = failures.pop() {
                return only;
            }
        }
        let retryable = failures.iter().all(|f| f.retryable);
        let message = failures
            .iter()
            .map(|f| f.message.as_str())
            .collect::<Vec<_>>()
            .join("; ");
        // The first failure that is not about reachability is the one to act on.
        let decisive = failures.iter().position(|f| f.error.is_some());
        let mut chosen = match decisive {
            Some(index) => failures.swap_remove(index),
            None => match failures.pop() {
                Some(last) => last,
                None => return Failure::fatal(Error::Internal("no host to connect to".into())),
            },
        };
        chosen.retryable = retryable;
        chosen.message = message;
        chosen
    }

    fn into_error(self, resolved: &Resolved, attempts: u32, elapsed: Duration) -> Error {
        if let Some(error) = self.error {
            return error;
        }
        let mut message = self.message;
        if attempts > 1 {
            message.push_str(&format!(
                " (gave up after {attempts} attempts over {:.1} s)",
                elapsed.as_secs_f64()
            ));
        }
        Error::Unavailable {
            action: format!("connecting to {}", resolved.describe()),
            source: Box::new(ConnectFailure {
                message,
                cause: self.cause,
            }),
        }
    }
}

/// The rustls error inside a driver error, if the TLS handshake failed.
fn find_rustls_error(error: &tokio_postgres::Error) -> Option<&rustls::Error> {
    let mut next: Option<&(dyn std::error::Error + 'static)> = std::error::Error::source(error);
    while let Some(current) = next {
        if let Some(found) = current.downcast_ref::<rustls::Error>() {
            return Some(found);
        }
        // io::Error hides the error it wraps from source(); get_ref finds it.
        if let Some(io) = current.downcast_ref::<std::io::Error>() {
            if let Some(found) = io
                .get_ref()
                .and_then(|inner| inner.downcast_ref::<rustls::Error>())
            {
                return Some(found);
            }
        }
        next = current.source();
    }
    None
}

/// The kind of the first I/O error inside a driver error.
fn find_io_kind(error: &tokio_postgres::Error) -> Option<std::io::ErrorKind> {
    let mut next: Option<&(dyn std::error::Error + 'static)> = std::error::Error::source(error);
    while let Some(current) = next {
        if let Some(io) = current.downcast_ref::<std::io::Error>() {
            return Some(io.kind());
        }
        next = current.source();
    }
    None
}

/// Runs a connection until it ends, logging how it ended.
async fn drive<S, T>(connection: tokio_postgres::Connection<S, T>)
where
    S: tokio::io::AsyncRead + tokio::io::AsyncWrite + Unpin,
    T: tokio::io::AsyncRead + tokio::io::AsyncWrite + Unpin,
{
    if let Err(error) = connection.await {
        tracing::error!(%error, "database connection ended");
    }
}

/// Wraps a tokio-postgres error with what geofold was doing: a timeout or a
/// missing privilege becomes its own kind (with what was waited for, or the
/// grant that is missing); other server errors keep their SQLSTATE; errors
/// without a server message keep their cause chain.
pub fn database_error(action: &str, error: &tokio_postgres::Error) -> Error {
    match error.as_db_error() {
        Some(db) => {
            let message = match db.detail() {
                Some(detail) => format!("{} ({detail})", db.message()),
                None => db.message().to_string(),
            };
            match db.code().code() {
                "55P03" => Error::Timeout {
                    action: action.to_string(),
                    waited: format!(
                        "{message}: another session holds a lock on what geofold must read or change \
                         (a GIS with the layer open, a long query or a transaction left open); \
                         geofold waited --lock-timeout and gave up; try again later"
                    ),
                },
                "57014" => Error::Timeout {
                    action: action.to_string(),
                    waited: format!("{message}: the statement ran longer than --statement-timeout"),
                },
                "42501" => Error::Permission {
                    action: action.to_string(),
                    message: match grant_hint(db.message()) {
                        Some(hint) => format!("{message}; {hint}"),
                        None => message,
                    },
                },
                code => Error::Database {
                    action: action.to_string(),
                    message,
                    sqlstate: Some(code.to_string()),
                },
            }
        }
        None => Error::Database {
            action: action.to_string(),
            message: crate::error::chain(error),
            sqlstate: None,
        },
    }
}

/// The grant that cures a PostgreSQL "permission denied for …" message.
fn grant_hint(message: &str) -> Option<String> {
    let rest = message.strip_prefix("permission denied for ")?;
    let (kind, object) = rest.split_once(' ')?;
    Some(match kind {
        "table" | "view" | "materialized" => {
            format!("the role needs GRANT SELECT ON {object} TO <role>")
        }
        "schema" => format!(
            "the role needs GRANT USAGE ON SCHEMA {object} TO <role> (and CREATE on it to write results there; \
             the simplest is a results schema the role owns: CREATE SCHEMA … AUTHORIZATION <role>)"
        ),
        "database" => format!(
            "creating a schema needs GRANT CREATE ON DATABASE {object} TO <role>, \
             or create the results schema for the role: CREATE SCHEMA … AUTHORIZATION <role>"
        ),
        "function" => format!("the role needs GRANT EXECUTE ON FUNCTION {object} TO <role>"),
        _ => return None,
    })
}

impl Session {
    /// Bounds every wait of this session: `lock_timeout` for locks and
    /// `statement_timeout` for any statement (PostgreSQL documentation,
    /// "Client Connection Defaults": set per session, never server-wide).
    ///
    /// # Errors
    /// A database error.
    pub fn limit_waits(
        &self,
        lock_timeout: std::time::Duration,
        statement_timeout: std::time::Duration,
    ) -> Result<(), Error> {
        let sql = format!(
            "SET lock_timeout = {}; SET statement_timeout = {}",
            lock_timeout.as_millis().max(1),
            statement_timeout.as_millis().max(1)
        );
        self.runtime
            .block_on(self.client.batch_execute(&sql))
            .map_err(|e| database_error("setting the session's timeouts", &e))
    }
}

pub use crate::adapters::sql::{quote_ident, quote_literal, split_qualified};
