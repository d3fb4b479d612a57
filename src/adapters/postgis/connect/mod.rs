//! Connection parameters resolved the way libpq resolves them.
//!
//! `--db` takes what libpq takes: a `postgresql://` (or `postgres://`) URI
//! with percent-encoding and query parameters, or `key=value` pairs with
//! libpq's quoting (`'…'`, backslash escapes), optionally after a `PG:` prefix
//! as GDAL and QGIS write it. Keywords libpq does not know are refused by name
//! (`invalid connection option "x"`, exit 78).
//!
//! The order, as libpq's `conninfo_add_defaults` (fe-connect.c) has it:
//! 1. what the string says;
//! 2. the service named by `service=` or `PGSERVICE`, from `PGSERVICEFILE` or
//!    `~/.pg_service.conf`, else `$PGSYSCONFDIR/pg_service.conf` (Debian:
//!    `/etc/postgresql-common`); an unknown service is an error;
//! 3. the `PG*` environment variables, each only for a keyword still unset;
//! 4. defaults: host = the Debian socket directory `/var/run/postgresql` when
//!    the server's socket is there, else `localhost`; port 5432; user = the
//!    operating-system user (the password database entry of the effective
//!    uid); database = the user; `application_name` = `fallback_application_name`,
//!    else `geofold`; `sslmode=prefer` (`verify-full` with `sslrootcert=system`);
//!    `connect_timeout` 10 s (libpq waits forever; a batch job should not).
//! 5. last, a password still missing is looked up per host in the password
//!    file (`passfile`, `PGPASSFILE`, `~/.pgpass`), which is ignored unless
//!    its mode is 0600 or stricter.
//!
//! Values are checked after merging, so a bad value is refused wherever it
//! came from, and the message says where that was. Keywords geofold cannot
//! honour are refused when they would change the outcome (`require_auth`,
//! `requirepeer` on a socket, `replication`, `gssencmode=require`,
//! `sslcertmode=require`, `target_session_attrs` beyond any/read-write/read-only)
//! and accepted with a warning when they cannot (`client_encoding` other than
//! UTF8, `sslcompression=1`); GSSAPI settings are accepted and have no effect,
//! as in a libpq built without GSSAPI. `docs/connecting.md` has the table.

use std::collections::BTreeMap;
use std::fmt;
use std::net::IpAddr;
use std::path::{Path, PathBuf};
use std::time::Duration;

use tokio_postgres::config::{ChannelBinding, SslNegotiation, TargetSessionAttrs};
use tokio_postgres::Config;

use super::tls::{self, ClientCertificate, Revocation, Roots, SslMode, TlsVersion};
use crate::error::Error;

mod build;
mod parse;
mod passfile;
mod service;
mod tls_settings;
use build::*;
use parse::*;
use passfile::*;
use service::*;
use tls_settings::*;

/// Reads an environment variable through a lookup function, so tests can pass their own.
pub type EnvLookup<'a> = &'a dyn Fn(&str) -> Option<String>;

/// The Debian/Ubuntu default socket directory (libpq `DEFAULT_PGSOCKET_DIR` there).
pub const DEFAULT_SOCKET_DIR: &str = "/var/run/postgresql";

/// Debian's `pg_config --sysconfdir`, where the system service file lives.
pub const DEFAULT_SYSCONFDIR: &str = "/etc/postgresql-common";

/// `connect_timeout` when none is set, in seconds.
pub const DEFAULT_CONNECT_TIMEOUT_S: u64 = 10;

