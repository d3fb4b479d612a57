//! The checks of a GLM fold: collinear columns before the fit, and the
//! separation certificate after it (see the parent module's doc).

use super::{cholesky, Design, Link};
use crate::core::models::linear::term_name;
use crate::core::models::FitError;

/// Refuses a column that is (numerically) a linear combination of the
/// columns before it: the Cholesky of the correlation matrix of the
/// standardised columns with the intercept.
pub(super) fn check_collinear(design: &Design, names: &[String]) -> Result<(), FitError> {
    let p = design.q + 1;
    let mut h = vec![0.0; p * p];
    let mut z = vec![1.0; p];
    for i in 0..design.n {
        z[1..].copy_from_slice(design.row(i));
        for a in 0..p {
            for b in a..p {
                h[a * p + b] += z[a] * z[b];
            }
        }
    }
    cholesky(&h, p)
        .map(|_| ())
        .map_err(|j| FitError::Collinear {
            term: term_name(names, j),
            earlier: (0..j).map(|i| term_name(names, i)).collect(),
            features: names.to_vec(),
        })
}

/// The certificate test of the module doc.
pub(super) fn check_separation(
    link: Link,
    design: &Design,
    beta: &[f64],
    step: Option<&[f64]>,
    names: &[String],
) -> Result<(), FitError> {
    let Some(step) = step else {
        return Ok(());
    };
    let mut at_bound = 0usize;
    let (mut lowest, mut highest) = (f64::INFINITY, 0.0f64);
    for i in 0..design.n {
        let eta = design.eta(beta, i);
        let mu = link.mean(eta);
        let y = design.y[i];
        let bound = match link {
            Link::Logit => (mu - y).abs() < 1e-8,
            Link::Log => y == 0.0 && mu < 1e-8,
        };
        at_bound += usize::from(bound);
        let mut moved = step[0];
        for (d, x) in step[1..].iter().zip(design.row(i)) {
            moved += d * x;
        }
        let sign = link.outcome_sign(y);
        let s = if sign == 0.0 {
            -moved.abs()
        } else {
            sign * moved
        };
        lowest = lowest.min(s);
        highest = highest.max(s);
    }
    if at_bound == 0 || highest < 0.5 || lowest < -1e-6 {
        return Ok(());
    }
    let largest = step[1..].iter().fold(0.0f64, |m, d| m.max(d.abs()));
    let mut terms: Vec<(f64, String)> = step[1..]
        .iter()
        .zip(names)
        .filter(|(d, _)| largest > 0.0 && d.abs() >= 0.25 * largest)
        .map(|(d, name)| (d.abs(), format!("feature {name}")))
        .collect();
    terms.sort_by(|a, b| b.0.total_cmp(&a.0));
    let mut terms: Vec<String> = terms.into_iter().map(|(_, name)| name).collect();
    if terms.is_empty() {
        terms.push("the intercept".into());
    }
    Err(FitError::Separation {
        complete: at_bound == design.n,
        terms,
        units: at_bound,
        what: match link {
            Link::Logit => "0/1 outcomes",
            Link::Log => "zero counts",
        },
    })
}
