//! Advice on the block size of `grid` folds and the radius of the exclusion
//! buffer, from the range of the residuals' fitted semivariogram.
//!
//! **The rule.** Blocks and exclusion buffers should be at least as large as
//! the range of residual spatial autocorrelation, so that held-out units are
//! close to independent of the units a model is trained on (Roberts, D. R.
//! et al. (2017). Cross-validation strategies for data with temporal, spatial,
//! hierarchical, or phylogenetic structure. *Ecography* 40: 913–929; Le Rest,
//! K. et al. (2014). Spatial leave-one-out cross-validation for variable
//! selection in the presence of spatial autocorrelation. *Global Ecology and
//! Biogeography* 23: 811–820). The range is the effective range of the
//! better-fitting model (smaller weighted SSE: spherical a, or exponential
//! 3a); both recommendations are that range rounded *up* to two significant
//! digits.
//!
//! **Caveats** travel with the advice: lags with fewer than 30 pairs (common
//! practice asks 30–50), a weighted R² below 0.7 (this tool's threshold, no
//! source), a range beyond half the bounding-box diagonal or beyond the
//! cutoff, no sill within the search, fewer blocks over the area than twice
//! the folds (common practice), and a fit that is at least 90 % nugget (this
//! tool's threshold), which means no spatial structure was detected at the
//! lags examined: then no size is recommended.
//!
//! The figures describe spatial structure, not causes, and do not replace
//! domain judgment, local rules or licensed practice.

use std::fmt::Write;

use serde::Serialize;

use super::semivariogram::Semivariogram;
use super::variogram_fit::{RangeBound, VariogramFit, VariogramModel};
use super::Caveat;

/// Thresholds of the advice.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct AdviceParams {
    /// Folds planned (default 5); blocks should number at least twice this.
    pub folds: u32,
    /// Fewest pairs per lag before a lag is flagged (default 30).
    pub min_pairs: u64,
    /// Weighted R² below which a fit is called poor (default 0.7).
    pub min_r_squared: f64,
    /// Nugget share of the sill from which no structure is reported
    /// (default 0.9).
    pub max_nugget_share: f64,
}

impl Default for AdviceParams {
    fn default() -> Self {
        AdviceParams {
            folds: 5,
            min_pairs: 30,
            min_r_squared: 0.7,
            max_nugget_share: 0.9,
        }
    }
}

/// The figures the advice rests on.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AdviceBasis {
    /// The model whose range is used.
    pub model: VariogramModel,
    /// Its effective range (distance units of the CRS).
    pub range: f64,
    /// Nugget.
    pub nugget: f64,
    /// Partial sill.
    pub partial_sill: f64,
    /// Nugget / (nugget + partial sill).
    pub nugget_share: f64,
    /// Weighted R² of the fit.
    pub r_squared: f64,
    /// Lags fitted.
    pub lags_used: usize,
    /// Fewest pairs in a lag (visited pairs).
    pub fewest_pairs: u64,
    /// The semivariogram's cutoff.
    pub cutoff: f64,
    /// Bounding-box diagonal.
    pub diagonal: f64,
    /// Number of units.
    pub n: usize,
    /// Whether every pair was used.
    pub exact: bool,
}

/// Recommended sizes, with what they rest on.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Advice {
    /// None when no model could be fitted.
    pub basis: Option<AdviceBasis>,
    /// Recommended minimum block side for `grid` folds; None when no spatial
    /// structure was detected or no model fitted.
    pub block_size: Option<f64>,
    /// Recommended minimum exclusion-buffer radius; same conditions.
    pub buffer_radius: Option<f64>,
    /// Grid blocks of `block_size` over the bounding box.
    pub blocks_over_extent: Option<u64>,
    /// Everything that makes the advice less certain.
    pub caveats: Vec<Caveat>,
}