/// The libpq connection keywords with their environment variables, as in
/// libpq 17 (fe-connect.c `PQconninfoOptions`; PostgreSQL docs "Parameter Key
/// Words" and "Environment Variables").
const KEYWORDS: &[(&str, Option<&str>)] = &[
    ("service", Some("PGSERVICE")),
    ("user", Some("PGUSER")),
    ("password", Some("PGPASSWORD")),
    ("passfile", Some("PGPASSFILE")),
    ("channel_binding", Some("PGCHANNELBINDING")),
    ("connect_timeout", Some("PGCONNECT_TIMEOUT")),
    ("dbname", Some("PGDATABASE")),
    ("host", Some("PGHOST")),
    ("hostaddr", Some("PGHOSTADDR")),
    ("port", Some("PGPORT")),
    ("client_encoding", Some("PGCLIENTENCODING")),
    ("options", Some("PGOPTIONS")),
    ("application_name", Some("PGAPPNAME")),
    ("fallback_application_name", None),
    ("keepalives", None),
    ("keepalives_idle", None),
    ("keepalives_interval", None),
    ("keepalives_count", None),
    ("tcp_user_timeout", None),
    ("sslmode", Some("PGSSLMODE")),
    ("sslnegotiation", Some("PGSSLNEGOTIATION")),
    ("sslcompression", Some("PGSSLCOMPRESSION")),
    ("sslcert", Some("PGSSLCERT")),
    ("sslkey", Some("PGSSLKEY")),
    ("sslcertmode", Some("PGSSLCERTMODE")),
    ("sslpassword", None),
    ("sslrootcert", Some("PGSSLROOTCERT")),
    ("sslcrl", Some("PGSSLCRL")),
    ("sslcrldir", Some("PGSSLCRLDIR")),
    ("sslsni", Some("PGSSLSNI")),
    ("requirepeer", Some("PGREQUIREPEER")),
    ("require_auth", Some("PGREQUIREAUTH")),
    ("ssl_min_protocol_version", Some("PGSSLMINPROTOCOLVERSION")),
    ("ssl_max_protocol_version", Some("PGSSLMAXPROTOCOLVERSION")),
    ("gssencmode", Some("PGGSSENCMODE")),
    ("krbsrvname", Some("PGKRBSRVNAME")),
    ("gsslib", Some("PGGSSLIB")),
    ("gssdelegation", Some("PGGSSDELEGATION")),
    ("replication", None),
    ("target_session_attrs", Some("PGTARGETSESSIONATTRS")),
    ("load_balance_hosts", Some("PGLOADBALANCEHOSTS")),
];

/// The keyword as libpq spells it, if libpq knows it.
fn keyword(name: &str) -> Option<&'static str> {
    KEYWORDS.iter().map(|(k, _)| *k).find(|k| *k == name)
}

/// Where a value came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Origin {
    /// `--db`.
    ConnectionString,
    /// A service file entry.
    Service {
        /// The service name.
        name: String,
        /// The file it was found in.
        file: PathBuf,
    },
    /// A `PG*` environment variable.
    Environment(&'static str),
}

/// One connection parameter and its origin.
#[derive(Clone, PartialEq, Eq)]
pub struct Setting {
    /// The value (may be empty, as in libpq).
    pub value: String,
    /// Where it came from.
    pub origin: Origin,
}

impl fmt::Debug for Setting {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // Values may be passwords; the origin is enough to debug with.
        write!(f, "Setting {{ origin: {:?} }}", self.origin)
    }
}

/// Keyword → setting, before defaults.
pub type Parameters = BTreeMap<&'static str, Setting>;

// ---------------------------------------------------------------- parsing --

/// Collects the parameters from `--db`, the service file and the environment,
/// in libpq's order of precedence.
///
/// # Errors
/// [`Error::Config`] for a string that does not parse, an unknown service, or
/// a service file with an error.
pub fn gather(db: Option<&str>, env: EnvLookup<'_>) -> Result<Parameters, Error> {
    let mut parameters = Parameters::new();
    for (keyword, value) in parse(db.unwrap_or(""))? {
        parameters.insert(
            keyword,
            Setting {
                value,
                origin: Origin::ConnectionString,
            },
        );
    }
    apply_service(&mut parameters, env)?;
    for (keyword, variable) in KEYWORDS {
        if let Some(variable) = variable {
            if parameters.contains_key(keyword) {
                continue;
            }
            if let Some(value) = env(variable).filter(|v| !v.is_empty()) {
                parameters.insert(
                    keyword,
                    Setting {
                        value,
                        origin: Origin::Environment(variable),
                    },
                );
            }
        }
    }
    // The deprecated PGREQUIRESSL: "1…" means require; PGSSLMODE wins (libpq).
    if !parameters.contains_key("sslmode")
        && env("PGREQUIRESSL").is_some_and(|v| v.starts_with('1'))
    {
        parameters.insert(
            "sslmode",
            Setting {
                value: "require".into(),
                origin: Origin::Environment("PGREQUIRESSL"),
            },
        );
    }
    Ok(parameters)
}

/// Where one host is.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Host {
    /// A host name or an address written as `host`.
    Name(String),
    /// A Unix-domain socket directory.
    Socket(PathBuf),
}

