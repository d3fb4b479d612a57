//! Drift gates: limits on a run's stored scores that tell a scheduler, through
//! the exit code, whether predictive skill has drifted.
//!
//! # Syntax
//! `SCORE OP LIMIT`, spaces allowed around each part:
//! - `SCORE` is a stored score name ([`ALL_SCORES`]: `rmse`, `mae`, `bias`,
//!   `r2`, …); the gate reads the run's pooled value of it.
//! - `OP` is `<=`, `<`, `>=` or `>`. A lower-is-better score (`rmse`, `mae`)
//!   is bounded from above (`<=`, `<`), a higher-is-better one (`r2`) from
//!   below (`>=`, `>`); a score best at zero (`bias`) takes absolute limits in
//!   either direction.
//! - `LIMIT` is a number (an absolute limit: `rmse<=1.25`) or a signed
//!   percentage (a limit relative to the job's baseline: `rmse<=+10%` allows
//!   at most 10 % above it, `r2>=-5%` at most 5 % below it). The limit is
//!   `baseline + p/100 · |baseline|`.
//!
//! # Baseline
//! The job's pinned run (`geofold pin RUN_ID`) when there is one, otherwise
//! the median, score by score, of the pooled values of the job's last N
//! successful primary runs before this one (N = `--baseline-runs`, default
//! [`DEFAULT_BASELINE_RUNS`]; the median of an even count is the mean of the
//! middle two). A relative gate with no baseline yet (the job's first run)
//! passes and says so. A score that is undefined for the run (e.g. R² of a
//! constant target) breaches its gate.

use std::fmt;

use serde::{Deserialize, Serialize};
use uuid::Uuid;

use crate::adapters::StoredRun;
use crate::core::metrics::{score_def, Better, Family, ALL_SCORES};
use crate::error::Error;

/// Default number of earlier successful runs whose median is the baseline.
pub const DEFAULT_BASELINE_RUNS: u32 = 5;
/// Largest `--baseline-runs`.
pub const MAX_BASELINE_RUNS: u32 = 100;
/// The statistic of `run_score_values` that gates read.
pub const STATISTIC: &str = "pooled";

/// A comparison.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Op {
    /// `<=`
    AtMost,
    /// `<`
    Below,
    /// `>=`
    AtLeast,
    /// `>`
    Above,
}

impl Op {
    fn as_str(self) -> &'static str {
        match self {
            Op::AtMost => "<=",
            Op::Below => "<",
            Op::AtLeast => ">=",
            Op::Above => ">",
        }
    }

    fn upper(self) -> bool {
        matches!(self, Op::AtMost | Op::Below)
    }

    fn holds(self, value: f64, limit: f64) -> bool {
        match self {
            Op::AtMost => value <= limit,
            Op::Below => value < limit,
            Op::AtLeast => value >= limit,
            Op::Above => value > limit,
        }
    }
}

/// A gate's limit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Limit {
    /// A value of the score.
    Absolute(f64),
    /// A signed percentage of the baseline's magnitude, added to the baseline.
    Relative(f64),
}

/// One gate: `SCORE OP LIMIT`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub struct Gate {
    /// The score's stored name.
    pub score: String,
    /// The comparison.
    pub op: Op,
    /// The limit.
    pub limit: Limit,
}

impl fmt::Display for Gate {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.limit {
            Limit::Absolute(value) => write!(f, "{}{}{value}", self.score, self.op.as_str()),
            Limit::Relative(percent) => {
                write!(f, "{}{}{percent:+}%", self.score, self.op.as_str())
            }
        }
    }
}

impl From<Gate> for String {
    fn from(gate: Gate) -> String {
        gate.to_string()
    }
}

impl TryFrom<String> for Gate {
    type Error = String;
    fn try_from(text: String) -> Result<Gate, String> {
        Gate::parse(&text).map_err(|e| e.to_string())
    }
}

/// The syntax, for messages and `--help`.
pub const SYNTAX: &str =
    "SCORE OP LIMIT: OP is <=, <, >= or >; LIMIT a number (absolute) or a signed \
                          percentage of the baseline (rmse<=+10%, r2>=-5%)";

