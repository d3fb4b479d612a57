//! The connection service file: libpq's lookup of a named service in the user's and the system's
//! pg_service.conf.

use super::*;

/// The home directory: `HOME`, else the password database (as libpq 15+).
pub(super) fn home(env: EnvLookup<'_>) -> Option<PathBuf> {
    env("HOME")
        .filter(|h| !h.is_empty())
        .map(PathBuf::from)
        .or_else(std::env::home_dir)
}

/// libpq's `parseServiceInfo`: the user's file first; the system file only if
/// the service is not in the user's.
pub(super) fn apply_service(parameters: &mut Parameters, env: EnvLookup<'_>) -> Result<(), Error> {
    let service = match parameters.get("service") {
        Some(setting) => setting.value.clone(),
        None => match env("PGSERVICE").filter(|v| !v.is_empty()) {
            Some(service) => service,
            None => return Ok(()),
        },
    };
    let mut looked_in = Vec::new();
    let user_file = match env("PGSERVICEFILE").filter(|v| !v.is_empty()) {
        Some(file) => Some((PathBuf::from(file), true)),
        None => home(env).map(|home| (home.join(".pg_service.conf"), false)),
    };
    let system_dir = env("PGSYSCONFDIR")
        .filter(|v| !v.is_empty())
        .unwrap_or_else(|| DEFAULT_SYSCONFDIR.to_string());
    let system_file = (PathBuf::from(system_dir).join("pg_service.conf"), false);
    for (file, named) in user_file.into_iter().chain([system_file]) {
        if !named && !file.exists() {
            continue;
        }
        looked_in.push(format!("\"{}\"", file.display()));
        if let Some(entries) = read_service(&file, &service)? {
            for (keyword, value) in entries {
                parameters.entry(keyword).or_insert_with(|| Setting {
                    value,
                    origin: Origin::Service {
                        name: service.clone(),
                        file: file.clone(),
                    },
                });
            }
            return Ok(());
        }
    }
    let looked_in = if looked_in.is_empty() {
        "no service file exists".to_string()
    } else {
        format!("looked in {}", looked_in.join(" and "))
    };
    Err(Error::Config(format!(
        "definition of service \"{service}\" not found ({looked_in})"
    )))
}

/// The entries of `[service]` in one service file, or `None` when the file
/// has no such section. Keywords must be libpq's, written as libpq reads them
/// (`keyword=value`, nothing trimmed around `=`).
pub(super) fn read_service(
    file: &Path,
    service: &str,
) -> Result<Option<Vec<(&'static str, String)>>, Error> {
    let text = std::fs::read_to_string(file).map_err(|e| {
        Error::Config(format!(
            "service file \"{}\" not found or unreadable: {e}",
            file.display()
        ))
    })?;
    let mut found = false;
    let mut entries = Vec::new();
    for (index, raw) in text.lines().enumerate() {
        let line_number = index + 1;
        let line = raw.trim_matches(is_space);
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        if let Some(section) = line.strip_prefix('[') {
            if found {
                break;
            }
            found = section
                .strip_prefix(service)
                .is_some_and(|after| after.starts_with(']'));
            continue;
        }
        if !found {
            continue;
        }
        let where_ = format!("service file \"{}\", line {line_number}", file.display());
        let (name, value) = line
            .split_once('=')
            .ok_or_else(|| Error::Config(format!("syntax error in {where_}: no \"=\"")))?;
        if name == "service" {
            return Err(Error::Config(format!(
                "nested service specifications not supported in {where_}"
            )));
        }
        let name = keyword(name).ok_or_else(|| {
            Error::Config(format!(
                "syntax error in {where_}: invalid connection option \"{name}\""
            ))
        })?;
        entries.push((name, value.to_string()));
    }
    Ok(found.then_some(entries))
}

// -------------------------------------------------------------- resolving --