/// A password and whether it came from the password file.
#[derive(Clone, PartialEq, Eq)]
pub struct Password {
    /// The password.
    pub value: String,
    /// The password file it was read from, if it was.
    pub from_file: Option<PathBuf>,
}

impl fmt::Debug for Password {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Password {{ from_file: {:?} }}", self.from_file)
    }
}

/// One server to try, as libpq's `pg_conn_host`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Target {
    /// `host`, or the default; `None` when only `hostaddr` is given.
    pub host: Option<Host>,
    /// `hostaddr`: connect to this address (and use `host` only for TLS and the password file).
    pub hostaddr: Option<IpAddr>,
    /// The port.
    pub port: u16,
    /// The password for this host, if any.
    pub password: Option<Password>,
}

impl Target {
    /// True for a Unix-domain socket, where libpq never uses TLS.
    pub fn is_socket(&self) -> bool {
        matches!(self.host, Some(Host::Socket(_))) && self.hostaddr.is_none()
    }

    /// The name TLS checks the certificate against: `host`, else the address.
    pub fn tls_name(&self) -> Option<String> {
        match (&self.host, self.hostaddr) {
            (Some(Host::Name(name)), _) => Some(name.clone()),
            (_, Some(address)) => Some(address.to_string()),
            _ => None,
        }
    }

    /// `host:port` for summaries.
    fn short(&self) -> String {
        let host = match (&self.host, self.hostaddr) {
            (Some(Host::Name(name)), _) => name.clone(),
            (Some(Host::Socket(dir)), None) => dir.display().to_string(),
            (_, Some(address)) => address.to_string(),
            (None, None) => "?".into(),
        };
        format!("{host}:{}", self.port)
    }

    /// libpq's wording: `server at "host", port N` or `server on socket "…"`.
    pub fn label(&self) -> String {
        match (&self.host, self.hostaddr) {
            (Some(Host::Socket(dir)), None) => format!(
                "server on socket \"{}\"",
                dir.join(format!(".s.PGSQL.{}", self.port)).display()
            ),
            (Some(Host::Name(name)), Some(address)) => {
                format!("server at \"{name}\" ({address}), port {}", self.port)
            }
            (_, Some(address)) => format!("server at \"{address}\", port {}", self.port),
            (Some(Host::Name(name)), None) => format!("server at \"{name}\", port {}", self.port),
            (None, None) => format!("server at port {}", self.port),
        }
    }
}

/// Everything needed to connect, after defaults, checked.
#[derive(Debug, Clone)]
pub struct Resolved {
    /// The servers to try, in order.
    pub targets: Vec<Target>,
    /// `load_balance_hosts=random`: try them in random order.
    pub random_order: bool,
    /// The role.
    pub user: String,
    /// The database.
    pub dbname: String,
    /// `application_name`.
    pub application_name: String,
    /// `options`: server settings, e.g. `-c statement_timeout=0`.
    pub options: Option<String>,
    /// Bound on one attempt at one host; `None` waits as long as the network does.
    pub connect_timeout: Option<Duration>,
    /// TCP keepalives on.
    pub keepalives: bool,
    /// `keepalives_idle`.
    pub keepalives_idle: Option<Duration>,
    /// `keepalives_interval`.
    pub keepalives_interval: Option<Duration>,
    /// `keepalives_count`.
    pub keepalives_count: Option<u32>,
    /// `tcp_user_timeout`.
    pub tcp_user_timeout: Option<Duration>,
    /// `channel_binding`.
    pub channel_binding: ChannelBinding,
    /// `target_session_attrs`.
    pub target_session_attrs: TargetSessionAttrs,
    /// TLS settings.
    pub tls: tls::Settings,
}

/// Resolves `--db` and the environment into connection settings, as libpq.
///
/// # Errors
/// [`Error::Config`] naming the keyword, value and origin at fault.
pub fn resolve(db: Option<&str>, env: EnvLookup<'_>) -> Result<Resolved, Error> {
    let parameters = gather(db, env)?;
    build(&parameters, env, Path::new(DEFAULT_SOCKET_DIR))
}

/// A non-empty value.
fn value<'a>(parameters: &'a Parameters, key: &str) -> Option<&'a str> {
    parameters
        .get(key)
        .map(|s| s.value.as_str())
        .filter(|v| !v.is_empty())
}