impl Gate {
    /// Parses `SCORE OP LIMIT`.
    ///
    /// # Errors
    /// [`Error::Usage`] naming what is wrong: an unknown score, a missing or
    /// unknown operator, a limit that is not a number or signed percentage, a
    /// direction that does not fit the score.
    pub fn parse(text: &str) -> Result<Gate, Error> {
        let bad = |why: String| Error::Usage(format!("--gate {text:?}: {why}"));
        let trimmed = text.trim();
        let at = trimmed
            .find(['<', '>', '='])
            .ok_or_else(|| bad(format!("no comparison; write {SYNTAX}")))?;
        let score = trimmed[..at].trim().to_ascii_lowercase();
        let rest = &trimmed[at..];
        let (op, rest) = if let Some(rest) = rest.strip_prefix("<=") {
            (Op::AtMost, rest)
        } else if let Some(rest) = rest.strip_prefix(">=") {
            (Op::AtLeast, rest)
        } else if let Some(rest) = rest.strip_prefix('<') {
            (Op::Below, rest)
        } else if let Some(rest) = rest.strip_prefix('>') {
            (Op::Above, rest)
        } else {
            return Err(bad(format!(
                "the comparison must be <=, <, >= or >; write {SYNTAX}"
            )));
        };
        let Some(def) = score_def(&score) else {
            let known: Vec<&str> = ALL_SCORES.iter().map(|s| s.name).collect();
            return Err(bad(format!(
                "unknown score {score:?}; scores are {}",
                known.join(", ")
            )));
        };
        let rest = rest.trim();
        let limit = if let Some(number) = rest.strip_suffix('%') {
            let number = number.trim();
            if !(number.starts_with('+') || number.starts_with('-')) {
                return Err(bad(format!(
                    "a relative limit has a sign: +{number}% (above the baseline) or -{number}% (below it)"
                )));
            }
            let percent: f64 = number
                .parse()
                .map_err(|_| bad(format!("{rest:?} is not a percentage")))?;
            if !(percent.is_finite() && percent.abs() <= 1000.0) {
                return Err(bad(format!(
                    "a relative limit must be from -1000% to +1000%, got {rest}"
                )));
            }
            Limit::Relative(percent)
        } else {
            let value: f64 = rest.parse().map_err(|_| {
                bad(format!(
                    "{rest:?} is neither a number nor a signed percentage; write {SYNTAX}"
                ))
            })?;
            if !value.is_finite() {
                return Err(bad(format!(
                    "the limit must be a finite number, got {rest}"
                )));
            }
            Limit::Absolute(value)
        };
        match (def.better, op.upper(), limit) {
            (Better::Lower, false, _) => Err(bad(format!(
                "{score} is better when lower, so a gate bounds it from above (<= or <)"
            ))),
            (Better::Higher, true, _) => Err(bad(format!(
                "{score} is better when higher, so a gate bounds it from below (>= or >)"
            ))),
            (Better::Zero, _, Limit::Relative(_)) => Err(bad(format!(
                "{score} is best at zero, where a percentage of the baseline means little; give an \
                 absolute limit in each direction ({score}<=0.5 and {score}>=-0.5)"
            ))),
            _ => Ok(Gate { score, op, limit }),
        }
    }

    /// Checks that the model's family produces the gate's score.
    ///
    /// # Errors
    /// [`Error::Usage`] naming the family's scores.
    pub fn check(&self, family: Family) -> Result<(), Error> {
        let scores = family.scores();
        if scores.iter().any(|s| s.name == self.score) {
            return Ok(());
        }
        let names: Vec<&str> = scores.iter().map(|s| s.name).collect();
        Err(Error::Usage(format!(
            "--gate {self}: a {} model has no {} score; its scores are {}",
            family.name(),
            self.score,
            names.join(", ")
        )))
    }
}

/// Parses every `--gate`.
///
/// # Errors
/// The first gate that does not parse.
pub fn parse_all(texts: &[String]) -> Result<Vec<Gate>, Error> {
    texts.iter().map(|text| Gate::parse(text)).collect()
}

/// Where a baseline comes from.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum BaselineSource {
    /// The job's pinned run.
    Pinned {
        /// Its id.
        run_id: Uuid,
    },
    /// The median of earlier successful runs.
    Median {
        /// The runs, newest first.
        run_ids: Vec<Uuid>,
        /// How many were asked for.
        wanted: u32,
    },
}

impl fmt::Display for BaselineSource {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BaselineSource::Pinned { run_id } => write!(f, "pinned run {run_id}"),
            BaselineSource::Median { run_ids, wanted } => write!(
                f,
                "median of the last {} successful run(s){}",
                run_ids.len(),
                if run_ids.len() < *wanted as usize {
                    format!(" (of {wanted} wanted; fewer exist)")
                } else {
                    String::new()
                }
            ),
        }
    }
}

/// The baseline of a job: pooled score values and where they come from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Baseline {
    /// Where it comes from.
    pub source: BaselineSource,
    /// `(score, value)`; None where no run defines the score.
    pub scores: Vec<(String, Option<f64>)>,
}

impl Baseline {
    fn get(&self, score: &str) -> Option<f64> {
        self.scores
            .iter()
            .find(|(name, _)| name == score)
            .and_then(|(_, value)| *value)
    }
}

/// The pooled value of `score` among a run's stored scores.
pub fn pooled(scores: &[(String, String, Option<f64>)], score: &str) -> Option<f64> {
    scores
        .iter()
        .find(|(name, statistic, _)| name == score && statistic == STATISTIC)
        .and_then(|(_, _, value)| *value)
        .filter(|value| value.is_finite())
}

