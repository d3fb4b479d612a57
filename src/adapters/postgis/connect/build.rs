//! Turning the merged parameters into checked settings: defaults, value checks, and the list of
//! hosts to try.

use super::*;

/// Applies defaults and checks every value. `socket_dir` is the default socket directory.
pub(super) fn build(
    parameters: &Parameters,
    env: EnvLookup<'_>,
    socket_dir: &Path,
) -> Result<Resolved, Error> {
    let home = home(env);
    let user = match value(parameters, "user") {
        Some(user) => user.to_string(),
        // libpq pg_fe_getauthname: the password database entry of geteuid().
        None => whoami::username().map_err(|e| {
            Error::Config(format!(
                "could not look up the local user name ({e}); set user= or PGUSER"
            ))
        })?,
    };
    let dbname = value(parameters, "dbname").unwrap_or(&user).to_string();
    let mut targets = targets(parameters, socket_dir)?;
    passwords(parameters, &mut targets, &dbname, &user, home.as_deref());

    let tls = tls_settings(parameters, home.as_deref(), &targets)?;
    let connect_timeout = match integer(parameters, "connect_timeout")? {
        None => Some(Duration::from_secs(DEFAULT_CONNECT_TIMEOUT_S)),
        // libpq: zero or negative waits forever; 1 is raised to 2.
        Some(s) if s <= 0 => None,
        Some(s) => Some(Duration::from_secs(s.max(2) as u64)),
    };
    let channel_binding = one_of(
        parameters,
        "channel_binding",
        ChannelBinding::Prefer,
        &[
            ("disable", ChannelBinding::Disable),
            ("prefer", ChannelBinding::Prefer),
            ("require", ChannelBinding::Require),
        ],
    )?;
    let target_session_attrs = match value(parameters, "target_session_attrs") {
        None | Some("any") => TargetSessionAttrs::Any,
        Some("read-write") => TargetSessionAttrs::ReadWrite,
        Some("read-only") => TargetSessionAttrs::ReadOnly,
        Some("primary" | "standby" | "prefer-standby") => {
            return Err(unsupported(
                parameters,
                "target_session_attrs",
                "use any, read-write or read-only",
            ))
        }
        Some(_) => return Err(invalid(parameters, "target_session_attrs")),
    };
    let random_order = one_of(
        parameters,
        "load_balance_hosts",
        false,
        &[("disable", false), ("random", true)],
    )?;
    check_unsupported(parameters, &targets)?;
    let application_name = value(parameters, "application_name")
        .or_else(|| value(parameters, "fallback_application_name"))
        .unwrap_or("geofold")
        .to_string();
    Ok(Resolved {
        targets,
        random_order,
        user,
        dbname,
        application_name,
        options: value(parameters, "options").map(str::to_string),
        connect_timeout,
        keepalives: integer(parameters, "keepalives")?.is_none_or(|k| k != 0),
        keepalives_idle: seconds(parameters, "keepalives_idle")?,
        keepalives_interval: seconds(parameters, "keepalives_interval")?,
        keepalives_count: integer(parameters, "keepalives_count")?
            .map(|c| c.clamp(0, u32::MAX as i64) as u32),
        tcp_user_timeout: integer(parameters, "tcp_user_timeout")?
            .map(|ms| Duration::from_millis(ms.max(0) as u64)),
        channel_binding,
        target_session_attrs,
        tls,
    })
}

/// libpq's `pqConnectOptions2` host, hostaddr and port lists.
pub(super) fn targets(parameters: &Parameters, socket_dir: &Path) -> Result<Vec<Target>, Error> {
    let hostaddrs = list(value(parameters, "hostaddr"));
    let hosts = list(value(parameters, "host"));
    let count = if !hostaddrs.is_empty() {
        hostaddrs.len()
    } else {
        hosts.len().max(1)
    };
    if !hosts.is_empty() && hosts.len() != count {
        return Err(Error::Config(format!(
            "could not match {} host names to {count} hostaddr values",
            hosts.len()
        )));
    }
    let mut ports = list(value(parameters, "port"));
    if ports.len() == 1 {
        ports = vec![ports[0].clone(); count];
    } else if !ports.is_empty() && ports.len() != count {
        return Err(Error::Config(format!(
            "could not match {} port numbers to {count} hosts{}",
            ports.len(),
            from(parameters, "port")
        )));
    }
    let mut targets = Vec::with_capacity(count);
    for index in 0..count {
        let port = match ports
            .get(index)
            .map(String::as_str)
            .filter(|p| !p.is_empty())
        {
            None => 5432,
            Some(text) => text
                .trim_end_matches(is_space)
                .parse::<u16>()
                .ok()
                .filter(|p| *p >= 1)
                .ok_or_else(|| {
                    Error::Config(format!(
                        "invalid port number: \"{text}\"{}",
                        from(parameters, "port")
                    ))
                })?,
        };
        let hostaddr = match hostaddrs
            .get(index)
            .map(String::as_str)
            .filter(|a| !a.is_empty())
        {
            None => None,
            Some(text) => Some(text.parse::<IpAddr>().map_err(|_| {
                Error::Config(format!(
                    "could not parse network address \"{text}\"{}",
                    from(parameters, "hostaddr")
                ))
            })?),
        };
        let host = match hosts
            .get(index)
            .map(String::as_str)
            .filter(|h| !h.is_empty())
        {
            Some(text) if text.starts_with('/') => Some(Host::Socket(PathBuf::from(text))),
            Some(text) if text.starts_with('@') => {
                return Err(unsupported(
                    parameters,
                    "host",
                    "abstract Unix sockets (a host starting with @) are not available",
                ))
            }
            Some(text) => Some(Host::Name(text.to_string())),
            None if hostaddr.is_some() => None,
            None if socket_dir.join(format!(".s.PGSQL.{port}")).exists() => {
                Some(Host::Socket(socket_dir.to_path_buf()))
            }
            None => Some(Host::Name("localhost".into())),
        };
        targets.push(Target {
            host,
            hostaddr,
            port,
            password: None,
        });
    }
    Ok(targets)
}
