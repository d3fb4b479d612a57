//! IRLS against statsmodels and Dobson's worked example; separation,
//! degenerate outcomes and the iteration cap.

use geo_types::{Geometry, Point};

use super::*;
use crate::core::metrics::Family;
use crate::core::testing::table_dataset;
use crate::core::units::{Extras, RawGeometry, UnitCollector, UnitId};
use approx::assert_relative_eq;

fn all(data: &Dataset) -> Vec<u32> {
    (0..data.len() as u32).collect()
}

fn used(data: &Dataset) -> Vec<usize> {
    crate::core::models::design::columns_of_rows(data, &all(data)).unwrap()
}

fn fit_all(link: Link, data: &Dataset) -> Result<GlmFit, FitError> {
    fit(link, data, &all(data), &used(data), DEFAULT_MAX_ITERATIONS)
}

fn values(fit: &GlmFit) -> Vec<f64> {
    fit.coefficients().into_iter().map(|(_, v)| v).collect()
}

/// 40 units: x1 = sin(i), x2 = (7i mod 11)/3, y = 1 when
/// 0.8 x1 − 0.5 x2 + 1.5 cos(3i) > −0.6 (16 ones; not separated).
fn constructed() -> (Vec<Vec<f64>>, Vec<f64>) {
    let rows: Vec<Vec<f64>> = (0..40)
        .map(|i| {
            let t = i as f64;
            vec![t.sin(), ((i * 7) % 11) as f64 / 3.0]
        })
        .collect();
    let y = rows
        .iter()
        .enumerate()
        .map(|(i, r)| {
            let v = 0.8 * r[0] - 0.5 * r[1] + 1.5 * (3.0 * i as f64).cos();
            f64::from(u8::from(v > -0.6))
        })
        .collect();
    (rows, y)
}

#[test]
fn logistic_matches_statsmodels() {
    // statsmodels 0.15.0 `Logit(y, add_constant(X)).fit(method='newton',
    // tol=1e-14)` on the same 40 units, run when this test was written:
    // 0.6968092227729229, 1.134318535479908, -0.7372103752240224.
    let (rows, y) = constructed();
    assert_eq!(y.iter().sum::<f64>(), 16.0);
    let data = table_dataset(&["x1", "x2"], &rows, &y, &[[0.0, 0.0]; 40]);
    let fit = fit_all(Link::Logit, &data).unwrap();
    let expected = [0.6968092227729229, 1.134318535479908, -0.7372103752240224];
    for (g, e) in values(&fit).iter().zip(expected) {
        assert_relative_eq!(*g, e, max_relative = 1e-10);
    }
}

#[test]
fn an_extreme_but_consistent_unit_is_not_separation() {
    // The same units plus one at x1 = 30 with outcome 1 (fitted probability
    // 1 − 2e-15): the estimates exist. statsmodels 0.15.0, as above:
    // 0.6968092227729256, 1.134318535479924, -0.7372103752240252.
    let (mut rows, mut y) = constructed();
    rows.push(vec![30.0, 1.0]);
    y.push(1.0);
    let data = table_dataset(&["x1", "x2"], &rows, &y, &[[0.0, 0.0]; 41]);
    let fit = fit_all(Link::Logit, &data).unwrap();
    let expected = [0.6968092227729256, 1.134318535479924, -0.7372103752240252];
    for (g, e) in values(&fit).iter().zip(expected) {
        assert_relative_eq!(*g, e, max_relative = 1e-9);
    }
}

#[test]
fn poisson_with_an_exposure_offset_matches_statsmodels() {
    // statsmodels 0.15.0 `GLM(c, add_constant(X), family=Poisson(),
    // offset=log(e)).fit(tol=1e-14)`, c = floor(|3 sin(1.3 i)| + i mod 5),
    // e = 1 + i mod 7: -0.2667492070637573, 0.16977675742230086,
    // 0.054732122354132766.
    let (rows, _) = constructed();
    let counts: Vec<f64> = (0..40)
        .map(|i| ((3.0 * (1.3 * i as f64).sin()).abs() + (i % 5) as f64).floor())
        .collect();
    let mut data = table_dataset(&["x1", "x2"], &rows, &counts, &[[0.0, 0.0]; 40]);
    data.exposure = Some((0..40).map(|i| 1.0 + (i % 7) as f64).collect());
    let fit = fit_all(Link::Log, &data).unwrap();
    let expected = [
        -0.2667492070637573,
        0.16977675742230086,
        0.054732122354132766,
    ];
    for (g, e) in values(&fit).iter().zip(expected) {
        assert_relative_eq!(*g, e, max_relative = 1e-10);
    }
}

/// Dobson (1990), p. 93 (REFERENCES.md §3.2): counts of a 3 × 3 trial with
/// outcome and treatment as text features (levels "1", "2", "3").
fn dobson() -> Dataset {
    let counts = [18.0, 17.0, 15.0, 20.0, 10.0, 20.0, 25.0, 13.0, 12.0];
    let names = vec!["outcome".to_string(), "treatment".to_string()];
    let mut collector =
        UnitCollector::new("dobson", "counts", &names, false).with_text_features(&[true, true]);
    for (i, &count) in counts.iter().enumerate() {
        let geometry = RawGeometry::Decoded(Geometry::Point(Point::new(i as f64, 0.0)));
        let extras = Extras {
            texts: vec![
                Some(((i % 3) + 1).to_string()),
                Some(((i / 3) + 1).to_string()),
            ],
            ..Extras::default()
        };
        collector
            .push_with(
                UnitId::Int(i as i64 + 1),
                geometry,
                Some(count),
                &[None, None],
                extras,
            )
            .unwrap();
    }
    collector.finish("id").unwrap()
}

