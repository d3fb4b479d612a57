//! Connecting the way libpq does.
//!
//! `--db` takes a libpq URI (`postgresql://user@host:port/db?…`) or a
//! `key=value` string. tokio-postgres reads no environment variables itself, so
//! parameters not given there are filled, as libpq does, from `PGHOST`,
//! `PGPORT`, `PGDATABASE`, `PGUSER`, `PGPASSWORD`, `PGSSLMODE`, `PGAPPNAME` and
//! `PGCONNECT_TIMEOUT`; a missing password is looked up in the password file
//! (`PGPASSFILE`, default `~/.pgpass`, ignored unless mode 0600 or stricter).
//! Defaults: host = the Debian socket directory `/var/run/postgresql` when it
//! exists, else `localhost`; port 5432; user = the OS user; database = the user;
//! `application_name` = `geofold` unless the caller names one.
//!
//! `sslmode` takes `disable`, `prefer` (the default: TLS when the server offers
//! it) and `require`, with libpq's meaning: encrypted, certificate not verified
//! (see [`super::tls`]). `verify-ca` and `verify-full` are refused as
//! configuration errors rather than silently weakened.

use std::path::PathBuf;
use std::str::FromStr;
use std::time::Duration;

use tokio_postgres::config::{Host, SslMode};
use tokio_postgres::Config;

use crate::error::Error;

/// Reads an environment variable through a lookup function, so tests can pass their own.
pub type EnvLookup<'a> = &'a dyn Fn(&str) -> Option<String>;

/// Builds the connection configuration from `--db` (may be empty) and the environment.
///
/// # Errors
/// [`Error::Config`] for a string that does not parse or an unsupported `sslmode`.
pub fn resolve(db: Option<&str>, env: EnvLookup<'_>) -> Result<Config, Error> {
    let text = db.unwrap_or("").trim();
    let mut config = if text.is_empty() {
        Config::new()
    } else {
        Config::from_str(text)
            .map_err(|error| Error::Config(format!("cannot parse --db: {error}")))?
    };
    let explicit_ssl = text.contains("sslmode");
    if config.get_hosts().is_empty() {
        match env("PGHOST") {
            Some(hosts) => {
                for host in hosts.split(',') {
                    if host.starts_with('/') {
                        config.host_path(host);
                    } else {
                        config.host(host);
                    }
                }
            }
            None => {
                let socket_dir = PathBuf::from("/var/run/postgresql");
                if socket_dir.join(".s.PGSQL.5432").exists() {
                    config.host_path(socket_dir);
                } else {
                    config.host("localhost");
                }
            }
        }
    }
    if config.get_ports().is_empty() {
        if let Some(port) = env("PGPORT") {
            let port = port
                .parse::<u16>()
                .map_err(|_| Error::Config(format!("PGPORT is not a port number: {port:?}")))?;
            config.port(port);
        }
    }
    if config.get_user().is_none() {
        let user = env("PGUSER")
            .or_else(|| env("USER"))
            .unwrap_or_else(|| "postgres".to_string());
        config.user(&user);
    }
    if config.get_dbname().is_none() {
        let dbname = env("PGDATABASE").or_else(|| config.get_user().map(str::to_string));
        if let Some(dbname) = dbname {
            config.dbname(&dbname);
        }
    }
    if !explicit_ssl {
        if let Some(mode) = env("PGSSLMODE") {
            config.ssl_mode(parse_ssl_mode(&mode)?);
        }
    }
    if config.get_application_name().is_none() {
        let name = env("PGAPPNAME").unwrap_or_else(|| "geofold".to_string());
        config.application_name(&name);
    }
    if config.get_connect_timeout().is_none() {
        let seconds = env("PGCONNECT_TIMEOUT")
            .and_then(|s| s.parse::<u64>().ok())
            .unwrap_or(10);
        config.connect_timeout(Duration::from_secs(seconds.max(1)));
    }
    if config.get_password().is_none() {
        if let Some(password) = env("PGPASSWORD").or_else(|| password_from_file(&config, env)) {
            config.password(password);
        }
    }
    Ok(config)
}

fn parse_ssl_mode(mode: &str) -> Result<SslMode, Error> {
    match mode {
        "disable" => Ok(SslMode::Disable),
        "prefer" | "allow" => Ok(SslMode::Prefer),
        "require" => Ok(SslMode::Require),
        other => Err(Error::Config(format!(
            "unsupported sslmode {other:?}: geofold offers disable, prefer and require (encrypted, certificate not verified)"
        ))),
    }
}

