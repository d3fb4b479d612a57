//! Parsing a libpq connection string: the key=value form with its quoting, and the URI form with
//! percent-encoding and query parameters.

use super::*;

/// Parses `--db` into libpq keywords, in the order given (a later value of a
/// keyword replaces an earlier one, as in libpq).
///
/// # Errors
/// [`Error::Config`] naming the unknown keyword or the syntax problem.
pub fn parse(text: &str) -> Result<Vec<(&'static str, String)>, Error> {
    let text = text.trim_start();
    // GDAL and QGIS write PostgreSQL sources as `PG:dbname=… host=…`.
    let text = match text.get(..3) {
        Some(prefix) if prefix.eq_ignore_ascii_case("PG:") => text[3..].trim_start(),
        _ => text,
    };
    for prefix in ["postgresql://", "postgres://"] {
        if let Some(rest) = text.strip_prefix(prefix) {
            return parse_uri(rest);
        }
    }
    parse_key_values(text)
}

/// C `isspace` in the "C" locale, which libpq's parser uses.
pub(super) fn is_space(c: char) -> bool {
    matches!(c, ' ' | '\t' | '\n' | '\x0b' | '\x0c' | '\r')
}

/// Stores one pair: the `requiressl` alias, then the keyword check.
pub(super) fn store(
    pairs: &mut Vec<(&'static str, String)>,
    name: &str,
    value: String,
    unknown: impl FnOnce(&str) -> String,
) -> Result<(), Error> {
    // fe-connect.c conninfo_storeval: requiressl=1 means sslmode=require, else prefer.
    if name == "requiressl" {
        let mode = if value.starts_with('1') {
            "require"
        } else {
            "prefer"
        };
        pairs.push(("sslmode", mode.to_string()));
        return Ok(());
    }
    match keyword(name) {
        Some(keyword) => {
            pairs.push((keyword, value));
            Ok(())
        }
        None => Err(Error::Config(unknown(name))),
    }
}

/// The `key=value` form, as libpq's `conninfo_parse`.
pub(super) fn parse_key_values(text: &str) -> Result<Vec<(&'static str, String)>, Error> {
    let mut pairs = Vec::new();
    let mut chars = text.chars().peekable();
    loop {
        while chars.next_if(|c| is_space(*c)).is_some() {}
        if chars.peek().is_none() {
            break;
        }
        let mut name = String::new();
        while let Some(c) = chars.next_if(|c| *c != '=' && !is_space(*c)) {
            name.push(c);
        }
        while chars.next_if(|c| is_space(*c)).is_some() {}
        if chars.next_if_eq(&'=').is_none() {
            let hint = if pairs.is_empty() && !name.contains('/') {
                format!(" (to name a database, write dbname={name})")
            } else {
                String::new()
            };
            return Err(Error::Config(format!(
                "missing \"=\" after \"{name}\" in connection info string{hint}"
            )));
        }
        while chars.next_if(|c| is_space(*c)).is_some() {}
        let mut value = String::new();
        if chars.next_if_eq(&'\'').is_some() {
            loop {
                match chars.next() {
                    None => {
                        return Err(Error::Config(
                            "unterminated quoted string in connection info string".into(),
                        ))
                    }
                    Some('\\') => {
                        if let Some(c) = chars.next() {
                            value.push(c);
                        }
                    }
                    Some('\'') => break,
                    Some(c) => value.push(c),
                }
            }
        } else {
            while let Some(c) = chars.next() {
                match c {
                    c if is_space(c) => break,
                    '\\' => {
                        if let Some(c) = chars.next() {
                            value.push(c);
                        }
                    }
                    c => value.push(c),
                }
            }
        }
        store(&mut pairs, &name, value, |name| {
            format!("invalid connection option \"{name}\"")
        })?;
    }
    Ok(pairs)
}

/// The URI form, as libpq's `conninfo_uri_parse_options`:
/// `postgresql://[user[:password]@][host][:port][,…][/dbname][?key=value&…]`.
pub(super) fn parse_uri(rest: &str) -> Result<Vec<(&'static str, String)>, Error> {
    let mut pairs = Vec::new();
    let mut p = rest;
    if let Some(at) = p.find(['@', '/']).filter(|&i| p[i..].starts_with('@')) {
        let credentials = &p[..at];
        let (user, password) = match credentials.split_once(':') {
            Some((user, password)) => (user, Some(password)),
            None => (credentials, None),
        };
        if !user.is_empty() {
            pairs.push(("user", percent_decode(user, "user name")?));
        }
        if let Some(password) = password.filter(|p| !p.is_empty()) {
            pairs.push(("password", percent_decode(password, "password")?));
        }
        p = &p[at + 1..];
    }
    let mut hosts = String::new();
    let mut ports = String::new();
    let mut terminator;
    loop {
        if let Some(after) = p.strip_prefix('[') {
            let close = after.find(']').ok_or_else(|| {
                Error::Config(
                    "end of string reached when looking for matching \"]\" in IPv6 host address in URI"
                        .into(),
                )
            })?;
            if close == 0 {
                return Err(Error::Config(
                    "IPv6 host address may not be empty in URI".into(),
                ));
            }
            hosts.push_str(&after[..close]);
            p = &after[close + 1..];
            if let Some(c) = p
                .chars()
                .next()
                .filter(|c| !matches!(c, ':' | '/' | '?' | ','))
            {
                return Err(Error::Config(format!(
                    "unexpected character \"{c}\" after an IPv6 host address in URI (expected \":\" or \"/\")"
                )));
            }
        } else {
            let end = p.find([':', '/', '?', ',']).unwrap_or(p.len());
            hosts.push_str(&p[..end]);
            p = &p[end..];
        }
        terminator = p.chars().next();
        p = p.get(1..).unwrap_or("");
        if terminator == Some(':') {
            let end = p.find(['/', '?', ',']).unwrap_or(p.len());
            ports.push_str(&p[..end]);
            terminator = p[end..].chars().next();
            p = p.get(end + 1..).unwrap_or("");
        }
        if terminator != Some(',') {
            break;
        }
        hosts.push(',');
        ports.push(',');
    }
    if !hosts.is_empty() {
        pairs.push(("host", percent_decode(&hosts, "host")?));
    }
    if !ports.is_empty() {
        pairs.push(("port", percent_decode(&ports, "port")?));
    }
    let mut query = None;
    match terminator {
        Some('/') => {
            let (dbname, params) = match p.split_once('?') {
                Some((dbname, params)) => (dbname, Some(params)),
                None => (p, None),
            };
            // An empty path sets nothing, so PGDATABASE still applies (libpq).
            if !dbname.is_empty() {
                pairs.push(("dbname", percent_decode(dbname, "database name")?));
            }
            query = params;
        }
        Some('?') => query = Some(p),
        _ => {}
    }
    let mut params: Vec<&str> = query.map(|q| q.split('&').collect()).unwrap_or_default();
    // libpq stops at the end of the string, so one trailing "&" is harmless.
    if params.last() == Some(&"") {
        params.pop();
    }
    for param in params {
        let (name, value) = param.split_once('=').ok_or_else(|| {
            Error::Config(format!(
                "missing key/value separator \"=\" in URI query parameter: \"{param}\""
            ))
        })?;
        if value.contains('=') {
            return Err(Error::Config(format!(
                "extra key/value separator \"=\" in URI query parameter: \"{name}\""
            )));
        }
        let name = percent_decode(name, "query parameter name")?;
        let value = percent_decode(value, &format!("value of {name}"))?;
        // libpq's JDBC compatibility: ssl=true means sslmode=require.
        if name == "ssl" && value == "true" {
            pairs.push(("sslmode", "require".to_string()));
            continue;
        }
        store(&mut pairs, &name, value, |name| {
            format!("invalid URI query parameter: \"{name}\"")
        })?;
    }
    Ok(pairs)
}

/// libpq's `conninfo_uri_decode`: `%xy` tokens, `%00` forbidden, no `+` rule.
/// Messages name the part, never its text (it may be a password).
pub(super) fn percent_decode(text: &str, part: &str) -> Result<String, Error> {
    let bytes = text.as_bytes();
    let mut out = Vec::with_capacity(bytes.len());
    let mut i = 0;
    while i < bytes.len() {
        if bytes[i] != b'%' {
            out.push(bytes[i]);
            i += 1;
            continue;
        }
        let hex = bytes
            .get(i + 1..i + 3)
            .filter(|h| h.iter().all(u8::is_ascii_hexdigit))
            .and_then(|h| std::str::from_utf8(h).ok())
            .and_then(|h| u8::from_str_radix(h, 16).ok())
            .ok_or_else(|| {
                Error::Config(format!("invalid percent-encoded token in the URI's {part}"))
            })?;
        if hex == 0 {
            return Err(Error::Config(format!(
                "forbidden value %00 in percent-encoded value in the URI's {part}"
            )));
        }
        out.push(hex);
        i += 3;
    }
    String::from_utf8(out).map_err(|_| {
        Error::Config(format!(
            "the URI's {part} is not UTF-8 after percent-decoding"
        ))
    })
}

// ------------------------------------------------------------- gathering --
