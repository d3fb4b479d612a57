//! Small SVG charts for the report: x–y charts (points, lines, steps,
//! reference lines) and horizontal bar charts.
//!
//! Axes run from "nice" rounded limits with ticks every 1, 2 or 5 × 10^k, so
//! tick labels are short round numbers. Series are told apart by colour *and*
//! by marker or dash, so a chart survives a colour-vision deficiency and a
//! black-and-white printout.

use std::fmt::Write as _;

use super::colour::Rgb8;
use super::palette::INK;
use super::text::{escape, fixed, significant};

/// How points are marked.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Marker {
    /// A filled circle.
    Circle,
    /// A diagonal cross (used for breaches).
    Cross,
}

/// One thing drawn in an x–y chart.
#[derive(Debug, Clone, PartialEq)]
pub enum Series {
    /// Points, each with its own radius (in pixels).
    Points {
        /// Legend text.
        label: String,
        /// (x, y, radius).
        points: Vec<(f64, f64, f64)>,
        /// Colour.
        colour: Rgb8,
        /// Marker.
        marker: Marker,
    },
    /// A polyline (or a staircase when `step`).
    Line {
        /// Legend text.
        label: String,
        /// (x, y), in x order.
        points: Vec<(f64, f64)>,
        /// Colour.
        colour: Rgb8,
        /// Dashed.
        dashed: bool,
        /// Drawn as steps (an empirical distribution function).
        step: bool,
    },
    /// A horizontal line across the chart at `y`.
    Level {
        /// Label written at its right end.
        label: String,
        /// Its height.
        y: f64,
        /// Colour.
        colour: Rgb8,
        /// Dashed.
        dashed: bool,
    },
}

/// An x–y chart.
#[derive(Debug, Clone, PartialEq)]
pub struct XyChart {
    /// Accessible title (also the SVG `<title>`).
    pub title: String,
    /// x-axis label with its unit.
    pub x_label: String,
    /// y-axis label with its unit.
    pub y_label: String,
    /// Include zero on the y axis.
    pub y_from_zero: bool,
    /// Include zero on the x axis.
    pub x_from_zero: bool,
    /// What is drawn, in drawing order.
    pub series: Vec<Series>,
}

const WIDTH: f64 = 720.0;
const HEIGHT: f64 = 300.0;
const LEFT: f64 = 64.0;
const RIGHT: f64 = 210.0;
const TOP: f64 = 16.0;
const BOTTOM: f64 = 44.0;

/// A tick label with the decimals its tick step needs: 0, 0.5, 1 (not 1.00).
fn tick_label(value: f64, ticks: &[f64]) -> String {
    let step = if ticks.len() > 1 {
        (ticks[1] - ticks[0]).abs()
    } else {
        1.0
    };
    let decimals = (-step.log10().floor()).clamp(0.0, 12.0) as usize;
    // The step is 1, 2 or 5 × 10^k, so -floor(log10 step) decimals show it exactly.
    fixed(value, decimals)
}

/// Ticks from a rounded-out range: step 1, 2 or 5 × 10^k, about five of them.
pub fn nice_ticks(min: f64, max: f64) -> Vec<f64> {
    let (min, max) = if max > min {
        (min, max)
    } else {
        (min - 1.0, max + 1.0)
    };
    let raw = (max - min) / 5.0;
    let power = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .map(|m| m * power)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * power);
    let first = (min / step).floor() as i64;
    let last = (max / step).ceil() as i64;
    (first..=last).map(|i| i as f64 * step).collect()
}

