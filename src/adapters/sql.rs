//! SQL identifiers and literals, quoted the way both PostgreSQL and SQLite
//! read them (SQL standard double quotes for names, single quotes for text).
//! Every name and literal geofold puts into SQL text goes through here.

/// Quotes an identifier: `"name"` with inner quotes doubled.
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

/// The longest identifier PostgreSQL keeps (NAMEDATALEN − 1); longer names
/// are cut, so two long names could silently become one.
pub const MAX_IDENTIFIER_BYTES: usize = 63;

/// Checks that a name fits PostgreSQL's identifier limit.
///
/// # Errors
/// [`crate::error::Error::Usage`] naming the option and the limit.
pub fn check_identifier(option: &str, name: &str) -> Result<(), crate::error::Error> {
    if name.is_empty() {
        return Err(crate::error::Error::Usage(format!(
            "{option} must not be empty"
        )));
    }
    if name.len() > MAX_IDENTIFIER_BYTES {
        return Err(crate::error::Error::Usage(format!(
            "{option} {name:?} is {} bytes long; PostgreSQL names end at {MAX_IDENTIFIER_BYTES} bytes",
            name.len()
        )));
    }
    Ok(())
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
        assert!(check_identifier("--results-schema", &"s".repeat(64)).is_err());
        assert!(check_identifier("--results-schema", "").is_err());
        assert!(check_identifier("--results-schema", "geofold").is_ok());
    }
}
