//! The PostGIS adapter: a source that streams units with binary COPY and a
//! result store that writes a run with binary COPY inside one transaction.
//!
//! - [`connect`]: libpq-style connection parameters.
//! - [`copy`]: the binary COPY format.
//! - [`read`]: inspecting and streaming the source table.
//! - [`tls`]: encryption for `sslmode=prefer` and `require`.
//! - [`write`](mod@write): the results schema, its migrations, and writing runs.

pub mod connect;
pub mod copy;
pub mod load;
pub mod read;
pub mod tls;
pub mod write;

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

/// Wraps a tokio-postgres error with what geofold was doing and its SQLSTATE.
pub fn database_error(action: &str, error: &tokio_postgres::Error) -> Error {
    match error.as_db_error() {
        Some(db) => Error::Database {
            action: action.to_string(),
            message: match db.detail() {
                Some(detail) => format!("{} ({detail})", db.message()),
                None => db.message().to_string(),
            },
            sqlstate: Some(db.code().code().to_string()),
        },
        None => Error::Database {
            action: action.to_string(),
            message: error.to_string(),
            sqlstate: None,
        },
    }
}

/// Quotes an identifier for SQL: `"name"` with inner quotes doubled. Every
/// identifier geofold puts in SQL goes through this.
pub fn quote_ident(name: &str) -> String {
    format!("\"{}\"", name.replace('"', "\"\""))
}

/// Quotes a string literal: `'text'` with inner quotes doubled.
pub fn quote_literal(text: &str) -> String {
    format!("'{}'", text.replace('\'', "''"))
}

/// Splits `schema.table` (either part may be double-quoted) at the first dot
/// outside quotes; quotes are removed. A name without a dot has no schema.
pub fn split_qualified(name: &str) -> (Option<String>, String) {
    let mut in_quotes = false;
    for (index, c) in name.char_indices() {
        match c {
            '"' => in_quotes = !in_quotes,
            '.' if !in_quotes => {
                return (Some(unquote(&name[..index])), unquote(&name[index + 1..]));
            }
            _ => {}
        }
    }
    (None, unquote(name))
}

fn unquote(part: &str) -> String {
    let part = part.trim();
    if part.len() >= 2 && part.starts_with('"') && part.ends_with('"') {
        part[1..part.len() - 1].replace("\"\"", "\"")
    } else {
        part.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn identifiers_are_quoted_and_split() {
        assert_eq!(
            quote_ident("x\"; DROP TABLE y; --"),
            "\"x\"\"; DROP TABLE y; --\""
        );
        assert_eq!(
            split_qualified("basin.units"),
            (Some("basin".into()), "units".into())
        );
        assert_eq!(
            split_qualified("\"my.schema\".\"Units\""),
            (Some("my.schema".into()), "Units".into())
        );
        assert_eq!(split_qualified("units"), (None, "units".into()));
        assert_eq!(quote_literal("it's"), "'it''s'");
    }
}