/// Advice from a semivariogram and its fitted models (e.g. from
/// [`fit_both`](super::variogram_fit::fit_both)).
pub fn advise(
    semivariogram: &Semivariogram,
    fits: &[VariogramFit],
    params: &AdviceParams,
) -> Advice {
    let mut caveats = semivariogram.caveats.clone();
    let few: Vec<usize> = semivariogram
        .lags
        .iter()
        .enumerate()
        .filter(|(_, lag)| lag.pairs < params.min_pairs)
        .map(|(k, _)| k)
        .collect();
    if !few.is_empty() {
        caveats.push(Caveat::FewPairs {
            lags: few,
            minimum: params.min_pairs,
        });
    }
    let Some(fit) = fits
        .iter()
        .min_by(|a, b| a.weighted_sse.total_cmp(&b.weighted_sse))
    else {
        return Advice {
            basis: None,
            block_size: None,
            buffer_radius: None,
            blocks_over_extent: None,
            caveats,
        };
    };
    let sill = fit.nugget + fit.partial_sill;
    let nugget_share = if sill > 0.0 { fit.nugget / sill } else { 1.0 };
    let basis = AdviceBasis {
        model: fit.model,
        range: fit.effective_range,
        nugget: fit.nugget,
        partial_sill: fit.partial_sill,
        nugget_share,
        r_squared: fit.r_squared,
        lags_used: fit.lags_used,
        fewest_pairs: semivariogram
            .lags
            .iter()
            .map(|l| l.pairs)
            .min()
            .unwrap_or(0),
        cutoff: semivariogram.cutoff,
        diagonal: semivariogram.extent.diagonal,
        n: semivariogram.n,
        exact: matches!(semivariogram.mode, super::pairs::PairMode::Exact),
    };
    // A NaN R² (flat sample semivariogram) counts as poor.
    if fit.r_squared.is_nan() || fit.r_squared < params.min_r_squared {
        caveats.push(Caveat::PoorFit {
            model: fit.model.name().to_string(),
            r_squared: fit.r_squared,
            minimum: params.min_r_squared,
        });
    }
    if nugget_share >= params.max_nugget_share || fit.range_bound == Some(RangeBound::Lower) {
        caveats.push(Caveat::NoSpatialStructure { nugget_share });
        return Advice {
            basis: Some(basis),
            block_size: None,
            buffer_radius: None,
            blocks_over_extent: None,
            caveats,
        };
    }
    let range = fit.effective_range;
    if fit.range_bound == Some(RangeBound::Upper) {
        caveats.push(Caveat::NoSill { range });
    }
    if range > semivariogram.cutoff {
        caveats.push(Caveat::RangeBeyondCutoff {
            range,
            cutoff: semivariogram.cutoff,
        });
    }
    let half_diagonal = semivariogram.extent.diagonal / 2.0;
    if range > half_diagonal {
        caveats.push(Caveat::RangeBeyondHalfExtent {
            range,
            half_diagonal,
        });
    }
    let size = round_up_two_digits(range);
    let extent = semivariogram.extent;
    let across = |a: usize| (((extent.max[a] - extent.min[a]) / size).floor() as u64) + 1;
    let blocks = across(0) * across(1);
    if blocks < 2 * u64::from(params.folds) {
        caveats.push(Caveat::FewBlocks {
            blocks,
            folds: params.folds,
        });
    }
    Advice {
        basis: Some(basis),
        block_size: Some(size),
        buffer_radius: Some(size),
        blocks_over_extent: Some(blocks),
        caveats,
    }
}

/// `x` rounded up to two significant digits (897.0 → 900, 1349.3 → 1400).
pub fn round_up_two_digits(x: f64) -> f64 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let exponent = x.log10().floor() as i32 - 1;
    // Divide by powers of ten above 1 only, so 13 / 1000 gives 0.013 exactly
    // as written, not 13 × 0.001.
    let scale = 10f64.powi(exponent.abs());
    let steps = |v: f64| if exponent >= 0 { v / scale } else { v * scale };
    let size = |n: f64| if exponent >= 0 { n * scale } else { n / scale };
    let rounded = size(steps(x).ceil());
    if rounded < x {
        // The quotient rounded below the true value: one step more.
        size(steps(x).ceil() + 1.0)
    } else {
        rounded
    }
}

