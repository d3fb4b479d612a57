//! The report section on how far test units were from the units their model was trained on
//! (the run's `fold_distances`), against random folds and the places to be predicted.

use super::*;
use crate::render::report::input::TestDistances;

pub fn test_distances(page: &mut String, distances: &TestDistances) {
    let unit = &distances.distance_unit;
    let show = |v: f64| with_unit(&number(v), unit);
    let mut sentence = match distances.run_median {
        Some(median) => format!(
            "Over all folds, a test unit was a median {} from the nearest unit its model was trained on",
            show(median)
        ),
        None => "The run's test units were measured against their training units".to_string(),
    };
    if let Some((label, median)) = &distances.comparison {
        let _ = write!(sentence, "; with {label}, {}", show(*median));
    }
    sentence.push('.');
    if let Some(median) = distances.prediction_median {
        let _ = write!(
            sentence,
            " The places to be predicted are a median {} from the nearest observed unit.",
            show(median)
        );
    }
    sentence.push_str(
        " Folds whose test units sit much closer to training units than the places the model will \
         predict are testing an easier task, and their scores are likely optimistic for it.",
    );
    let _ = write!(
        page,
        "<section id=\"test-distances\"><h2>How far test units were from training</h2>\
         <p class=\"sentence\">{}</p><table class=\"distances\"><thead><tr><th>Distances</th>\
         <th class=\"num\">Units</th><th class=\"num\">Smallest</th><th class=\"num\">10th pct.</th>\
         <th class=\"num\">Median</th><th class=\"num\">90th pct.</th><th class=\"num\">Largest</th>\
         </tr></thead><tbody>",
        escape(&sentence)
    );
    let mut sampled = false;
    for row in &distances.rows {
        let units = match row.sampled_from {
            Some(from) => {
                sampled = true;
                format!("{} of {}*", count(row.n), count(from))
            }
            None => count(row.n),
        };
        let _ = write!(
            page,
            "<tr><td>{}</td><td class=\"num\">{}</td>",
            escape(&row.label),
            units
        );
        for value in row.quantiles {
            let _ = write!(page, "<td class=\"num\">{}</td>", escape(&show(value)));
        }
        page.push_str("</tr>");
    }
    page.push_str("</tbody></table>");
    let _ = write!(
        page,
        "<p class=\"meta\">Distances between the units' representative points, in the run's \
         coordinate system; percentiles interpolated linearly.{}</p></section>",
        if sampled {
            " * A seeded sample of the units."
        } else {
            ""
        }
    );
}
