//! The report sections on spatial structure and history: semivariogram, correlogram, nearest-
//! distance distributions, score history with gates.

use super::*;

pub fn autocorrelation(page: &mut String, report: &ReportInput) {
    page.push_str("<section id=\"autocorrelation\"><h2>Spatial autocorrelation</h2>");
    if let Some(moran) = &report.held_out_moran {
        held_out_moran(page, moran);
    }
    if let Some(variogram) = &report.semivariogram {
        semivariogram(page, variogram, &report.run.target_unit);
    }
    if let Some(correlogram) = &report.correlogram {
        correlogram_figure(page, correlogram);
    }
    page.push_str("</section>");
}

pub(super) fn held_out_moran(page: &mut String, moran: &ResidualMoran) {
    let sample = moran.sampled_from.map_or(String::new(), |n| {
        format!(
            ", a seeded sample of {} of {} units",
            count(moran.units),
            count(n)
        )
    });
    let reading = if moran.p_value < 0.05 && moran.value > moran.expected {
        "The errors cluster in space: neighbouring units tend to be missed in the same direction, so \
         the model leaves out something spatial."
    } else if moran.p_value < 0.05 {
        "Neighbouring units tend to have errors of opposite sign."
    } else {
        "No clear spatial clustering of the errors at this scale."
    };
    let _ = write!(
        page,
        "<h3>Held-out residuals</h3><p class=\"sentence\">Moran's I of the held-out residuals is {} \
         (expected {} without spatial structure; z {}, two-sided p {} under randomisation), taking {} \
         over {} units{}. {}</p>",
        number(moran.value),
        number(moran.expected),
        significant(moran.z, 3),
        significant(moran.p_value, 2),
        escape(&moran.weights),
        count(moran.units),
        sample,
        reading
    );
}

pub(super) fn semivariogram(page: &mut String, variogram: &Semivariogram, target_unit: &str) {
    let max_pairs = variogram
        .bins
        .iter()
        .map(|b| b.pairs)
        .max()
        .unwrap_or(1)
        .max(1) as f64;
    let points = variogram
        .bins
        .iter()
        .map(|b| {
            (
                b.lag,
                b.gamma,
                2.0 + 5.0 * (b.pairs as f64 / max_pairs).sqrt(),
            )
        })
        .collect();
    let mut series = vec![Series::Points {
        label: "empirical".to_string(),
        points,
        colour: BLUE,
        marker: Marker::Circle,
    }];
    let max_lag = variogram.bins.iter().map(|b| b.lag).fold(0.0f64, f64::max);
    let mut text = String::new();
    if let Some(fitted) = &variogram.fitted {
        let end = max_lag.max(fitted.range) * 1.05;
        let curve = (0..=120).map(|i| {
            let h = end * f64::from(i) / 120.0;
            (h, fitted.gamma(h))
        });
        series.push(Series::Line {
            label: format!("{:?} model", fitted.model).to_lowercase(),
            points: curve.collect(),
            colour: BROWN,
            dashed: false,
            step: false,
        });
        text = format!(
            "Fitted {} model: nugget {}, partial sill {}, range {}.",
            format!("{:?}", fitted.model).to_lowercase(),
            number(fitted.nugget),
            number(fitted.partial_sill),
            with_unit(&number(fitted.range), &variogram.distance_unit)
        );
    }
    let gamma_unit = if target_unit.is_empty() {
        String::new()
    } else {
        format!("(({target_unit})\u{00b2})")
    };
    let chart = XyChart {
        title: format!("Semivariogram of {}", variogram.of),
        x_label: with_unit("lag", &bracketed(&variogram.distance_unit)),
        y_label: with_unit("semivariance", &gamma_unit),
        y_from_zero: true,
        x_from_zero: true,
        series,
    };
    let _ = write!(
        page,
        "<h3>Semivariogram of {}</h3><figure>{}<figcaption>Dots: empirical semivariance by lag, sized by the \
         number of pairs. {}</figcaption></figure>",
        escape(&variogram.of),
        chart.to_svg(),
        escape(&text)
    );
    if !variogram.advice.is_empty() {
        let _ = write!(
            page,
            "<p class=\"advice\">{}</p>",
            escape(&variogram.advice)
        );
    }
}

pub(super) fn correlogram_figure(page: &mut String, correlogram: &Correlogram) {
    let points: Vec<(f64, f64)> = correlogram
        .bins
        .iter()
        .map(|b| (b.lag, b.morans_i))
        .collect();
    let chart = XyChart {
        title: format!("Moran's I correlogram of {}", correlogram.of),
        x_label: with_unit("lag", &bracketed(&correlogram.distance_unit)),
        y_label: "Moran's I".to_string(),
        y_from_zero: true,
        x_from_zero: true,
        series: vec![
            Series::Level {
                label: "zero".to_string(),
                y: 0.0,
                colour: INK,
                dashed: true,
            },
            Series::Line {
                label: "Moran's I".to_string(),
                points: points.clone(),
                colour: BLUE,
                dashed: false,
                step: false,
            },
            Series::Points {
                label: "bins".to_string(),
                points: points.iter().map(|(x, y)| (*x, *y, 3.5)).collect(),
                colour: BLUE,
                marker: Marker::Circle,
            },
        ],
    };
    let _ = write!(
        page,
        "<h3>Correlogram of {}</h3><figure>{}<figcaption>Moran's I by distance class; above zero, units \
         that far apart are more alike than random pairs. {}</figcaption></figure>",
        escape(&correlogram.of),
        chart.to_svg(),
        escape(&correlogram.note)
    );
    page.push_str(
        "<table><thead><tr><th class=\"num\">Lag</th><th class=\"num\">Moran's I</th><th class=\"num\">Pairs</th>\
         <th class=\"num\">p-value</th></tr></thead><tbody>",
    );
    for bin in &correlogram.bins {
        let _ = write!(
            page,
            "<tr><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            with_unit(&number(bin.lag), &correlogram.distance_unit),
            number(bin.morans_i),
            count(bin.pairs),
            bin.p_value.map_or("n/a".to_string(), |p| significant(p, 2))
        );
    }
    page.push_str("</tbody></table>");
}