/// Looks the connection up in the libpq password file: the first line whose
/// host, port, database and user fields match (`*` matches anything).
fn password_from_file(config: &Config, env: EnvLookup<'_>) -> Option<String> {
    let path = env("PGPASSFILE")
        .map(PathBuf::from)
        .or_else(|| env("HOME").map(|home| PathBuf::from(home).join(".pgpass")))?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = std::fs::metadata(&path).ok()?.permissions().mode();
        if mode & 0o077 != 0 {
            tracing::warn!(path = %path.display(), "password file has group or world access; ignoring it");
            return None;
        }
    }
    let text = std::fs::read_to_string(&path).ok()?;
    let host = match config.get_hosts().first()? {
        Host::Tcp(name) => name.clone(),
        #[cfg(unix)]
        Host::Unix(_) => "localhost".to_string(),
    };
    let port = config
        .get_ports()
        .first()
        .copied()
        .unwrap_or(5432)
        .to_string();
    let dbname = config.get_dbname().unwrap_or("").to_string();
    let user = config.get_user().unwrap_or("").to_string();
    let wanted = [host, port, dbname, user];
    text.lines()
        .filter(|line| !line.starts_with('#'))
        .find_map(|line| {
            let fields = split_pgpass_line(line);
            if fields.len() != 5 {
                return None;
            }
            let matches = fields[..4]
                .iter()
                .zip(&wanted)
                .all(|(field, value)| field == "*" || field == value);
            matches.then(|| fields[4].clone())
        })
}

/// Splits a password-file line on unescaped `:`; `\` escapes `:` and `\`.
fn split_pgpass_line(line: &str) -> Vec<String> {
    let mut fields = vec![String::new()];
    let mut chars = line.chars();
    while let Some(c) = chars.next() {
        match c {
            '\\' => {
                if let Some(next) = chars.next() {
                    if let Some(field) = fields.last_mut() {
                        field.push(next);
                    }
                }
            }
            ':' => fields.push(String::new()),
            other => {
                if let Some(field) = fields.last_mut() {
                    field.push(other);
                }
            }
        }
    }
    fields
}

/// A short description of where we connect, with no password, for logs and summaries.
pub fn describe(config: &Config) -> String {
    let host = match config.get_hosts().first() {
        Some(Host::Tcp(name)) => name.clone(),
        #[cfg(unix)]
        Some(Host::Unix(path)) => path.display().to_string(),
        None => "?".into(),
    };
    let port = config.get_ports().first().copied().unwrap_or(5432);
    format!(
        "{}@{}:{}/{}",
        config.get_user().unwrap_or("?"),
        host,
        port,
        config.get_dbname().unwrap_or("?")
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashMap;

    fn env_of(pairs: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
        let map: HashMap<String, String> = pairs
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect();
        move |key: &str| map.get(key).cloned()
    }

    #[test]
    fn environment_fills_what_the_string_leaves_out() {
        // libpq precedence (PostgreSQL docs, "Environment Variables"): explicit values win.
        let env = env_of(&[
            ("PGHOST", "db.internal"),
            ("PGPORT", "6543"),
            ("PGUSER", "batch"),
            ("PGPASSWORD", "s3cret"),
        ]);
        let config = resolve(Some("dbname=gis"), &env).unwrap();
        assert_eq!(config.get_hosts(), &[Host::Tcp("db.internal".into())]);
        assert_eq!(config.get_ports(), &[6543]);
        assert_eq!(config.get_user(), Some("batch"));
        assert_eq!(config.get_dbname(), Some("gis"));
        assert_eq!(config.get_password(), Some(&b"s3cret"[..]));
        assert_eq!(config.get_application_name(), Some("geofold"));
        let config = resolve(
            Some("postgresql://alice@h2:7000/other?application_name=nightly"),
            &env,
        )
        .unwrap();
        assert_eq!(config.get_hosts(), &[Host::Tcp("h2".into())]);
        assert_eq!(config.get_ports(), &[7000]);
        assert_eq!(config.get_user(), Some("alice"));
        assert_eq!(config.get_application_name(), Some("nightly"));
    }

    #[test]
    fn pgappname_and_database_default() {
        let env = env_of(&[
            ("PGAPPNAME", "agency-job"),
            ("PGUSER", "ana"),
            ("PGHOST", "x"),
        ]);
        let config = resolve(None, &env).unwrap();
        assert_eq!(config.get_application_name(), Some("agency-job"));
        assert_eq!(config.get_dbname(), Some("ana"));
    }

    #[test]
    fn unsupported_sslmode_is_a_configuration_error() {
        let env = env_of(&[("PGSSLMODE", "verify-full"), ("PGHOST", "x")]);
        assert_eq!(
            resolve(None, &env).unwrap_err().exit_code(),
            crate::error::exit::CONFIG
        );
        assert!(resolve(Some("host=x sslmode=bogus"), &env_of(&[])).is_err());
    }

    #[test]
    fn password_file_lines_are_matched_in_order() {
        // Format per PostgreSQL docs "The Password File": host:port:database:user:password.
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("pgpass");
        std::fs::write(
            &path,
            "# comment\nother:*:*:*:wrong\ndb.internal:5432:gis:batch:pa\\:ss\n*:*:*:*:fallback\n",
        )
        .unwrap();
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o600)).unwrap();
        }
        let file = path.display().to_string();
        let env = env_of(&[("PGPASSFILE", &file)]);
        let config = resolve(Some("host=db.internal dbname=gis user=batch"), &env).unwrap();
        assert_eq!(config.get_password(), Some(&b"pa:ss"[..]));
        let config = resolve(Some("host=elsewhere dbname=gis user=batch"), &env).unwrap();
        assert_eq!(config.get_password(), Some(&b"fallback"[..]));
    }
}