impl Advice {
    /// The advice in plain words, with the figures and caveats, for a
    /// terminal or a report. Distances are bare numbers in the units of the CRS.
    pub fn render(&self) -> String {
        self.render_with(&figure)
    }

    /// As [`Advice::render`], with distances written by `length` (which
    /// knows the CRS unit, e.g. "7.1 km").
    pub fn render_with(&self, length: &dyn Fn(f64) -> String) -> String {
        let mut text = String::from("Block size and exclusion buffer\n");
        match &self.basis {
            None => {
                text.push_str(
                    "  No semivariogram model could be fitted to the residuals, so no size \
                     is recommended.\n",
                );
            }
            Some(basis) => {
                let _ = writeln!(
                    text,
                    "  Residual autocorrelation range: {} ({} model: nugget {}, partial sill {}, \
                     weighted R² {:.3}; {} lags up to {}, {} units, {}).",
                    length(basis.range),
                    basis.model.name(),
                    figure(basis.nugget),
                    figure(basis.partial_sill),
                    basis.r_squared,
                    basis.lags_used,
                    length(basis.cutoff),
                    basis.n,
                    if basis.exact {
                        "all pairs"
                    } else {
                        "a seeded sample of pairs"
                    }
                );
                match (self.block_size, self.buffer_radius) {
                    (Some(block), Some(radius)) => {
                        let _ = writeln!(
                            text,
                            "  Recommended block size for grid folds: at least {}{}.",
                            length(block),
                            self.blocks_over_extent
                                .map(|b| format!(" ({b} blocks over the bounding box)"))
                                .unwrap_or_default()
                        );
                        let _ = writeln!(
                            text,
                            "  Recommended exclusion buffer radius: at least {}.",
                            length(radius)
                        );
                        text.push_str(
                            "  Why: blocks and buffers at least as large as the range of residual \
                             autocorrelation keep held-out units close to independent of the \
                             training units (Roberts et al. 2017; Le Rest et al. 2014).\n",
                        );
                    }
                    _ => text.push_str(
                        "  No size is recommended: the residuals show no spatial structure at \
                         the distances examined, so the autocorrelation gives no minimum.\n",
                    ),
                }
            }
        }
        if !self.caveats.is_empty() {
            text.push_str("  Caveats:\n");
            for caveat in &self.caveats {
                let _ = writeln!(text, "  - {caveat}");
            }
        }
        text.push_str(
            "  These figures describe spatial structure and predictive skill, not causes; they \
             do not replace domain judgment, local rules or licensed practice.\n",
        );
        text
    }
}

