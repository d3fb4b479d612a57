//! The report's sections, each written into the page as HTML.

use std::fmt::Write as _;

use super::input::{
    Better, Comparison, Correlogram, FoldCoefficient, NearestDistances, ReportInput, ResidualMoran,
    RunFacts, Score, ScoreDefinition, ScoreHistory, Semivariogram,
};
use crate::core::metrics::spread;
use crate::render::chart::{bar_chart, Marker, Series, XyChart};
use crate::render::colour::Rgb8;
use crate::render::input::MapKind;
use crate::render::palette::{INK, SPLIT_TEST};
use crate::render::text::{count, escape, significant, with_unit};

mod diagnostics;
mod distances;
pub(super) use diagnostics::*;
pub(super) use distances::test_distances;

/// Chart colours: a blue and an orange-brown that stay apart for every
/// colour-vision deficiency (the ends of the diverging ramp), told apart by
/// marker and dash as well.
const BLUE: Rgb8 = Rgb8::from_hex(0x2c4ea5);
const BROWN: Rgb8 = Rgb8::from_hex(0x8c3803);

/// Folds listed one by one (chart and table) at most; more are summed up.
pub const MAX_FOLDS_LISTED: usize = 200;

fn number(value: f64) -> String {
    significant(value, 4)
}

fn value_of(scores: &[Score], name: &str) -> Option<f64> {
    scores.iter().find(|s| s.name == name).map(|s| s.value)
}

fn unit_of<'a>(report: &'a ReportInput, name: &str) -> &'a str {
    definition(report, name).map_or("", |d| d.unit.as_str())
}

fn definition<'a>(report: &'a ReportInput, name: &str) -> Option<&'a ScoreDefinition> {
    report.scores.definitions.iter().find(|d| d.name == name)
}

/// Score names in display order: defined ones first, then any others as met.
fn score_names(report: &ReportInput) -> Vec<String> {
    let mut names: Vec<String> = report
        .scores
        .definitions
        .iter()
        .map(|d| d.name.clone())
        .collect();
    let seen = report
        .scores
        .pooled
        .iter()
        .chain(report.scores.folds.iter().flat_map(|f| f.scores.iter()));
    for score in seen {
        if !names.contains(&score.name) {
            names.push(score.name.clone());
        }
    }
    names
}

pub fn meaning(page: &mut String) {
    page.push_str(
        "<section id=\"meaning\" class=\"notice\"><p><strong>What these numbers mean.</strong> \
         Validation scores describe predictive skill: how far held-out predictions fell from the \
         observed values, for these units and this fold design. They do not show causes, and they do \
         not replace domain judgment, local rules or licensed professional practice. Decisions informed \
         by a model remain the responsibility of the people who make them.</p></section>",
    );
}

pub fn settings(page: &mut String, run: &RunFacts) {
    let mut rows: Vec<(String, String)> = vec![
        ("Source".to_string(), run.source.clone()),
        ("Coordinate system".to_string(), run.crs.clone()),
        (
            "Target".to_string(),
            with_unit(&run.target, &bracketed(&run.target_unit)),
        ),
        (
            "Features".to_string(),
            if run.features.is_empty() {
                "none".to_string()
            } else {
                run.features.join(", ")
            },
        ),
        (
            "Fold scheme".to_string(),
            described(&run.scheme, &run.scheme_settings),
        ),
        (
            "Model".to_string(),
            described(&run.model, &run.model_settings),
        ),
        ("Units used".to_string(), count(run.units_used)),
    ];
    let skipped: u64 = run.units_skipped.iter().map(|s| s.count).sum();
    rows.push((
        "Units skipped".to_string(),
        if skipped == 0 {
            "none".to_string()
        } else {
            let reasons: Vec<String> = run
                .units_skipped
                .iter()
                .filter(|s| s.count > 0)
                .map(|s| format!("{}: {}", s.reason, count(s.count)))
                .collect();
            format!(
                "{} {} ({})",
                count(skipped),
                if skipped == 1 { "row" } else { "rows" },
                reasons.join("; ")
            )
        },
    ));
    rows.push(("Data fingerprint".to_string(), run.fingerprint.clone()));
    page.push_str("<section id=\"settings\"><h2>Run settings</h2><dl class=\"settings\">");
    for (name, value) in rows {
        let _ = write!(
            page,
            "<dt>{}</dt><dd>{}</dd>",
            escape(&name),
            escape(&value)
        );
    }
    page.push_str("</dl></section>");
}

