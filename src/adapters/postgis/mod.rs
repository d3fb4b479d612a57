//! The PostGIS adapter: a source that streams units with binary COPY and a
//! result store that writes a run with binary COPY inside one transaction.
//!
//! - [`connect`]: libpq-style connection parameters.
//! - [`copy`]: the binary COPY format.
//! - [`read`]: inspecting and streaming the source table.
//! - [`tls`]: encryption for `sslmode=prefer` and `require`.
//! - [`migrate`]: creating and upgrading the results schema.
//! - [`store`]: the results schema as a result store; [`layers`]: each job's map views;
//!   [`reads`]: reading stored runs back, row by row.

pub mod connect;
pub mod copy;
pub mod layers;
pub mod migrate;
pub mod read;
pub mod reads;
pub mod store;
pub mod tls;

use tokio::runtime::Runtime;
use tokio_postgres::config::SslMode;
use tokio_postgres::{Client, NoTls};

use crate::error::Error;

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

impl Session {
    /// Connects with `--db` and the libpq environment.
    ///
    /// # Errors
    /// [`Error::Config`] for bad parameters, [`Error::Unavailable`] when the
    /// server cannot be reached, permission errors for refused logins.
    pub fn connect(db: Option<&str>) -> Result<Session, Error> {
        let env = |key: &str| std::env::var(key).ok().filter(|v| !v.is_empty());
        let config = connect::resolve(db, &env)?;
        let description = connect::describe(&config);
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .map_err(|e| Error::Internal(format!("cannot start the async runtime: {e}")))?;
        let connect_error = |error: tokio_postgres::Error| {
            let action = format!("connecting to {description}");
            match error.code() {
                Some(_) => database_error(&action, &error),
                None => Error::Unavailable {
                    action,
                    source: Box::new(error),
                },
            }
        };
        let client = if config.get_ssl_mode() == SslMode::Disable {
            let (client, connection) = runtime
                .block_on(config.connect(NoTls))
                .map_err(connect_error)?;
            runtime.spawn(drive(connection));
            client
        } else {
            let tls = tls::encrypt_only()?;
            let (client, connection) = runtime
                .block_on(config.connect(tls))
                .map_err(connect_error)?;
            runtime.spawn(drive(connection));
            client
        };
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
