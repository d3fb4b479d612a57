//! Classing a layer's values for a map legend.
//!
//! **Rule.** Absolute errors are split into *quantile classes* (equal numbers of
//! units per class, quantiles by linear interpolation between order statistics,
//! Hyndman & Fan 1996 definition 7), then every break is rounded to a "nice"
//! value: a multiple of one tenth of the power of ten below the largest
//! magnitude (two significant figures of the largest value). Errors are skewed —
//! many small, a few large — so equal-count classes use the whole colour ramp
//! where equal intervals would put almost every unit in the first class; the
//! rounding makes the legend readable and costs only a little evenness.
//! Residuals are classed *symmetrically about zero*: breaks at ±b where the b are
//! quantiles of |residual| at 1/(s+1), …, s/(s+1) for s classes per side, rounded
//! the same way, so the neutral centre class holds the residuals nearest zero and
//! equal colours on both sides mean equal distances from zero.
//!
//! Breaks that rounding makes equal, or that would leave a class empty at the
//! ends, are dropped, so a layer can have fewer classes than asked (one class
//! when all values are equal). Each class includes its lower bound.

use super::text::{count, fixed, with_unit};

/// Classes of one layer: inner breaks in ascending order, and what the legend needs.
#[derive(Debug, Clone, PartialEq)]
pub struct Classes {
    /// Inner breaks, ascending; `breaks.len() + 1` classes.
    pub breaks: Vec<f64>,
    /// Smallest value classed.
    pub min: f64,
    /// Largest value classed.
    pub max: f64,
    /// Decimals the rounded breaks need.
    pub decimals: usize,
    /// Units in each class.
    pub counts: Vec<u64>,
}

impl Classes {
    /// Index of the class holding `value` (each class includes its lower bound).
    pub fn class_of(&self, value: f64) -> usize {
        self.breaks.partition_point(|b| *b <= value)
    }

    /// How many classes.
    pub fn len(&self) -> usize {
        self.breaks.len() + 1
    }

    /// Whether there are no breaks (always at least one class).
    pub fn is_empty(&self) -> bool {
        false
    }

    /// One legend label per class, `low – high unit`, ends at the data's min and max.
    pub fn labels(&self, unit: &str) -> Vec<String> {
        let mut bounds = Vec::with_capacity(self.breaks.len() + 2);
        bounds.push(round_down(self.min, self.decimals));
        bounds.extend(self.breaks.iter().copied());
        bounds.push(round_up(self.max, self.decimals));
        bounds
            .windows(2)
            .map(|pair| {
                with_unit(
                    &format!(
                        "{} \u{2013} {}",
                        fixed(pair[0], self.decimals),
                        fixed(pair[1], self.decimals)
                    ),
                    unit,
                )
            })
            .collect()
    }

    /// Class counts as text, for legends: `1,234 units`.
    pub fn count_labels(&self) -> Vec<String> {
        self.counts
            .iter()
            .map(|n| format!("{} unit{}", count(*n), if *n == 1 { "" } else { "s" }))
            .collect()
    }
}

/// Quantile classes (see the module doc) of the finite `values`, at most
/// `classes` of them. `None` when there is no finite value.
pub fn quantile_classes(values: &[f64], classes: usize) -> Option<Classes> {
    let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if sorted.is_empty() {
        return None;
    }
    sorted.sort_by(f64::total_cmp);
    let (min, max) = (sorted[0], sorted[sorted.len() - 1]);
    let (step, decimals) = nice_step(min.abs().max(max.abs()));
    let classes = classes.max(1);
    let mut breaks = Vec::new();
    for i in 1..classes {
        let b = round_to(quantile(&sorted, i as f64 / classes as f64), step);
        if b > min && b <= max && breaks.last().is_none_or(|last| b > *last) {
            breaks.push(b);
        }
    }
    Some(finish(&sorted, breaks, decimals))
}

/// Classes symmetric about zero (see the module doc), `side` per side at most.
/// `None` when there is no finite value.
pub fn symmetric_classes(values: &[f64], side: usize) -> Option<Classes> {
    let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if sorted.is_empty() {
        return None;
    }
    sorted.sort_by(f64::total_cmp);
    let mut magnitudes: Vec<f64> = sorted.iter().map(|v| v.abs()).collect();
    magnitudes.sort_by(f64::total_cmp);
    let largest = magnitudes[magnitudes.len() - 1];
    let (step, decimals) = nice_step(largest);
    let side = side.max(1);
    let mut positive: Vec<f64> = Vec::new();
    if largest > 0.0 {
        for i in 1..=side {
            let b = round_to(quantile(&magnitudes, i as f64 / (side + 1) as f64), step).max(step);
            if b <= largest && positive.last().is_none_or(|last| b > *last) {
                positive.push(b);
            }
        }
    }
    let mut breaks: Vec<f64> = positive.iter().rev().map(|b| -b).collect();
    breaks.extend(positive.iter().copied());
    Some(finish(&sorted, breaks, decimals))
}