/// At most this many steps per empirical distribution function drawn.
pub(super) const ECDF_STEPS: usize = 400;

/// The empirical distribution function of `values`, thinned to at most
/// [`ECDF_STEPS`] steps taken at evenly spaced ranks.
pub(super) fn ecdf(values: &[f64]) -> Vec<(f64, f64)> {
    let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    if n == 0 {
        return Vec::new();
    }
    let steps = n.min(ECDF_STEPS);
    let mut out = vec![(sorted[0], 0.0)];
    for k in 1..=steps {
        let rank = (k * n).div_ceil(steps); // 1..=n
        out.push((sorted[rank - 1], rank as f64 / n as f64));
    }
    out
}

pub(super) fn median(values: &[f64]) -> Option<f64> {
    let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if sorted.is_empty() {
        return None;
    }
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    Some(if n % 2 == 1 {
        sorted[n / 2]
    } else {
        (sorted[n / 2 - 1] + sorted[n / 2]) / 2.0
    })
}

pub fn nearest_distances(page: &mut String, distances: &NearestDistances) {
    let unit = &distances.distance_unit;
    let chart = XyChart {
        title: "Nearest-distance distributions".to_string(),
        x_label: with_unit(
            "distance to the nearest training or observed unit",
            &bracketed(unit),
        ),
        y_label: "share of units at or below".to_string(),
        y_from_zero: true,
        x_from_zero: true,
        series: vec![
            Series::Line {
                label: "cross-validation".to_string(),
                points: ecdf(&distances.cross_validation),
                colour: BLUE,
                dashed: false,
                step: true,
            },
            Series::Line {
                label: "prediction".to_string(),
                points: ecdf(&distances.prediction),
                colour: BROWN,
                dashed: true,
                step: true,
            },
        ],
    };
    let show = |v: Option<f64>| v.map_or("n/a".to_string(), |m| with_unit(&number(m), unit));
    let sentence = format!(
        "Median distance from a test unit to its nearest training unit: {} ({} test units); from a place to be \
         predicted to its nearest observed unit: {} ({} places). Where cross-validation distances run much \
         shorter than prediction distances, the scores are likely optimistic for the prediction task.",
        show(median(&distances.cross_validation)),
        count(distances.cross_validation.len() as u64),
        show(median(&distances.prediction)),
        count(distances.prediction.len() as u64)
    );
    let _ = write!(
        page,
        "<section id=\"distances\"><h2>Nearest distances: cross-validation against prediction</h2>\
         <p class=\"sentence\">{}</p><figure>{}<figcaption>Empirical distribution functions of the \
         nearest distances.</figcaption></figure></section>",
        escape(&sentence),
        chart.to_svg()
    );
}

pub fn history(page: &mut String, histories: &[ScoreHistory]) {
    page.push_str("<section id=\"history\"><h2>Score history of the job</h2>");
    for history in histories {
        let indexed = || {
            history
                .points
                .iter()
                .enumerate()
                .map(|(i, p)| (i as f64 + 1.0, p))
        };
        let mut series = vec![
            Series::Line {
                label: history.score.clone(),
                points: indexed().map(|(x, p)| (x, p.value)).collect(),
                colour: BLUE,
                dashed: false,
                step: false,
            },
            Series::Points {
                label: "within gates".to_string(),
                points: indexed()
                    .filter(|(_, p)| !p.breached)
                    .map(|(x, p)| (x, p.value, 3.5))
                    .collect(),
                colour: BLUE,
                marker: Marker::Circle,
            },
            Series::Points {
                label: "breach".to_string(),
                points: indexed()
                    .filter(|(_, p)| p.breached)
                    .map(|(x, p)| (x, p.value, 5.0))
                    .collect(),
                colour: SPLIT_TEST,
                marker: Marker::Cross,
            },
        ];
        for gate in &history.gates {
            series.push(Series::Level {
                label: gate.label.clone(),
                y: gate.value,
                colour: BROWN,
                dashed: true,
            });
        }
        let chart = XyChart {
            title: format!("{} over runs", history.score),
            x_label: "run, oldest first".to_string(),
            y_label: with_unit(&history.score, &bracketed(&history.unit)),
            y_from_zero: false,
            x_from_zero: false,
            series,
        };
        let breaches: Vec<String> = indexed()
            .filter(|(_, p)| p.breached)
            .map(|(x, p)| {
                format!(
                    "run {} ({}, {}): {}",
                    x,
                    p.run_id,
                    p.label,
                    with_unit(&number(p.value), &history.unit)
                )
            })
            .collect();
        let _ = write!(
            page,
            "<h3>{}</h3><figure>{}<figcaption>Each run's {} (dots; crosses breach a gate); dashed lines are the \
             gates.</figcaption></figure><p>{}</p>",
            escape(&history.score),
            chart.to_svg(),
            escape(&history.score),
            if breaches.is_empty() {
                "No run breached a gate.".to_string()
            } else {
                escape(&format!("Breaches: {}.", breaches.join("; "))).into_owned()
            }
        );
    }
    page.push_str("</section>");
}