impl XyChart {
    /// The chart as an SVG element (no XML prolog), for inline use in HTML.
    pub fn to_svg(&self) -> String {
        let mut xs = Vec::new();
        let mut ys = Vec::new();
        for series in &self.series {
            match series {
                Series::Points { points, .. } => {
                    xs.extend(points.iter().map(|p| p.0));
                    ys.extend(points.iter().map(|p| p.1));
                }
                Series::Line { points, .. } => {
                    xs.extend(points.iter().map(|p| p.0));
                    ys.extend(points.iter().map(|p| p.1));
                }
                Series::Level { y, .. } => ys.push(*y),
            }
        }
        xs.retain(|v| v.is_finite());
        ys.retain(|v| v.is_finite());
        if self.x_from_zero {
            xs.push(0.0);
        }
        if self.y_from_zero {
            ys.push(0.0);
        }
        let range = |v: &[f64]| {
            let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            if lo.is_finite() {
                (lo, hi)
            } else {
                (0.0, 1.0)
            }
        };
        let (x_ticks, y_ticks) = {
            let (a, b) = range(&xs);
            let (c, d) = range(&ys);
            (nice_ticks(a, b), nice_ticks(c, d))
        };
        let (x0, x1) = (x_ticks[0], x_ticks[x_ticks.len() - 1]);
        let (y0, y1) = (y_ticks[0], y_ticks[y_ticks.len() - 1]);
        let plot_w = WIDTH - LEFT - RIGHT;
        let plot_h = HEIGHT - TOP - BOTTOM;
        let px = |x: f64| LEFT + (x - x0) / (x1 - x0) * plot_w;
        let py = |y: f64| TOP + plot_h - (y - y0) / (y1 - y0) * plot_h;
        let mut out = open_svg(HEIGHT, 11, &self.title);
        // Grid and ticks.
        for t in &y_ticks {
            let y = py(*t);
            let _ = write!(
                out,
                "<line x1=\"{LEFT}\" x2=\"{}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#e2e2e2\"/>\
                 <text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\" fill=\"{INK}\">{}</text>",
                LEFT + plot_w,
                LEFT - 6.0,
                y + 4.0,
                tick_label(*t, &y_ticks)
            );
        }
        for t in &x_ticks {
            let x = px(*t);
            let _ = write!(
                out,
                "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{TOP}\" y2=\"{}\" stroke=\"#eeeeee\"/>\
                 <text x=\"{x:.1}\" y=\"{}\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>",
                TOP + plot_h,
                TOP + plot_h + 15.0,
                tick_label(*t, &x_ticks)
            );
        }
        let _ = write!(
            out,
            "<rect x=\"{LEFT}\" y=\"{TOP}\" width=\"{plot_w}\" height=\"{plot_h}\" fill=\"none\" stroke=\"#888888\"/>\
             <text x=\"{}\" y=\"{}\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>\
             <text transform=\"translate(14 {}) rotate(-90)\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>",
            LEFT + plot_w / 2.0,
            HEIGHT - 8.0,
            escape(&self.x_label),
            TOP + plot_h / 2.0,
            escape(&self.y_label)
        );
        let mut legend_y = TOP + 10.0;
        let legend_x = LEFT + plot_w + 12.0;
        for series in &self.series {
            match series {
                Series::Level {
                    label,
                    y,
                    colour,
                    dashed,
                } => {
                    if y.is_finite() {
                        let yy = py(*y);
                        let _ = write!(
                            out,
                            "<line class=\"level\" x1=\"{LEFT}\" x2=\"{}\" y1=\"{yy:.1}\" y2=\"{yy:.1}\" stroke=\"{colour}\" \
                             stroke-width=\"1.5\"{}/>",
                            LEFT + plot_w,
                            dash(*dashed)
                        );
                    }
                    legend_line(&mut out, legend_x, legend_y, *colour, *dashed, label);
                }
                Series::Line {
                    label,
                    points,
                    colour,
                    dashed,
                    step,
                } => {
                    let mut d = String::new();
                    let mut previous: Option<(f64, f64)> = None;
                    for (x, y) in points.iter().filter(|p| p.0.is_finite() && p.1.is_finite()) {
                        let (sx, sy) = (px(*x), py(*y));
                        match previous {
                            None => {
                                let _ = write!(d, "M{sx:.1} {sy:.1}");
                            }
                            Some((_, last_y)) if *step => {
                                let _ = write!(d, "L{sx:.1} {last_y:.1}L{sx:.1} {sy:.1}");
                            }
                            Some(_) => {
                                let _ = write!(d, "L{sx:.1} {sy:.1}");
                            }
                        }
                        previous = Some((sx, sy));
                    }
                    if !d.is_empty() {
                        let _ = write!(
                            out,
                            "<path class=\"series\" d=\"{d}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\"{}/>",
                            dash(*dashed)
                        );
                    }
                    legend_line(&mut out, legend_x, legend_y, *colour, *dashed, label);
                }
                Series::Points {
                    label,
                    points,
                    colour,
                    marker,
                } => {
                    for (x, y, r) in points.iter().filter(|p| p.0.is_finite() && p.1.is_finite()) {
                        let class = if *marker == Marker::Cross {
                            "breach"
                        } else {
                            "point"
                        };
                        write_marker(&mut out, class, (px(*x), py(*y)), *r, *colour, *marker);
                    }
                    write_marker(
                        &mut out,
                        "legend-marker",
                        (legend_x + 10.0, legend_y - 4.0),
                        4.0,
                        *colour,
                        *marker,
                    );
                    let _ = write!(
                        out,
                        "<text x=\"{}\" y=\"{legend_y}\" fill=\"{INK}\">{}</text>",
                        legend_x + 24.0,
                        escape(label)
                    );
                }
            }
            legend_y += 18.0;
        }
        out.push_str("</svg>");
        out
    }
}

