//! The TLS keywords: libpq's checks of sslmode and the certificate files, and the keywords geofold
//! cannot honour.

use super::*;

/// The TLS keywords: libpq's `pqConnectOptions2` checks, then the files.
pub(super) fn tls_settings(
    parameters: &Parameters,
    home: Option<&Path>,
    targets: &[Target],
) -> Result<tls::Settings, Error> {
    let rootcert = value(parameters, "sslrootcert");
    let mode = match value(parameters, "sslmode") {
        Some(text) => SslMode::parse(text).ok_or_else(|| invalid(parameters, "sslmode"))?,
        // libpq 16+: sslrootcert=system makes verify-full the default.
        None if rootcert == Some("system") => SslMode::VerifyFull,
        None => SslMode::Prefer,
    };
    if rootcert == Some("system") && mode != SslMode::VerifyFull {
        return Err(Error::Config(format!(
            "weak sslmode \"{}\"{} may not be used with sslrootcert=system (use \"verify-full\")",
            mode.as_str(),
            from(parameters, "sslmode")
        )));
    }
    let postgresql_dir = home.map(|h| h.join(".postgresql"));
    let roots = match rootcert {
        Some("system") => Roots::System,
        Some(path) => Roots::File {
            path: PathBuf::from(path),
            named: true,
        },
        None => match &postgresql_dir {
            Some(dir) => Roots::File {
                path: dir.join("root.crt"),
                named: false,
            },
            None => Roots::Unknown,
        },
    };
    let revocation = match (value(parameters, "sslcrl"), value(parameters, "sslcrldir")) {
        (None, None) => match &postgresql_dir {
            Some(dir) => Revocation::DefaultFile(dir.join("root.crl")),
            None => Revocation::None,
        },
        (file, dir) => Revocation::Named {
            file: file.map(PathBuf::from),
            dir: dir.map(PathBuf::from),
        },
    };
    let send_certificate = match value(parameters, "sslcertmode") {
        None | Some("allow") => true,
        Some("disable") => false,
        Some("require") => {
            return Err(unsupported(
                parameters,
                "sslcertmode",
                "geofold cannot tell whether the server asked for a certificate; use allow",
            ))
        }
        Some(_) => return Err(invalid(parameters, "sslcertmode")),
    };
    if let Some(key) = value(parameters, "sslkey") {
        if key.contains(':') {
            return Err(unsupported(
                parameters,
                "sslkey",
                "OpenSSL engine keys (engine:key) are not available; name a key file",
            ));
        }
    }
    let client = match (value(parameters, "sslcert"), &postgresql_dir) {
        _ if !send_certificate => None,
        (Some(cert), dir) => Some(ClientCertificate {
            cert: PathBuf::from(cert),
            key: value(parameters, "sslkey")
                .map(PathBuf::from)
                .or_else(|| dir.as_ref().map(|d| d.join("postgresql.key")))
                .unwrap_or_else(|| PathBuf::from("postgresql.key")),
            named: true,
        }),
        (None, Some(dir)) => Some(ClientCertificate {
            cert: dir.join("postgresql.crt"),
            key: value(parameters, "sslkey")
                .map(PathBuf::from)
                .unwrap_or_else(|| dir.join("postgresql.key")),
            named: false,
        }),
        (None, None) => None,
    };
    let version = |key: &str| -> Result<Option<TlsVersion>, Error> {
        value(parameters, key)
            .map(|text| TlsVersion::parse(text).ok_or_else(|| invalid(parameters, key)))
            .transpose()
    };
    let min_version = version("ssl_min_protocol_version")?.unwrap_or(TlsVersion::V1_2);
    let max_version = version("ssl_max_protocol_version")?;
    if max_version.is_some_and(|max| max < min_version) {
        return Err(Error::Config("invalid SSL protocol version range".into()));
    }
    let direct = one_of(
        parameters,
        "sslnegotiation",
        false,
        &[("postgres", false), ("direct", true)],
    )?;
    if direct && mode < SslMode::Require {
        return Err(Error::Config(format!(
            "weak sslmode \"{}\" may not be used with sslnegotiation=direct (use \"require\", \"verify-ca\", or \"verify-full\")",
            mode.as_str()
        )));
    }
    if mode == SslMode::VerifyFull
        && targets
            .iter()
            .any(|t| !t.is_socket() && !matches!(t.host, Some(Host::Name(_))))
    {
        return Err(Error::Config(
            "host name must be specified for a verified SSL connection (sslmode=verify-full checks it against the certificate; hostaddr alone gives none)"
                .into(),
        ));
    }
    Ok(tls::Settings {
        mode,
        roots,
        revocation,
        client,
        sni: value(parameters, "sslsni").is_none_or(|v| v.starts_with('1')),
        min_version,
        max_version,
        direct,
    })
}

/// Keywords geofold cannot honour: refused when honouring them matters,
/// accepted with a warning when it does not.
pub(super) fn check_unsupported(parameters: &Parameters, targets: &[Target]) -> Result<(), Error> {
    if value(parameters, "require_auth").is_some() {
        return Err(unsupported(
            parameters,
            "require_auth",
            "the client library cannot limit the authentication methods a server may ask for",
        ));
    }
    if value(parameters, "requirepeer").is_some() && targets.iter().any(Target::is_socket) {
        return Err(unsupported(
            parameters,
            "requirepeer",
            "the server process's user cannot be checked on a socket; connect over TCP or leave it out",
        ));
    }
    match value(parameters, "replication") {
        None | Some("0" | "false" | "off" | "no") => {}
        Some(_) => {
            return Err(unsupported(
                parameters,
                "replication",
                "geofold is not a replication client",
            ))
        }
    }
    match value(parameters, "gssencmode") {
        None | Some("disable" | "prefer") => {}
        Some("require") => {
            return Err(unsupported(
                parameters,
                "gssencmode",
                "GSSAPI encryption is not available; use TLS (sslmode)",
            ))
        }
        Some(_) => return Err(invalid(parameters, "gssencmode")),
    }
    if let Some(encoding) = value(parameters, "client_encoding") {
        let utf8 = ["utf8", "utf-8", "unicode", "auto"]
            .iter()
            .any(|e| encoding.eq_ignore_ascii_case(e));
        if !utf8 {
            tracing::warn!(
                client_encoding = encoding,
                "client_encoding is ignored: geofold always talks UTF8 with the server"
            );
        }
    }
    if value(parameters, "sslcompression") == Some("1") {
        tracing::warn!(
            "sslcompression=1 is ignored: TLS compression is off in every current TLS library"
        );
    }
    Ok(())
}