/// " (from PGSSLMODE)" and the like, for messages.
fn from(parameters: &Parameters, key: &str) -> String {
    match parameters.get(key).map(|s| &s.origin) {
        Some(Origin::Environment(variable)) => format!(" (from {variable})"),
        Some(Origin::Service { name, file }) => {
            format!(" (from service \"{name}\" in \"{}\")", file.display())
        }
        _ => String::new(),
    }
}

fn invalid(parameters: &Parameters, key: &str) -> Error {
    let shown = value(parameters, key).unwrap_or("");
    Error::Config(format!(
        "invalid {key} value: \"{shown}\"{}",
        from(parameters, key)
    ))
}

fn unsupported(parameters: &Parameters, key: &str, why: &str) -> Error {
    let shown = value(parameters, key).unwrap_or("");
    Error::Config(format!(
        "{key}={shown}{} is not supported by geofold: {why}",
        from(parameters, key)
    ))
}

/// libpq's `pqParseIntParam`: an integer, trailing blanks allowed.
fn integer(parameters: &Parameters, key: &str) -> Result<Option<i64>, Error> {
    match value(parameters, key) {
        None => Ok(None),
        Some(text) => text
            .trim_end_matches(is_space)
            .parse::<i64>()
            .map(Some)
            .map_err(|_| {
                Error::Config(format!(
                    "invalid integer value \"{text}\" for connection option \"{key}\"{}",
                    from(parameters, key)
                ))
            }),
    }
}

fn seconds(parameters: &Parameters, key: &str) -> Result<Option<Duration>, Error> {
    Ok(integer(parameters, key)?.map(|s| Duration::from_secs(s.max(0) as u64)))
}

fn one_of<T: Copy>(
    parameters: &Parameters,
    key: &str,
    default: T,
    choices: &[(&str, T)],
) -> Result<T, Error> {
    match value(parameters, key) {
        None => Ok(default),
        Some(text) => choices
            .iter()
            .find(|(name, _)| *name == text)
            .map(|(_, v)| *v)
            .ok_or_else(|| invalid(parameters, key)),
    }
}

/// Splits a comma-separated list as libpq's `parse_comma_separated_list`.
fn list(text: Option<&str>) -> Vec<String> {
    text.map(|t| t.split(',').map(str::to_string).collect())
        .unwrap_or_default()
}

impl Resolved {
    /// The tokio-postgres configuration for one target and TLS mode.
    pub fn config_for(&self, target: &Target, ssl_mode: tokio_postgres::config::SslMode) -> Config {
        let mut config = Config::new();
        config
            .user(&self.user)
            .dbname(&self.dbname)
            .application_name(&self.application_name)
            .port(target.port)
            .ssl_mode(ssl_mode)
            .ssl_negotiation(if self.tls.direct {
                SslNegotiation::Direct
            } else {
                SslNegotiation::Postgres
            })
            .channel_binding(self.channel_binding)
            .target_session_attrs(self.target_session_attrs)
            .keepalives(self.keepalives);
        match (&target.host, target.hostaddr) {
            (Some(Host::Socket(dir)), None) => {
                config.host_path(dir);
            }
            (_, Some(address)) => {
                // With hostaddr, host only names the server for TLS; without
                // host, the address does (tokio-postgres needs a name to start TLS).
                config.host(target.tls_name().unwrap_or_else(|| address.to_string()));
                config.hostaddr(address);
            }
            (Some(Host::Name(name)), None) => {
                config.host(name);
            }
            (None, None) => {}
        }
        if let Some(password) = &target.password {
            config.password(password.value.as_bytes());
        }
        if let Some(options) = &self.options {
            config.options(options);
        }
        if let Some(timeout) = self.connect_timeout {
            config.connect_timeout(timeout);
        }
        if let Some(timeout) = self.tcp_user_timeout {
            config.tcp_user_timeout(timeout);
        }
        if let Some(idle) = self.keepalives_idle {
            config.keepalives_idle(idle);
        }
        if let Some(interval) = self.keepalives_interval {
            config.keepalives_interval(interval);
        }
        if let Some(count) = self.keepalives_count {
            config.keepalives_retries(count);
        }
        config
    }

    /// `user@host:port[,host:port…]/dbname`, never with a password, for messages.
    pub fn describe(&self) -> String {
        let hosts: Vec<String> = self.targets.iter().map(Target::short).collect();
        format!("{}@{}/{}", self.user, hosts.join(","), self.dbname)
    }
}

#[cfg(test)]
mod tests;