/// The opening `<svg>` of a chart, with its accessible title.
fn open_svg(height: f64, font_size: u32, title: &str) -> String {
    format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"chart\" width=\"{WIDTH}\" height=\"{height}\" \
         viewBox=\"0 0 {WIDTH} {height}\" role=\"img\" font-family=\"DejaVu Sans, Verdana, Arial, sans-serif\" \
         font-size=\"{font_size}\"><title>{}</title>",
        escape(title)
    )
}

fn dash(dashed: bool) -> &'static str {
    if dashed {
        " stroke-dasharray=\"6 4\""
    } else {
        ""
    }
}

fn legend_line(out: &mut String, x: f64, y: f64, colour: Rgb8, dashed: bool, label: &str) {
    let _ = write!(
        out,
        "<line x1=\"{x}\" x2=\"{}\" y1=\"{}\" y2=\"{}\" stroke=\"{colour}\" stroke-width=\"2\"{}/>\
         <text x=\"{}\" y=\"{y}\" fill=\"{INK}\">{}</text>",
        x + 20.0,
        y - 4.0,
        y - 4.0,
        dash(dashed),
        x + 24.0,
        escape(label)
    );
}

fn write_marker(
    out: &mut String,
    class: &str,
    (x, y): (f64, f64),
    r: f64,
    colour: Rgb8,
    marker: Marker,
) {
    match marker {
        Marker::Circle => {
            let _ = write!(
                out,
                "<circle class=\"{class}\" cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"{r:.1}\" fill=\"{colour}\" fill-opacity=\"0.85\"/>"
            );
        }
        Marker::Cross => {
            let r = r.max(4.0);
            let _ = write!(
                out,
                "<path class=\"{class}\" d=\"M{:.1} {:.1}L{:.1} {:.1}M{:.1} {:.1}L{:.1} {:.1}\" stroke=\"{colour}\" stroke-width=\"2.5\"/>",
                x - r,
                y - r,
                x + r,
                y + r,
                x - r,
                y + r,
                x + r,
                y - r
            );
        }
    }
}

