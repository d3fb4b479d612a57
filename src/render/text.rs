//! Text for SVG and HTML: escaping and number formatting.
//!
//! Escaping is written here rather than taken from an XML-writer crate: it is
//! the five predefined XML entities, used both for SVG (XML) and for HTML text
//! and attribute values, where the same five are enough; the tests parse the
//! output with an XML parser (roxmltree) to check it. Numbers are formatted
//! without locale and with a true minus sign (U+2212), so the same input always
//! gives the same bytes.

use std::borrow::Cow;

/// `text` with `&`, `<`, `>`, `"` and `'` replaced by entities, safe inside XML
/// or HTML text and inside double- or single-quoted attribute values.
pub fn escape(text: &str) -> Cow<'_, str> {
    if !text.contains(['&', '<', '>', '"', '\'']) {
        return Cow::Borrowed(text);
    }
    let mut out = String::with_capacity(text.len() + 16);
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    Cow::Owned(out)
}

/// `value` with `decimals` digits after the point, a true minus sign, and no
/// negative zero; "n/a" when it is not finite.
pub fn fixed(value: f64, decimals: usize) -> String {
    if !value.is_finite() {
        return "n/a".to_string();
    }
    let text = format!("{value:.decimals$}");
    match text.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_string(),
        Some(rest) => format!("\u{2212}{rest}"),
        None => text,
    }
}

/// `value` to `digits` significant figures (at least 1); plain decimals between
/// 1e-4 and 1e9, scientific notation outside.
pub fn significant(value: f64, digits: usize) -> String {
    if !value.is_finite() {
        return "n/a".to_string();
    }
    if value == 0.0 {
        return "0".to_string();
    }
    let digits = digits.max(1);
    let magnitude = value.abs().log10().floor();
    if !(-4.0..9.0).contains(&magnitude) {
        let text = format!("{:.*e}", digits - 1, value);
        return text.replace('-', "\u{2212}");
    }
    // magnitude is in -4..9, so this fits a usize.
    let decimals = (digits as f64 - 1.0 - magnitude).max(0.0) as usize;
    fixed(value, decimals)
}

/// A count with thousands separated by commas: `1,000,000`.
pub fn count(value: u64) -> String {
    let digits = value.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// `value` followed by `unit` with a space, or alone when the unit is empty.
pub fn with_unit(value: &str, unit: &str) -> String {
    if unit.is_empty() {
        value.to_string()
    } else {
        format!("{value} {unit}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escaped_text_parses_back_to_itself() {
        // roxmltree is an independent XML parser: what it reads back must be the input.
        let tricky = "a < b && c > 'd' \"e\" ]]> <!-- x -->";
        let document = format!("<t a=\"{0}\" b='{0}'>{0}</t>", escape(tricky));
        let parsed = roxmltree::Document::parse(&document).unwrap();
        let root = parsed.root_element();
        assert_eq!(root.text(), Some(tricky));
        assert_eq!(root.attribute("a"), Some(tricky));
        assert_eq!(root.attribute("b"), Some(tricky));
        assert!(matches!(escape("plain"), Cow::Borrowed(_)));
    }

    #[test]
    fn numbers_format_without_surprises() {
        assert_eq!(fixed(-0.0001, 2), "0.00");
        assert_eq!(fixed(-1.5, 1), "\u{2212}1.5");
        assert_eq!(fixed(f64::NAN, 1), "n/a");
        assert_eq!(significant(1234.5678, 3), "1235");
        assert_eq!(significant(0.012345, 3), "0.0123");
        assert_eq!(significant(-2.0, 3), "\u{2212}2.00");
        assert_eq!(significant(1.5e-7, 2), "1.5e\u{2212}7");
        assert_eq!(count(0), "0");
        assert_eq!(count(1_000_000), "1,000,000");
        assert_eq!(count(12_345), "12,345");
        assert_eq!(with_unit("3", "mg/L"), "3 mg/L");
        assert_eq!(with_unit("3", ""), "3");
    }
}
