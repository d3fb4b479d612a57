//! The one error type of the rendering library.
//!
//! Rendering is pure, so its errors are about the input (what is missing or not
//! finite, named by place) or about the size asked for; the PNG encoder's own
//! failures are carried as text.

use std::fmt;

/// What went wrong while drawing a map or a report.
#[derive(Debug, Clone, PartialEq)]
pub enum RenderError {
    /// The input cannot be drawn; every problem found is listed, each naming its place
    /// (for example "unit 17: coordinate (NaN, 3) is not finite").
    Input {
        /// What was being drawn: "fold map", "report", …
        what: String,
        /// One line per problem.
        problems: Vec<String>,
    },
    /// A split map was asked for a fold that no unit has.
    NoSuchFold {
        /// The fold asked for.
        fold: u32,
        /// The folds the units have, ascending.
        folds: Vec<u32>,
    },
    /// A size outside what the renderer accepts.
    Size {
        /// Which size: "map width", "PNG width", …
        what: &'static str,
        /// The value given.
        value: u32,
        /// The accepted range, as text.
        range: &'static str,
    },
    /// The SVG could not be parsed or the PNG not encoded.
    Png {
        /// The step that failed.
        action: &'static str,
        /// The library's message.
        cause: String,
    },
}

impl fmt::Display for RenderError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            RenderError::Input { what, problems } => {
                write!(f, "cannot draw the {what}: {}", problems.join("; "))
            }
            RenderError::NoSuchFold { fold, folds } => {
                let list: Vec<String> = folds.iter().map(u32::to_string).collect();
                write!(
                    f,
                    "no fold {fold} in this run: its folds are {}",
                    if list.is_empty() {
                        "none".to_string()
                    } else {
                        list.join(", ")
                    }
                )
            }
            RenderError::Size { what, value, range } => {
                write!(f, "{what} {value} is out of range: {range}")
            }
            RenderError::Png { action, cause } => {
                write!(f, "png output failed to {action}: {cause}")
            }
        }
    }
}

impl std::error::Error for RenderError {}