fn bracketed(unit: &str) -> String {
    if unit.is_empty() {
        String::new()
    } else {
        format!("({unit})")
    }
}

fn described(name: &str, settings: &[super::input::Setting]) -> String {
    if settings.is_empty() {
        return name.to_string();
    }
    let parts: Vec<String> = settings
        .iter()
        .map(|s| format!("{} {}", s.name, s.value))
        .collect();
    format!("{name}: {}", parts.join(", "))
}

pub fn scores(page: &mut String, report: &ReportInput) {
    let table = &report.scores;
    let names = score_names(report);
    page.push_str("<section id=\"scores\"><h2>Scores</h2>");
    let n_test: u64 = table.folds.iter().map(|f| f.n_test).sum();
    if let Some(headline) = names.first() {
        let unit = unit_of(report, headline);
        let pooled = value_of(&table.pooled, headline);
        let baseline = value_of(&table.baseline, headline);
        let mut sentence = format!(
            "Pooled over {} held-out predictions, {} is {}",
            count(n_test),
            headline,
            with_unit(&pooled.map_or("n/a".to_string(), number), unit)
        );
        if let (Some(p), Some(b)) = (pooled, baseline) {
            let _ = write!(
                sentence,
                "; predicting each fold's training mean instead gives {}",
                with_unit(&number(b), unit)
            );
            let better = definition(report, headline).map(|d| d.better);
            if better == Some(Better::Lower) && b > 0.0 && p.is_finite() {
                let change = (b - p) / b * 100.0;
                let _ = if change >= 0.0 {
                    write!(sentence, " ({}\u{2009}% lower)", significant(change, 2))
                } else {
                    write!(
                        sentence,
                        " (the model does worse than the training mean, by {}\u{2009}%)",
                        significant(-change, 2)
                    )
                };
            }
        }
        sentence.push('.');
        let _ = write!(page, "<p class=\"sentence\">{}</p>", escape(&sentence));
    }
    page.push_str(
        "<table class=\"scores\"><thead><tr><th>Score</th><th class=\"num\">Pooled</th>\
         <th class=\"num\">Fold mean</th><th class=\"num\">Fold SD</th><th class=\"num\">Fold range</th>\
         <th class=\"num\">Training-mean baseline</th><th>Unit</th><th>Meaning</th></tr></thead><tbody>",
    );
    for name in &names {
        let per_fold: Vec<f64> = table
            .folds
            .iter()
            .filter_map(|f| value_of(&f.scores, name))
            .collect();
        let s = spread(per_fold.iter().copied());
        let finite: Vec<f64> = per_fold.iter().copied().filter(|v| v.is_finite()).collect();
        let range = if finite.is_empty() {
            "n/a".to_string()
        } else {
            let lo = finite.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = finite.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            format!("{} \u{2013} {}", number(lo), number(hi))
        };
        let show = |v: Option<f64>| v.map_or("n/a".to_string(), number);
        let _ = write!(
            page,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td></tr>",
            escape(name),
            show(value_of(&table.pooled, name)),
            number(s.mean),
            number(s.sd),
            range,
            show(value_of(&table.baseline, name)),
            escape(unit_of(report, name)),
            escape(definition(report, name).map_or("", |d| d.description.as_str()))
        );
    }
    page.push_str("</tbody></table>");
    // Hundreds of folds (leave-one-out, say) are summed up, not listed: the
    // page stays readable and small at any number of units.
    let listed = !table.folds.is_empty() && table.folds.len() <= MAX_FOLDS_LISTED;
    if table.folds.len() > MAX_FOLDS_LISTED {
        let single = table.folds.iter().all(|f| f.n_test <= 1);
        let _ = write!(
            page,
            "<p>The run has {} folds{}; their scores are summed up above and not listed one by one \
             (each fold's scores are in the results table <code>fold_scores</code>).</p>",
            count(table.folds.len() as u64),
            if single {
                " of one test unit each, so a fold's scores are one unit's error"
            } else {
                ""
            }
        );
    }
    if let (Some(headline), true) = (names.first(), listed) {
        let unit = unit_of(report, headline);
        let points: Vec<(f64, f64, f64)> = table
            .folds
            .iter()
            .filter_map(|f| value_of(&f.scores, headline).map(|v| (f64::from(f.fold), v, 4.5)))
            .collect();
        let mut series = vec![Series::Points {
            label: "per fold".to_string(),
            points,
            colour: BLUE,
            marker: Marker::Circle,
        }];
        if let Some(p) = value_of(&table.pooled, headline) {
            series.push(Series::Level {
                label: "pooled".to_string(),
                y: p,
                colour: BLUE,
                dashed: false,
            });
        }
        if let Some(b) = value_of(&table.baseline, headline) {
            series.push(Series::Level {
                label: "training mean".to_string(),
                y: b,
                colour: BROWN,
                dashed: true,
            });
        }
        let chart = XyChart {
            title: format!("{headline} per fold"),
            x_label: "fold".to_string(),
            y_label: with_unit(headline, &bracketed(unit)),
            y_from_zero: true,
            x_from_zero: false,
            series,
        };
        let _ = write!(
            page,
            "<figure>{}<figcaption>{} of each fold (dots), pooled over all held-out units (solid line) and \
             for predicting the training mean (dashed).</figcaption></figure>",
            chart.to_svg(),
            escape(headline)
        );
    }
    if listed {
        // Run-level scores (the distance match W) have no per-fold values.
        let names: Vec<&String> = names
            .iter()
            .filter(|name| {
                table
                    .folds
                    .iter()
                    .any(|f| value_of(&f.scores, name.as_str()).is_some())
            })
            .collect();
        page.push_str(
            "<h3>Per fold</h3><table class=\"folds\"><thead><tr><th class=\"num\">Repetition</th>\
             <th class=\"num\">Fold</th><th class=\"num\">Training units</th><th class=\"num\">Test units</th>",
        );
        for name in &names {
            let _ = write!(page, "<th class=\"num\">{}</th>", escape(name));
        }
        page.push_str("</tr></thead><tbody>");
        for fold in &table.folds {
            let _ = write!(
                page,
                "<tr><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>",
                fold.repetition,
                fold.fold,
                count(fold.n_train),
                count(fold.n_test)
            );
            for name in &names {
                let _ = write!(
                    page,
                    "<td class=\"num\">{}</td>",
                    value_of(&fold.scores, name).map_or("n/a".to_string(), number)
                );
            }
            page.push_str("</tr>");
        }
        page.push_str("</tbody></table>");
    }
    page.push_str("</section>");
}