#[test]
fn dobson_poisson_example_matches_the_closed_form() {
    // REFERENCES.md §3.2: a log-linear independence model, fitted values
    // r_i c_j / N, so β0 = log 21, β_outcome2 = log(40/63), β_outcome3 =
    // log(47/63), both treatment effects exactly 0 (derived, exact).
    let data = dobson();
    assert_eq!(
        data.feature_names,
        vec![
            "outcome=1",
            "outcome=2",
            "outcome=3",
            "treatment=1",
            "treatment=2",
            "treatment=3"
        ]
    );
    let fit = fit_all(Link::Log, &data).unwrap();
    let terms: Vec<String> = fit.coefficients().into_iter().map(|(n, _)| n).collect();
    assert_eq!(
        terms,
        vec![
            "(intercept)",
            "outcome=2",
            "outcome=3",
            "treatment=2",
            "treatment=3"
        ]
    );
    let got = values(&fit);
    let exact = [
        21f64.ln(),
        (40.0f64 / 63.0).ln(),
        (47.0f64 / 63.0).ln(),
        0.0,
        0.0,
    ];
    for (g, e) in got.iter().zip(exact) {
        assert!((g - e).abs() < 1e-12, "{g} vs {e}");
    }
    // scikit-learn 1.9.1 mean_poisson_deviance(counts, μ) = 0.569904564111
    // (REFERENCES.md §3.2, = residual deviance 5.1291410770011435 / 9).
    let pairs: Vec<(f64, f64)> = (0..9)
        .map(|i| (data.target[i], fit.predict(&data.view(i))))
        .collect();
    assert_relative_eq!(
        Family::Count.score(&pairs).get("poisson_deviance").unwrap(),
        5.129_141_077_001_143 / 9.0,
        max_relative = 1e-13
    );
}

/// Fits a logistic model of `y` on `dose = x` and another feature that is
/// equal for units with equal doses (so it cannot split their tie).
fn separated(y: &[f64], x: &[f64]) -> FitError {
    let rows: Vec<Vec<f64>> = x
        .iter()
        .map(|&v| vec![v, ((v as usize * 5) % 7) as f64])
        .collect();
    let data = table_dataset(&["dose", "other"], &rows, y, &vec![[0.0, 0.0]; y.len()]);
    fit_all(Link::Logit, &data).map(|_| ()).unwrap_err()
}

#[test]
fn complete_separation_is_reported_by_feature() {
    let x: Vec<f64> = (1..=12).map(f64::from).collect();
    let y: Vec<f64> = x.iter().map(|&v| f64::from(u8::from(v > 6.0))).collect();
    match separated(&y, &x) {
        FitError::Separation {
            complete,
            terms,
            units,
            ..
        } => {
            assert!(complete);
            assert_eq!(terms[0], "feature dose");
            assert_eq!(units, 12);
        }
        other => panic!("{other}"),
    }
}

#[test]
fn quasi_complete_separation_is_reported_by_feature() {
    // Two units tie at dose 6 with different outcomes; all others are separated.
    let x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 6.0, 7.0, 8.0, 9.0, 10.0, 11.0];
    let y = [0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0];
    let error = separated(&y, &x);
    match &error {
        FitError::Separation {
            complete, terms, ..
        } => {
            assert!(!complete);
            assert_eq!(terms[0], "feature dose");
        }
        other => panic!("{other}"),
    }
    assert!(error.to_string().contains("quasi-complete separation"));
}

#[test]
fn a_region_of_zero_counts_is_reported_as_separation() {
    // Level c of a text feature has only zero counts: its coefficient → −∞.
    let mut data = dobson();
    for i in [2, 5, 8] {
        data.target[i] = 0.0;
    }
    match fit_all(Link::Log, &data).map(|_| ()).unwrap_err() {
        FitError::Separation { terms, what, .. } => {
            assert_eq!(what, "zero counts");
            assert_eq!(terms[0], "feature outcome=3");
        }
        other => panic!("{other}"),
    }
}

#[test]
fn degenerate_folds_and_the_iteration_cap_are_errors() {
    let (rows, y) = constructed();
    let zeros = vec![0.0; 40];
    let data = table_dataset(&["x1", "x2"], &rows, &zeros, &[[0.0, 0.0]; 40]);
    assert!(fit_all(Link::Logit, &data)
        .map(|_| ())
        .unwrap_err()
        .to_string()
        .contains("every training unit has outcome 0"));
    let data = table_dataset(&["x1", "x2"], &rows, &y, &[[0.0, 0.0]; 40]);
    match fit(Link::Logit, &data, &all(&data), &used(&data), 1).map(|_| ()) {
        Err(FitError::NoConvergence { iterations: 1, .. }) => {}
        other => panic!("{other:?}"),
    }
    let twice: Vec<Vec<f64>> = rows.iter().map(|r| vec![r[0], 2.0 * r[0]]).collect();
    let data = table_dataset(&["a", "b"], &twice, &y, &[[0.0, 0.0]; 40]);
    match fit_all(Link::Logit, &data).map(|_| ()).unwrap_err() {
        FitError::Collinear { term, .. } => assert_eq!(term, "feature b"),
        other => panic!("{other}"),
    }
}