/// A horizontal bar chart: one bar per (label, value, colour), values from zero.
pub fn bar_chart(title: &str, unit_label: &str, bars: &[(String, f64, Rgb8)]) -> String {
    let height = 30.0 + 34.0 * bars.len() as f64 + 30.0;
    let label_w = 190.0;
    let plot_w = WIDTH - label_w - 80.0;
    let max = bars
        .iter()
        .map(|b| b.1)
        .filter(|v| v.is_finite())
        .fold(0.0f64, f64::max);
    let ticks = nice_ticks(0.0, if max > 0.0 { max } else { 1.0 });
    let top = ticks[ticks.len() - 1].max(f64::MIN_POSITIVE);
    let mut out = open_svg(height, 12, title);
    for (i, (label, value, colour)) in bars.iter().enumerate() {
        let y = 20.0 + 34.0 * i as f64;
        let w = if value.is_finite() {
            (value.max(0.0) / top) * plot_w
        } else {
            0.0
        };
        let _ = write!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"end\" fill=\"{INK}\">{}</text>\
             <rect class=\"bar\" x=\"{label_w}\" y=\"{y}\" width=\"{w:.1}\" height=\"22\" fill=\"{colour}\"/>\
             <text x=\"{:.1}\" y=\"{}\" fill=\"{INK}\">{}</text>",
            label_w - 8.0,
            y + 15.0,
            escape(label),
            label_w + w + 6.0,
            y + 15.0,
            significant(*value, 3)
        );
    }
    let axis_y = 20.0 + 34.0 * bars.len() as f64 + 4.0;
    let _ = write!(
        out,
        "<line x1=\"{label_w}\" x2=\"{}\" y1=\"{axis_y}\" y2=\"{axis_y}\" stroke=\"#888888\"/>",
        label_w + plot_w
    );
    for t in &ticks {
        let x = label_w + t / top * plot_w;
        let _ = write!(
            out,
            "<text x=\"{x:.1}\" y=\"{}\" text-anchor=\"middle\" font-size=\"11\" fill=\"{INK}\">{}</text>",
            axis_y + 15.0,
            tick_label(*t, &ticks)
        );
    }
    let _ = write!(
        out,
        "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\" font-size=\"11\" fill=\"{INK}\">{}</text></svg>",
        label_w + plot_w / 2.0,
        axis_y + 30.0,
        escape(unit_label)
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_range() {
        let close = |got: Vec<f64>, want: &[f64]| {
            assert_eq!(got.len(), want.len(), "{got:?}");
            for (g, w) in got.iter().zip(want) {
                assert!((g - w).abs() < 1e-12, "{got:?}");
            }
        };
        close(nice_ticks(0.0, 9.3), &[0.0, 2.0, 4.0, 6.0, 8.0, 10.0]);
        close(nice_ticks(0.13, 0.61), &[0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7]);
        close(nice_ticks(5.0, 5.0), &[4.0, 4.5, 5.0, 5.5, 6.0]);
        let ticks = nice_ticks(0.0, 2.4);
        let labels: Vec<String> = ticks.iter().map(|t| tick_label(*t, &ticks)).collect();
        assert_eq!(labels, ["0.0", "0.5", "1.0", "1.5", "2.0", "2.5"]);
        let ticks = nice_ticks(0.0, 9.3);
        assert_eq!(tick_label(ticks[1], &ticks), "2");
    }

    #[test]
    fn charts_are_xml_and_skip_non_finite_points() {
        let chart = XyChart {
            title: "t <1>".to_string(),
            x_label: "lag (m)".to_string(),
            y_label: "γ".to_string(),
            y_from_zero: true,
            x_from_zero: true,
            series: vec![
                Series::Points {
                    label: "bins".to_string(),
                    points: vec![(1.0, 2.0, 3.0), (f64::NAN, 1.0, 3.0)],
                    colour: INK,
                    marker: Marker::Circle,
                },
                Series::Line {
                    label: "ecdf".to_string(),
                    points: vec![(0.0, 0.0), (1.0, 0.5), (2.0, 1.0)],
                    colour: INK,
                    dashed: true,
                    step: true,
                },
                Series::Level {
                    label: "gate".to_string(),
                    y: 1.5,
                    colour: INK,
                    dashed: true,
                },
            ],
        };
        let svg = chart.to_svg();
        let doc = roxmltree::Document::parse(&svg).unwrap();
        assert_eq!(
            doc.descendants()
                .filter(|n| n.attribute("class") == Some("point"))
                .count(),
            1
        );
        assert_eq!(
            doc.descendants()
                .filter(|n| n.attribute("class") == Some("level"))
                .count(),
            1
        );
        let bars = bar_chart(
            "b",
            "RMSE (mg/L)",
            &[
                ("random".to_string(), 1.0, INK),
                ("spatial".to_string(), 2.0, INK),
            ],
        );
        let doc = roxmltree::Document::parse(&bars).unwrap();
        let widths: Vec<f64> = doc
            .descendants()
            .filter(|n| n.attribute("class") == Some("bar"))
            .map(|n| n.attribute("width").unwrap().parse().unwrap())
            .collect();
        assert_eq!(widths.len(), 2);
        assert!((widths[1] / widths[0] - 2.0).abs() < 0.01, "{widths:?}");
    }
}