fn finish(sorted: &[f64], breaks: Vec<f64>, decimals: usize) -> Classes {
    let mut classes = Classes {
        counts: vec![0; breaks.len() + 1],
        breaks,
        min: sorted[0],
        max: sorted[sorted.len() - 1],
        decimals,
    };
    for value in sorted {
        let class = classes.class_of(*value);
        classes.counts[class] += 1;
    }
    classes
}

/// Quantile `p` of sorted values, Hyndman & Fan (1996) definition 7.
fn quantile(sorted: &[f64], p: f64) -> f64 {
    let position = p * (sorted.len() - 1) as f64;
    // position is within 0..len-1, so both indices are in bounds.
    let low = position.floor() as usize;
    let high = position.ceil() as usize;
    sorted[low] + (sorted[high] - sorted[low]) * (position - low as f64)
}

/// Rounding step (one tenth of the power of ten at or below `largest`) and the
/// decimals it needs.
fn nice_step(largest: f64) -> (f64, usize) {
    if largest <= 0.0 || !largest.is_finite() {
        return (1.0, 0);
    }
    let exponent = largest.log10().floor() as i32 - 1;
    let decimals = if exponent < 0 {
        (-exponent) as usize
    } else {
        0
    };
    (10f64.powi(exponent), decimals)
}

fn round_to(value: f64, step: f64) -> f64 {
    (value / step).round() * step
}

fn round_down(value: f64, decimals: usize) -> f64 {
    let scale = 10f64.powi(decimals as i32);
    (value * scale).floor() / scale
}

fn round_up(value: f64, decimals: usize) -> f64 {
    let scale = 10f64.powi(decimals as i32);
    (value * scale).ceil() / scale
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_matches_hyndman_fan_type_7() {
        // Hyndman & Fan (1996) definition 7 is R's and numpy's default: for 1..=10,
        // the 0.25 quantile is 3.25 and the 0.9 quantile 9.1.
        let sorted: Vec<f64> = (1..=10).map(f64::from).collect();
        assert!((quantile(&sorted, 0.25) - 3.25).abs() < 1e-12);
        assert!((quantile(&sorted, 0.9) - 9.1).abs() < 1e-12);
    }

    #[test]
    fn quantile_classes_hold_equal_counts_with_rounded_breaks() {
        // 1,000 values 0.0005, 0.0015, ... 0.9995: quintile breaks 0.2, 0.4, 0.6, 0.8,
        // rounded to steps of 0.01 (two significant figures of the largest, 0.9995).
        let values: Vec<f64> = (0..1000).map(|i| (f64::from(i) + 0.5) / 1000.0).collect();
        let classes = quantile_classes(&values, 5).unwrap();
        assert_eq!(classes.breaks.len(), 4);
        for (got, want) in classes.breaks.iter().zip([0.2, 0.4, 0.6, 0.8]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
        assert_eq!(classes.counts, vec![200; 5]);
        assert_eq!(classes.decimals, 2);
        assert_eq!(classes.labels("mg/L")[0], "0.00 \u{2013} 0.20 mg/L");
        assert_eq!(classes.labels("mg/L")[4], "0.80 \u{2013} 1.00 mg/L");
        // Largest 1428.6: breaks move to the nearest multiple of 100.
        let skewed: Vec<f64> = (1..=100).map(|i| f64::from(i).powi(2) / 7.0).collect();
        let classes = quantile_classes(&skewed, 4).unwrap();
        for b in &classes.breaks {
            assert!(
                (b / 100.0 - (b / 100.0).round()).abs() < 1e-9,
                "{b} is not a multiple of 100"
            );
        }
    }

    #[test]
    fn equal_values_make_one_class_and_nan_is_ignored() {
        let classes = quantile_classes(&[3.0, 3.0, f64::NAN, 3.0], 5).unwrap();
        assert_eq!(classes.len(), 1);
        assert_eq!(classes.counts, vec![3]);
        assert!(quantile_classes(&[f64::NAN], 5).is_none());
    }

    #[test]
    fn symmetric_classes_centre_on_zero() {
        // Residuals -40..=40: |r| quartiles 10, 20, 30 -> breaks ±10, ±20, ±30.
        let values: Vec<f64> = (-40..=40).map(f64::from).collect();
        let classes = symmetric_classes(&values, 3).unwrap();
        assert_eq!(classes.breaks, vec![-30.0, -20.0, -10.0, 10.0, 20.0, 30.0]);
        assert_eq!(classes.class_of(0.0), 3);
        assert_eq!(classes.class_of(-9.9), 3);
        assert_eq!(classes.class_of(10.0), 4);
        assert_eq!(classes.class_of(-35.0), 0);
        let labels = classes.labels("");
        assert_eq!(labels[0], "\u{2212}40 \u{2013} \u{2212}30");
        assert_eq!(labels[3], "\u{2212}10 \u{2013} 10");
        let all_zero = symmetric_classes(&[0.0, 0.0], 3).unwrap();
        assert_eq!(all_zero.len(), 1);
    }
}
