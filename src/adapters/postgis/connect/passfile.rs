//! The password file (passfile, PGPASSFILE, ~/.pgpass): per-host lookup, as libpq's passwordFromFile.

use super::*;

/// The password: given, else from the password file per host (libpq
/// `passwordFromFile`; PostgreSQL docs "The Password File").
pub(super) fn passwords(
    parameters: &Parameters,
    targets: &mut [Target],
    dbname: &str,
    user: &str,
    home: Option<&Path>,
) {
    if let Some(password) = value(parameters, "password") {
        for target in targets.iter_mut() {
            target.password = Some(Password {
                value: password.to_string(),
                from_file: None,
            });
        }
        return;
    }
    let file = value(parameters, "passfile")
        .map(PathBuf::from)
        .or_else(|| home.map(|h| h.join(".pgpass")));
    let Some(file) = file else {
        return;
    };
    let Some(text) = read_password_file(&file) else {
        return;
    };
    for target in targets.iter_mut() {
        let host = match (&target.host, target.hostaddr) {
            (Some(Host::Socket(dir)), _) if dir == Path::new(DEFAULT_SOCKET_DIR) => {
                "localhost".to_string()
            }
            (Some(Host::Socket(dir)), _) => dir.display().to_string(),
            (Some(Host::Name(name)), _) => name.clone(),
            (None, Some(address)) => address.to_string(),
            (None, None) => "localhost".to_string(),
        };
        let port = target.port.to_string();
        if let Some(found) = password_from_lines(&text, [&host, &port, dbname, user]) {
            target.password = Some(Password {
                value: found,
                from_file: Some(file.clone()),
            });
        }
    }
}

/// The password file's text, or `None` when it is missing, not a plain file,
/// or open to group or others (then with libpq's warning).
pub(super) fn read_password_file(path: &Path) -> Option<String> {
    let metadata = std::fs::metadata(path).ok()?;
    if !metadata.is_file() {
        tracing::warn!(path = %path.display(), "password file is not a plain file; ignoring it");
        return None;
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        if metadata.permissions().mode() & 0o077 != 0 {
            tracing::warn!(
                path = %path.display(),
                "password file has group or world access; permissions should be u=rw (0600) or less; ignoring it"
            );
            return None;
        }
    }
    std::fs::read_to_string(path).ok()
}

/// The first line whose four fields match, as libpq's `pwdfMatchesString`:
/// `*` (unescaped) matches anything, `\` escapes `:` and `\`, and the
/// password runs to the next unescaped `:`.
pub(super) fn password_from_lines(text: &str, wanted: [&str; 4]) -> Option<String> {
    'lines: for line in text.lines() {
        let line = line.trim_end_matches('\r');
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let mut rest = line;
        for want in wanted {
            if let Some(after) = rest.strip_prefix("*:") {
                rest = after;
                continue;
            }
            let mut chars = rest.char_indices();
            let mut field = String::new();
            let mut end = None;
            while let Some((i, c)) = chars.next() {
                match c {
                    '\\' => match chars.next() {
                        Some((_, escaped)) => field.push(escaped),
                        None => continue 'lines,
                    },
                    ':' => {
                        end = Some(i + 1);
                        break;
                    }
                    c => field.push(c),
                }
            }
            match end {
                Some(end) if field == want => rest = &rest[end..],
                _ => continue 'lines,
            }
        }
        let mut password = String::new();
        let mut chars = rest.chars();
        while let Some(c) = chars.next() {
            match c {
                '\\' => match chars.next() {
                    Some(escaped) => password.push(escaped),
                    None => password.push('\\'),
                },
                ':' => break,
                c => password.push(c),
            }
        }
        return Some(password);
    }
    None
}
