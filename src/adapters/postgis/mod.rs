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
pub mod history;
pub mod layers;
pub mod locations;
pub mod migrate;
pub mod read;
pub mod readback;
pub mod reads;
pub mod scoring;
pub mod store;
pub mod tls;

mod attempts;
use attempts::*;

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