/// A figure with four significant digits, no exponent for everyday sizes.
fn figure(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    let magnitude = x.abs().log10().floor() as i32;
    if (-3..6).contains(&magnitude) {
        let decimals = (3 - magnitude).max(0) as usize;
        let text = format!("{x:.decimals$}");
        if text.contains('.') {
            text.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            text
        }
    } else {
        format!("{x:.3e}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::diagnostics::contiguity::fixture;
    use crate::core::diagnostics::pairs::LagParams;
    use crate::core::diagnostics::semivariogram::semivariogram;
    use crate::core::diagnostics::variogram_fit::fit_both;

    #[test]
    fn meuse_advice_rests_on_the_spherical_range() {
        // REFERENCES §5.2: Meuse log(zinc) has a spherical range ≈ 897 m, "a
        // good test of block size ≈ range"; the rule is §7 (block side and
        // buffer ≥ the residual autocorrelation range; Roberts et al. 2017, Le
        // Rest et al. 2014).
        let (points, zinc) = fixture::meuse();
        let log_zinc: Vec<f64> = zinc.iter().map(|z| z.ln()).collect();
        let sv = semivariogram(&points, &log_zinc, &LagParams::default()).unwrap();
        let fits = fit_both(&sv).unwrap();
        let advice = advise(&sv, &fits, &AdviceParams::default());
        let basis = advice.basis.as_ref().unwrap();
        // The spherical fit has the smaller weighted SSE on Meuse.
        assert_eq!(basis.model, VariogramModel::Spherical);
        assert!((basis.range - 897.0).abs() < 1.0, "{}", basis.range);
        assert_eq!(advice.block_size, Some(900.0));
        assert_eq!(advice.buffer_radius, Some(900.0));
        // Every Meuse lag has ≥ 57 pairs, the range is inside the cutoff
        // (1597 m) and below half the diagonal (4790/2 m), and the bounding
        // box of 2785 × 3897 m holds 4 × 5 = 20 blocks of 900 m, ≥ 2 × 5
        // folds: no caveat.
        assert_eq!(advice.blocks_over_extent, Some(20));
        assert!(advice.caveats.is_empty(), "{:?}", advice.caveats);
        let text = advice.render();
        assert!(text.contains("at least 900"), "{text}");
        assert!(text.contains("not causes"), "{text}");
    }

    #[test]
    fn caveats_flag_few_pairs_poor_fits_long_ranges_and_pure_nugget() {
        let (points, zinc) = fixture::meuse();
        let log_zinc: Vec<f64> = zinc.iter().map(|z| z.ln()).collect();
        // Short lags: 40 lags of 40 m up to 1600 m leave the first lags thin.
        let params = LagParams {
            cutoff: Some(1600.0),
            width: Some(40.0),
            ..LagParams::default()
        };
        let sv = semivariogram(&points, &log_zinc, &params).unwrap();
        let fits = fit_both(&sv).unwrap();
        let advice = advise(&sv, &fits, &AdviceParams::default());
        assert!(advice
            .caveats
            .iter()
            .any(|c| matches!(c, Caveat::FewPairs { lags, .. } if lags.contains(&0))));
        // A forced poor fit and a long range.
        let mut fit = fits[0].clone();
        fit.r_squared = 0.2;
        fit.effective_range = 3000.0;
        fit.range_parameter = 3000.0;
        let advice = advise(
            &sv,
            &[fit.clone()],
            &AdviceParams {
                folds: 10,
                ..AdviceParams::default()
            },
        );
        for wanted in [
            "PoorFit",
            "RangeBeyondCutoff",
            "RangeBeyondHalfExtent",
            "FewBlocks",
        ] {
            assert!(
                advice
                    .caveats
                    .iter()
                    .any(|c| format!("{c:?}").starts_with(wanted)),
                "{wanted} missing in {:?}",
                advice.caveats
            );
        }
        assert_eq!(advice.block_size, Some(3000.0));
        // Pure nugget: no size recommended.
        fit.nugget = 0.6;
        fit.partial_sill = 0.01;
        let advice = advise(&sv, &[fit], &AdviceParams::default());
        assert_eq!(advice.block_size, None);
        assert!(advice
            .caveats
            .iter()
            .any(|c| matches!(c, Caveat::NoSpatialStructure { .. })));
        assert!(advice.render().contains("No size is recommended"));
        // No fit at all.
        let advice = advise(&sv, &[], &AdviceParams::default());
        assert!(advice.basis.is_none());
        assert!(advice
            .render()
            .contains("No semivariogram model could be fitted"));
    }

    #[test]
    fn rounding_up_keeps_two_digits_and_never_goes_below() {
        // Common practice, no source.
        assert_eq!(round_up_two_digits(897.0064), 900.0);
        assert_eq!(round_up_two_digits(1349.29), 1400.0);
        assert_eq!(round_up_two_digits(900.0), 900.0);
        assert_eq!(round_up_two_digits(0.01234), 0.013);
        assert!(round_up_two_digits(123456.7) >= 123456.7);
    }
}