/// The median of the values (None when there are none).
pub fn median(values: &mut [f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let mid = values.len() / 2;
    Some(if values.len() % 2 == 1 {
        values[mid]
    } else {
        (values[mid - 1] + values[mid]) / 2.0
    })
}

/// The baseline for `current` from the job's history (newest first, as
/// [`crate::adapters::ResultStore::runs`] returns it), or None when the job
/// has no earlier successful run.
pub fn choose_baseline(history: &[StoredRun], current: Uuid, wanted: u32) -> Option<Baseline> {
    let usable = |run: &&StoredRun| {
        run.run_id != current && run.status == "succeeded" && run.primary_run_id.is_none()
    };
    let names: Vec<&str> = ALL_SCORES.iter().map(|s| s.name).collect();
    if let Some(pinned) = history.iter().filter(usable).find(|run| run.pinned) {
        return Some(Baseline {
            source: BaselineSource::Pinned {
                run_id: pinned.run_id,
            },
            scores: names
                .iter()
                .map(|name| (name.to_string(), pooled(&pinned.scores, name)))
                .collect(),
        });
    }
    let recent: Vec<&StoredRun> = history
        .iter()
        .filter(usable)
        .take(wanted as usize)
        .collect();
    if recent.is_empty() {
        return None;
    }
    Some(Baseline {
        source: BaselineSource::Median {
            run_ids: recent.iter().map(|run| run.run_id).collect(),
            wanted,
        },
        scores: names
            .iter()
            .map(|name| {
                let mut values: Vec<f64> = recent
                    .iter()
                    .filter_map(|run| pooled(&run.scores, name))
                    .collect();
                (name.to_string(), median(&mut values))
            })
            .collect(),
    })
}

/// How a gate came out.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// Within the limit.
    Passed,
    /// Beyond the limit, or the score undefined.
    Breached,
    /// A relative gate with no baseline yet: not judged, counts as passed.
    NoBaseline,
}

/// One gate's outcome, with everything the summary names.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GateResult {
    /// The gate as written (normalised).
    pub gate: String,
    /// The score.
    pub score: String,
    /// The run's pooled value.
    pub value: Option<f64>,
    /// The baseline's value, for a relative gate.
    pub baseline: Option<f64>,
    /// Where the baseline comes from, for a relative gate.
    pub baseline_from: Option<String>,
    /// The limit the value was held to.
    pub limit: Option<f64>,
    /// The outcome.
    pub verdict: Verdict,
}

impl GateResult {
    /// One line for the text summary.
    pub fn describe(&self) -> String {
        let value = self.value.map_or_else(|| "undefined".to_string(), number);
        let baseline = match (&self.baseline, &self.baseline_from) {
            (Some(b), Some(from)) => format!(", baseline {} ({from})", number(*b)),
            _ => String::new(),
        };
        match self.verdict {
            Verdict::NoBaseline => format!(
                "gate {}: not judged: no baseline yet (no pinned run and no earlier successful run); \
                 {} is {value}",
                self.gate, self.score
            ),
            verdict => format!(
                "gate {}: {}: {} {value}, limit {}{baseline}",
                self.gate,
                if verdict == Verdict::Passed {
                    "passed"
                } else {
                    "BREACHED"
                },
                self.score,
                self.limit.map_or_else(|| "-".to_string(), number),
            ),
        }
    }
}

fn number(value: f64) -> String {
    let text = format!("{value:.6}");
    text.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Evaluates the gates on a run's stored scores against the baseline.
pub fn evaluate(
    gates: &[Gate],
    scores: &[(String, String, Option<f64>)],
    baseline: Option<&Baseline>,
) -> Vec<GateResult> {
    gates
        .iter()
        .map(|gate| {
            let value = pooled(scores, &gate.score);
            let (limit, base) = match gate.limit {
                Limit::Absolute(limit) => (Some(limit), None),
                Limit::Relative(percent) => {
                    let base = baseline.and_then(|b| b.get(&gate.score));
                    (base.map(|b| b + percent / 100.0 * b.abs()), base)
                }
            };
            let verdict = match (value, limit) {
                (_, None) => Verdict::NoBaseline,
                (Some(value), Some(limit)) if gate.op.holds(value, limit) => Verdict::Passed,
                _ => Verdict::Breached,
            };
            GateResult {
                gate: gate.to_string(),
                score: gate.score.clone(),
                value,
                baseline: base,
                baseline_from: base
                    .and(baseline)
                    .map(|baseline| baseline.source.to_string()),
                limit,
                verdict,
            }
        })
        .collect()
}

/// True when any gate was breached.
pub fn any_breached(results: &[GateResult]) -> bool {
    results.iter().any(|r| r.verdict == Verdict::Breached)
}

#[cfg(test)]
mod tests;
