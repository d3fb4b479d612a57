//! The legend column of a map: title with the unit, one swatch per class with
//! its range (or name) and its count of units, then notes on the classification
//! and on what is drawn how.

use std::fmt::Write as _;

use super::palette::INK;
use super::style::{Fill, Stroke};
use super::text::escape;

/// One row of the legend.
#[derive(Debug, Clone, PartialEq)]
pub struct LegendEntry {
    /// Swatch fill.
    pub fill: Fill,
    /// Swatch outline, if the class has one.
    pub stroke: Option<Stroke>,
    /// Main text: the class range with its unit, or the class name.
    pub label: String,
    /// Second line in grey: usually the count of units.
    pub detail: String,
}

/// A map's legend.
#[derive(Debug, Clone, PartialEq)]
pub struct Legend {
    /// Title, naming the quantity and its unit.
    pub title: String,
    /// Rows, top to bottom.
    pub entries: Vec<LegendEntry>,
    /// Notes below the rows, each wrapped to the column.
    pub notes: Vec<String>,
}

/// Characters per line at 12 px in the legend column (DejaVu Sans averages about
/// 0.6 em a character; the column is 230 px).
const TITLE_CHARS: usize = 30;
const NOTE_CHARS: usize = 40;

impl Legend {
    /// Writes the legend as a `<g class="legend">` whose top-left corner is (x, y).
    pub fn write_svg(&self, out: &mut String, x: f64, y: f64, id_prefix: &str) {
        let _ = write!(out, "<g class=\"legend\" transform=\"translate({x} {y})\">");
        let mut line_y = 14.0;
        for line in wrap(&self.title, TITLE_CHARS) {
            let _ = write!(
                out,
                "<text x=\"0\" y=\"{line_y}\" font-size=\"13\" font-weight=\"bold\" fill=\"{INK}\">{}</text>",
                escape(&line)
            );
            line_y += 16.0;
        }
        line_y += 4.0;
        for entry in &self.entries {
            let fill = entry.fill.svg_paint(id_prefix);
            let (stroke, width, dash) = match entry.stroke {
                Some(s) => (
                    s.colour.to_string(),
                    s.width.max(1.0),
                    if s.dashed {
                        " stroke-dasharray=\"4 2\""
                    } else {
                        ""
                    },
                ),
                None => ("#777777".to_string(), 0.5, ""),
            };
            let _ = write!(
                out,
                "<rect class=\"swatch\" x=\"0.5\" y=\"{}\" width=\"24\" height=\"16\" fill=\"{fill}\" \
                 stroke=\"{stroke}\" stroke-width=\"{width}\"{dash}/>",
                line_y - 12.0
            );
            let _ = write!(
                out,
                "<text x=\"32\" y=\"{line_y}\" font-size=\"12\" fill=\"{INK}\">{}</text>",
                escape(&entry.label)
            );
            if !entry.detail.is_empty() {
                let _ = write!(
                    out,
                    "<text x=\"32\" y=\"{}\" font-size=\"10.5\" fill=\"#555555\">{}</text>",
                    line_y + 13.0,
                    escape(&entry.detail)
                );
            }
            line_y += 32.0;
        }
        line_y += 2.0;
        for note in &self.notes {
            for line in wrap(note, NOTE_CHARS) {
                let _ = write!(
                    out,
                    "<text x=\"0\" y=\"{line_y}\" font-size=\"10.5\" fill=\"#444444\">{}</text>",
                    escape(&line)
                );
                line_y += 13.5;
            }
            line_y += 5.0;
        }
        out.push_str("</g>");
    }
}

/// Splits `text` into lines of at most `width` characters at spaces (a longer
/// word stands alone on its line).
pub fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.chars().count() + 1 + word.chars().count() > width {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wrap_breaks_at_spaces_within_the_width() {
        let lines = wrap(
            "Quantile classes with equal counts, breaks rounded to 2 significant figures",
            20,
        );
        assert!(lines.iter().all(|l| l.chars().count() <= 20), "{lines:?}");
        assert_eq!(
            lines.join(" "),
            "Quantile classes with equal counts, breaks rounded to 2 significant figures"
        );
        assert_eq!(wrap("", 10), Vec::<String>::new());
    }
}