pub fn comparison(page: &mut String, report: &ReportInput, comparison: &Comparison) {
    let names = score_names(report);
    page.push_str("<section id=\"comparison\"><h2>Random versus spatial folds</h2>");
    if let Some(headline) = names.first() {
        let unit = unit_of(report, headline);
        let spatial = value_of(&report.scores.pooled, headline);
        let random = value_of(&comparison.pooled, headline);
        let mut sentence = format!(
            "With {} (run {}), {} is {}; with the spatial folds of this run it is {}.",
            comparison.label,
            comparison.run_id,
            headline,
            with_unit(&random.map_or("n/a".to_string(), number), unit),
            with_unit(&spatial.map_or("n/a".to_string(), number), unit)
        );
        if let (Some(s), Some(r)) = (spatial, random) {
            let better = definition(report, headline).map(|d| d.better);
            if s.is_finite() && r.is_finite() && s != 0.0 {
                let difference = significant(((s - r) / s * 100.0).abs(), 2);
                let _ = match better {
                    Some(Better::Lower) if r < s => write!(
                        sentence,
                        " The random folds understate the error by {difference}\u{2009}% of the spatial estimate: \
                         nearby units resemble each other, so random folds test on places much like those trained on."
                    ),
                    Some(Better::Lower) if r > s => write!(
                        sentence,
                        " The random folds report a larger error than the spatial folds, by {difference}\u{2009}%."
                    ),
                    Some(Better::Higher) if r > s => write!(
                        sentence,
                        " The random folds overstate the skill by {difference}\u{2009}% of the spatial estimate."
                    ),
                    _ => Ok(()),
                };
            }
        }
        let _ = write!(page, "<p class=\"sentence\">{}</p>", escape(&sentence));
        let bars = vec![
            (comparison.label.clone(), random.unwrap_or(f64::NAN), BROWN),
            (
                "spatial folds (this run)".to_string(),
                spatial.unwrap_or(f64::NAN),
                BLUE,
            ),
        ];
        let _ = write!(
            page,
            "<figure>{}</figure>",
            bar_chart(
                &format!("{headline}: random versus spatial folds"),
                &with_unit(headline, &bracketed(unit)),
                &bars
            )
        );
    }
    page.push_str(
        "<table><thead><tr><th>Score</th><th class=\"num\">Spatial folds</th><th class=\"num\">Comparison</th></tr></thead><tbody>",
    );
    for name in &names {
        let _ = write!(
            page,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            escape(name),
            value_of(&report.scores.pooled, name).map_or("n/a".to_string(), number),
            value_of(&comparison.pooled, name).map_or("n/a".to_string(), number)
        );
    }
    page.push_str("</tbody></table></section>");
}

