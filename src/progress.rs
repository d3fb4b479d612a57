//! Progress of a run's long phases (read, fit, write).
//!
//! The pipeline reports to a [`Progress`] hook and knows nothing of
//! terminals; [`Bars`] draws indicatif progress bars on stderr, and only
//! when stderr is a terminal (the command line also leaves them out under
//! `--quiet`, `--json`, `--log-format json` and when `CI` is set), so logs
//! piped to a file never get escape codes.

use std::sync::Mutex;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A long phase of a run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Phase {
    /// Reading rows from the source.
    Read,
    /// Fitting and scoring the folds.
    Fit,
    /// Writing result rows.
    Write,
}

impl Phase {
    /// What the phase counts.
    pub fn unit(self) -> &'static str {
        match self {
            Phase::Read => "rows",
            Phase::Fit => "folds",
            Phase::Write => "rows",
        }
    }

    /// The phase in words.
    pub fn label(self) -> &'static str {
        match self {
            Phase::Read => "reading",
            Phase::Fit => "fitting",
            Phase::Write => "writing",
        }
    }
}

/// Where the pipeline reports progress. Every method has a do-nothing default.
pub trait Progress: Sync {
    /// A phase begins; `total` when known.
    fn start(&self, _phase: Phase, _total: Option<u64>) {}
    /// `done` units of the current phase are done.
    fn update(&self, _done: u64) {}
    /// The current phase ended with `done` units.
    fn finish(&self, _done: u64) {}
    /// True when updates are shown (so counting them is worth it).
    fn live(&self) -> bool {
        false
    }
}

/// Reports nothing.
pub struct Silent;

impl Progress for Silent {}

/// Progress bars on stderr.
pub struct Bars {
    bar: Mutex<Option<ProgressBar>>,
}

impl Bars {
    /// Bars when stderr is a terminal; None otherwise.
    pub fn on_terminal() -> Option<Bars> {
        std::io::IsTerminal::is_terminal(&std::io::stderr()).then(|| Bars {
            bar: Mutex::new(None),
        })
    }

    fn with<F: FnOnce(&ProgressBar)>(&self, f: F) {
        if let Ok(guard) = self.bar.lock() {
            if let Some(bar) = guard.as_ref() {
                f(bar);
            }
        }
    }
}

impl Progress for Bars {
    fn start(&self, phase: Phase, total: Option<u64>) {
        let unit = phase.unit();
        let (bar, template) = match total {
            Some(total) => (
                ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr()),
                format!(
                    "{{prefix:>8}} [{{bar:30}}] {{human_pos}}/{{human_len}} {unit} ({{per_sec}}, {{elapsed}})"
                ),
            ),
            None => (
                ProgressBar::with_draw_target(None, ProgressDrawTarget::stderr()),
                format!("{{prefix:>8}} {{spinner}} {{human_pos}} {unit} ({{per_sec}}, {{elapsed}})"),
            ),
        };
        if let Ok(style) = ProgressStyle::with_template(&template) {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_prefix(phase.label());
        bar.enable_steady_tick(Duration::from_millis(120));
        if let Ok(mut guard) = self.bar.lock() {
            if let Some(old) = guard.replace(bar) {
                old.finish_and_clear();
            }
        }
    }

    fn update(&self, done: u64) {
        self.with(|bar| bar.set_position(done));
    }

    fn finish(&self, done: u64) {
        if let Ok(mut guard) = self.bar.lock() {
            if let Some(bar) = guard.take() {
                bar.set_position(done);
                if bar.length().is_none() {
                    bar.set_length(done);
                }
                bar.finish();
            }
        }
    }

    fn live(&self) -> bool {
        true
    }
}
