//! Report tests: every inline SVG parses as XML (roxmltree), nothing refers to
//! the network, optional sections come and go with their data, and the page is
//! a pure function of its input. Chromium checks the whole page in
//! `tests/render_chromium.rs`.

use super::*;
use crate::render::fixtures::{full_report, grid_map, minimal_report, tiny_map};
use input::FoldScores;

fn inline_svgs(html: &str) -> Vec<&str> {
    let mut found = Vec::new();
    let mut rest = html;
    while let Some(start) = rest.find("<svg") {
        let end = rest[start..]
            .find("</svg>")
            .map(|e| start + e + "</svg>".len())
            .unwrap();
        found.push(&rest[start..end]);
        rest = &rest[end..];
    }
    found
}

#[test]
fn full_report_has_every_section_and_valid_svg() {
    let html =
        render_report_html(&full_report(), Some(&tiny_map()), &ReportOptions::default()).unwrap();
    for id in [
        "meaning",
        "settings",
        "scores",
        "comparison",
        "test-distances",
        "maps",
        "coefficients",
        "autocorrelation",
        "distances",
        "history",
    ] {
        assert!(
            html.contains(&format!("<section id=\"{id}\"")),
            "section {id} missing"
        );
    }
    assert!(html.contains(
        "a median 1250 m from the nearest unit its model was trained on; with random 4-fold, 400.0 m."
    ));
    assert!(
        html.contains("24,000 of 40,000*"),
        "a sampled row is marked"
    );
    let svgs = inline_svgs(&html);
    // 4 maps + score chart + comparison bars + semivariogram + correlogram + distances + history.
    assert_eq!(svgs.len(), 10);
    for svg in svgs {
        roxmltree::Document::parse(svg)
            .unwrap_or_else(|e| panic!("{e}: {}", &svg[..200.min(svg.len())]));
    }
    assert!(html.contains("predictive skill, not causes"));
    assert!(html
        .contains("do not replace domain judgment, local rules or licensed professional practice"));
    // RMSE 2.4 spatial against 1.6 random: (2.4 - 1.6) / 2.4 = 33 %.
    assert!(
        html.contains("understate the error by 33\u{2009}%"),
        "comparison sentence"
    );
    // The spatial RMSE 2.4 against the training mean 3.0: 20 % lower.
    assert!(html.contains("gives 3.000 mg/L (20\u{2009}% lower)"));
    assert!(
        html.contains("changes between folds"),
        "farmland_share changes sign"
    );
    assert!(html.contains("Breaches: run 7 (run-7"));
}

#[test]
fn minimal_report_leaves_out_what_is_absent() {
    let html = render_report_html(&minimal_report(), None, &ReportOptions::default()).unwrap();
    for id in [
        "comparison",
        "test-distances",
        "maps",
        "coefficients",
        "autocorrelation",
        "distances",
        "history",
    ] {
        assert!(
            !html.contains(&format!("<section id=\"{id}\"")),
            "section {id} present"
        );
    }
    assert!(html.contains("<section id=\"scores\""));
    assert!(html.contains("2 rows (target is missing: 2)"));
    assert!(html.contains("block size 1,000 m"));
}

#[test]
fn nothing_refers_to_the_network() {
    let html = render_report_html(
        &full_report(),
        Some(&grid_map(400, 300, 10.0, 50, 5)),
        &ReportOptions::default(),
    )
    .unwrap();
    assert!(
        html.contains("data:image/png;base64,"),
        "the dense layers are embedded"
    );
    for pattern in [
        "src=\"http",
        "href=\"http",
        "@import",
        "url(http",
        "<script",
        "<link",
    ] {
        assert!(!html.contains(pattern), "found {pattern}");
    }
}

#[test]
fn map_ids_do_not_collide() {
    let html =
        render_report_html(&full_report(), Some(&tiny_map()), &ReportOptions::default()).unwrap();
    let mut ids: Vec<&str> = html
        .match_indices(" id=\"")
        .map(|(i, _)| {
            let rest = &html[i + 5..];
            &rest[..rest.find('"').unwrap()]
        })
        .collect();
    let before = ids.len();
    ids.sort_unstable();
    ids.dedup();
    assert_eq!(ids.len(), before, "duplicate ids");
}

#[test]
fn the_report_is_a_pure_function_of_its_input() {
    let a =
        render_report_html(&full_report(), Some(&tiny_map()), &ReportOptions::default()).unwrap();
    let b = render_report_html(
        &full_report().clone(),
        Some(&tiny_map().clone()),
        &ReportOptions::default(),
    )
    .unwrap();
    assert_eq!(a, b);
    let mut other = full_report();
    other.run.run_id.push('x');
    assert_ne!(
        a,
        render_report_html(&other, Some(&tiny_map()), &ReportOptions::default()).unwrap()
    );
}

#[test]
fn text_from_the_input_is_escaped() {
    let mut report = minimal_report();
    report.run.job = "<b>job & co</b>".to_string();
    let html = render_report_html(&report, None, &ReportOptions::default()).unwrap();
    assert!(html.contains("&lt;b&gt;job &amp; co&lt;/b&gt;"));
    assert!(!html.contains("<b>job"));
}

#[test]
fn a_split_fold_that_does_not_exist_is_an_error() {
    let options = ReportOptions {
        split_fold: Some(7),
        ..ReportOptions::default()
    };
    assert!(matches!(
        render_report_html(&minimal_report(), Some(&tiny_map()), &options),
        Err(RenderError::NoSuchFold { fold: 7, .. })
    ));
}

#[test]
fn variogram_models_follow_their_formulas() {
    use crate::render::report::input::{FittedVariogram, VariogramModel};
    // Cressie (1993) spherical: at h = a/2, 1.5 * 0.5 - 0.5 * 0.125 = 0.6875 of the partial sill.
    let spherical = FittedVariogram {
        model: VariogramModel::Spherical,
        nugget: 1.0,
        partial_sill: 2.0,
        range: 100.0,
    };
    assert!((spherical.gamma(50.0) - (1.0 + 2.0 * 0.6875)).abs() < 1e-12);
    assert_eq!(spherical.gamma(250.0), 3.0);
    assert_eq!(spherical.gamma(0.0), 0.0);
    // Practical range: 1 - e^-3 = 0.9502 of the partial sill at h = a.
    let exponential = FittedVariogram {
        model: VariogramModel::Exponential,
        ..spherical.clone()
    };
    assert!((exponential.gamma(100.0) - (1.0 + 2.0 * (1.0 - (-3.0f64).exp()))).abs() < 1e-12);
}

#[test]
fn hundreds_of_folds_are_summed_up_not_listed() {
    let mut report = minimal_report();
    let template = report.scores.folds[0].clone();
    report.scores.folds = (1..=sections::MAX_FOLDS_LISTED as u32 + 1)
        .map(|fold| FoldScores {
            fold,
            ..template.clone()
        })
        .collect();
    let html = render_report_html(&report, None, &ReportOptions::default()).unwrap();
    assert!(html.contains("The run has 201 folds of one test unit each"));
    assert!(!html.contains("<h3>Per fold</h3>"));
    assert!(!html.contains("per fold</title>"));
    // At the limit they are still listed.
    report.scores.folds.pop();
    let html = render_report_html(&report, None, &ReportOptions::default()).unwrap();
    assert!(html.contains("<h3>Per fold</h3>"));
}