pub fn maps(page: &mut String, figures: &[(MapKind, String)]) {
    page.push_str("<section id=\"maps\"><h2>Maps</h2>");
    for (kind, svg) in figures {
        let caption = match kind {
            MapKind::Folds => "The fold layout: where each fold's test units lie.".to_string(),
            MapKind::Split { fold } => format!(
                "Fold {fold}: its test units, the units it trains on, and the units left out of its training."
            ),
            MapKind::Error => "Absolute held-out error of each unit.".to_string(),
            MapKind::Residual => "Held-out residual of each unit (observed minus predicted).".to_string(),
        };
        let _ = write!(
            page,
            "<figure class=\"map\" id=\"map-{}\">{svg}<figcaption>{}</figcaption></figure>",
            kind.slug(),
            escape(&caption)
        );
    }
    page.push_str("</section>");
}

pub fn coefficients(page: &mut String, rows: &[FoldCoefficient]) {
    let mut terms: Vec<&str> = Vec::new();
    for row in rows {
        if !terms.contains(&row.term.as_str()) {
            terms.push(&row.term);
        }
    }
    page.push_str(
        "<section id=\"coefficients\"><h2>Coefficients by fold</h2><p>Each fold's model is fitted on its own \
         training units; a coefficient that moves a lot or changes sign between folds is not stable across space.</p>\
         <table><thead><tr><th>Term</th><th class=\"num\">Folds</th><th class=\"num\">Mean</th><th class=\"num\">SD</th>\
         <th class=\"num\">Min</th><th class=\"num\">Max</th><th>Sign</th></tr></thead><tbody>",
    );
    for term in terms {
        let values: Vec<f64> = rows
            .iter()
            .filter(|r| r.term == term)
            .map(|r| r.value)
            .filter(|v| v.is_finite())
            .collect();
        let s = spread(values.iter().copied());
        let lo = values.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let sign = if values.is_empty() {
            "n/a"
        } else if lo > 0.0 {
            "positive in every fold"
        } else if hi < 0.0 {
            "negative in every fold"
        } else {
            "changes between folds"
        };
        let _ = write!(
            page,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{sign}</td></tr>",
            escape(term),
            values.len(),
            number(s.mean),
            number(s.sd),
            number(lo),
            number(hi)
        );
    }
    page.push_str("</tbody></table></section>");
}

#[cfg(test)]
mod tests;
