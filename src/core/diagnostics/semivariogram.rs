//! The empirical semivariogram by the Matheron estimator (Matheron, G.
//! (1962). *Traité de géostatistique appliquée*, Tome I. Paris: Technip):
//!
//! `γ̂(h_k) = (1 / (2 N_k)) Σ_{(i,j) ∈ lag k} (z_i − z_j)²`
//!
//! over the unordered pairs of lag k, `(b_k, b_{k+1}]`. The reported lag
//! distance is the mean distance of the lag's pairs, not the lag's centre.
//! Lags, defaults (cutoff = bounding-box diagonal / 3, 15 lags), the exact
//! limit and the seeded pair sample beyond it are those of
//! [`pairs`](super::pairs). Reproduces the published `log(zinc)` sample
//! variogram of the Meuse data (see the tests).

use serde::Serialize;

use super::pairs::{summarise_pairs, Extent, LagParams, PairMode, PairSummary};
use super::{Caveat, DiagnosticsError};

/// One lag of the semivariogram.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Lag {
    /// Lower edge (excluded).
    pub lower: f64,
    /// Upper edge (included).
    pub upper: f64,
    /// Pairs visited (all pairs when exact; the draws landing here when
    /// sampled).
    pub pairs: u64,
    /// Estimated number of pairs over all pairs (= `pairs` when exact).
    pub estimated_pairs: f64,
    /// Mean distance of the lag's pairs; None for an empty lag.
    pub distance: Option<f64>,
    /// γ̂; None for an empty lag.
    pub gamma: Option<f64>,
}

/// An empirical semivariogram.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Semivariogram {
    /// Number of units.
    pub n: usize,
    /// Bounding box of the units.
    pub extent: Extent,
    /// Cutoff used.
    pub cutoff: f64,
    /// Lag width used.
    pub width: f64,
    /// The lags, empty ones included.
    pub lags: Vec<Lag>,
    /// Exact or sampled.
    pub mode: PairMode,
    /// Pairs at distance 0, in no lag (estimated when sampled).
    pub coincident_pairs: f64,
    /// Warnings from the pass (cutoff beyond the extent, sampled pairs).
    pub caveats: Vec<Caveat>,
}

impl Semivariogram {
    /// The semivariogram of a pass over pairs.
    pub fn from_pairs(summary: &PairSummary) -> Semivariogram {
        let lags = summary
            .bins
            .iter()
            .map(|bin| {
                let filled = bin.pairs > 0 && bin.estimated_pairs > 0.0;
                Lag {
                    lower: bin.lower,
                    upper: bin.upper,
                    pairs: bin.pairs,
                    estimated_pairs: bin.estimated_pairs,
                    distance: filled.then(|| bin.sum_distance / bin.estimated_pairs),
                    gamma: filled.then(|| bin.sum_squared_difference / (2.0 * bin.estimated_pairs)),
                }
            })
            .collect();
        Semivariogram {
            n: summary.n,
            extent: summary.extent,
            cutoff: summary.cutoff,
            width: summary.width,
            lags,
            mode: summary.mode,
            coincident_pairs: summary.coincident_pairs,
            caveats: summary.caveats.clone(),
        }
    }

    /// The lags that hold pairs, as (mean distance, γ̂, estimated pairs).
    pub fn filled(&self) -> Vec<(f64, f64, f64)> {
        self.lags
            .iter()
            .filter_map(|lag| Some((lag.distance?, lag.gamma?, lag.estimated_pairs)))
            .collect()
    }
}

/// The semivariogram of `values` at `points` (Euclidean distances in the
/// points' CRS units).
///
/// # Complexity
/// Exact: O(n log n + pairs within reach of the cutoff); sampled: O(n log n +
/// draws). Parallel.
///
/// # Errors
/// As [`summarise_pairs`].
pub fn semivariogram(
    points: &[[f64; 2]],
    values: &[f64],
    params: &LagParams,
) -> Result<Semivariogram, DiagnosticsError> {
    Ok(Semivariogram::from_pairs(&summarise_pairs(
        points, values, params,
    )?))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::diagnostics::contiguity::fixture;
    use crate::core::diagnostics::on_one_thread;
    use approx::assert_relative_eq;

    /// Published sample variogram of `log(zinc)` on Meuse (REFERENCES §5.2,
    /// gstat documentation output [PUB], verified with numpy/scipy,
    /// scikit-gstat 1.0.26 and gstools 1.7.0): (np, dist, gamma).
    pub(crate) const MEUSE_PUBLISHED: [(u64, f64, f64); 15] = [
        (57, 79.29244, 0.1234479),
        (299, 163.97367, 0.2162185),
        (419, 267.36483, 0.3027859),
        (457, 372.73542, 0.4121448),
        (547, 478.47670, 0.4634128),
        (533, 585.34058, 0.5646933),
        (574, 693.14526, 0.5689683),
        (564, 796.18365, 0.6186769),
        (589, 903.14650, 0.6471479),
        (543, 1011.29177, 0.6915705),
        (500, 1117.86235, 0.7033984),
        (477, 1221.32810, 0.6038770),
        (452, 1329.16407, 0.6517158),
        (457, 1437.25620, 0.5665318),
        (415, 1543.20248, 0.5748227),
    ];

    #[test]
    fn meuse_log_zinc_reproduces_the_published_sample_variogram() {
        let (points, zinc) = fixture::meuse();
        assert_eq!(points.len(), 155);
        let log_zinc: Vec<f64> = zinc.iter().map(|z| z.ln()).collect();
        let sv = semivariogram(&points, &log_zinc, &LagParams::default()).unwrap();
        // REFERENCES §5.2: cutoff = diagonal/3 = 1596.6226159546213 m,
        // width = cutoff/15 = 106.44150773030809 m.
        assert_relative_eq!(sv.cutoff, 1596.6226159546213, max_relative = 1e-15);
        assert_relative_eq!(sv.width, 106.44150773030809, max_relative = 1e-15);
        assert_eq!(sv.mode, PairMode::Exact);
        assert_eq!(sv.lags.len(), 15);
        for (lag, (np, dist, gamma)) in sv.lags.iter().zip(MEUSE_PUBLISHED) {
            // Counts exactly; distance and γ to the printed 7–8 significant
            // digits (REFERENCES: numpy agrees to ≤ 3.2e-8 and ≤ 2.8e-7).
            assert_eq!(lag.pairs, np);
            assert_relative_eq!(lag.distance.unwrap(), dist, max_relative = 1e-7);
            assert_relative_eq!(lag.gamma.unwrap(), gamma, max_relative = 5e-7);
        }
        assert!(sv.caveats.is_empty(), "{:?}", sv.caveats);
    }

    #[test]
    fn one_dimensional_hand_example() {
        // REFERENCES §5.2 (derived, exact): x = 0..4, z = 1,3,2,5,4; lags of
        // width 1 up to 4: γ = 15/8, 3/2, 17/4, 9/2 with N = 4, 3, 2, 1.
        let points: Vec<[f64; 2]> = (0..5).map(|x| [f64::from(x), 0.0]).collect();
        let z = [1.0, 3.0, 2.0, 5.0, 4.0];
        let params = LagParams {
            cutoff: Some(4.0),
            width: Some(1.0),
            ..LagParams::default()
        };
        let sv = semivariogram(&points, &z, &params).unwrap();
        let found: Vec<(u64, f64, f64)> = sv
            .lags
            .iter()
            .map(|l| (l.pairs, l.distance.unwrap(), l.gamma.unwrap()))
            .collect();
        assert_eq!(
            found,
            vec![
                (4, 1.0, 1.875),
                (3, 2.0, 1.5),
                (2, 3.0, 4.25),
                (1, 4.0, 4.5)
            ]
        );
    }

    #[test]
    fn exact_pass_matches_brute_force_with_a_short_cutoff_and_coincident_points() {
        // Brute force over all pairs (common practice, no source), with a
        // cutoff short enough that the grid skips most cells.
        // A clumpy pseudo-random scatter (sine hash), so short lags hold pairs.
        let hash = |t: f64| ((t.sin() * 43_758.545_312_5).fract()).abs();
        let mut points: Vec<[f64; 2]> = (0..700)
            .map(|i| {
                let i = f64::from(i);
                [hash(i * 12.9898) * 1000.0, hash(i * 78.233) * 800.0]
            })
            .collect();
        points.push(points[10]);
        let values: Vec<f64> = points
            .iter()
            .map(|p| (p[0] / 90.0).sin() + (p[1] / 130.0).cos())
            .collect();
        let params = LagParams {
            cutoff: Some(120.0),
            lags: 8,
            ..LagParams::default()
        };
        let sv = semivariogram(&points, &values, &params).unwrap();
        let mut count = [0u64; 8];
        let mut sum_d = [0.0; 8];
        let mut sum_g = [0.0; 8];
        let mut coincident = 0.0;
        for i in 0..points.len() {
            for j in i + 1..points.len() {
                let d = ((points[i][0] - points[j][0]).powi(2)
                    + (points[i][1] - points[j][1]).powi(2))
                .sqrt();
                if d == 0.0 {
                    coincident += 1.0;
                } else if d <= 120.0 {
                    let k = ((d / 15.0).ceil() as usize - 1).min(7);
                    count[k] += 1;
                    sum_d[k] += d;
                    sum_g[k] += (values[i] - values[j]).powi(2);
                }
            }
        }
        assert_eq!(sv.coincident_pairs, coincident);
        for k in 0..8 {
            assert_eq!(sv.lags[k].pairs, count[k], "lag {k}");
            assert!(
                count[k] > 0,
                "lag {k} is empty: the test data are too sparse"
            );
            assert_relative_eq!(
                sv.lags[k].distance.unwrap(),
                sum_d[k] / count[k] as f64,
                max_relative = 1e-12
            );
            assert_relative_eq!(
                sv.lags[k].gamma.unwrap(),
                sum_g[k] / (2.0 * count[k] as f64),
                max_relative = 1e-12
            );
        }
    }

    #[test]
    fn pair_sample_estimates_the_exact_semivariogram_and_ignores_threads() {
        // The weighted pair sample is unbiased (Horvitz & Thompson 1952): on
        // 20,000 units with a short cutoff, 2,000,000 draws must reproduce the
        // exact counts within 3 % and γ within 3 % in every lag (the relative
        // SD per lag is below 0.5 % here; common practice, no source for the
        // band).
        let n = 20_000;
        let points: Vec<[f64; 2]> = (0..n)
            .map(|i| {
                let u = (i as f64 * 0.618_033_988_749_894_9).fract();
                let v = (i as f64 * 0.754_877_666_246_692_7).fract();
                [u * 10_000.0, v * 10_000.0]
            })
            .collect();
        let values: Vec<f64> = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                (p[0] / 700.0).sin() + (p[1] / 900.0).cos() + ((i * 7919) % 13) as f64 / 13.0
            })
            .collect();
        let exact_params = LagParams {
            cutoff: Some(1500.0),
            lags: 10,
            ..LagParams::default()
        };
        let sampled_params = LagParams {
            exact_limit: 1000,
            sample_pairs: 2_000_000,
            seed: 11,
            ..exact_params
        };
        let exact = semivariogram(&points, &values, &exact_params).unwrap();
        let sampled = semivariogram(&points, &values, &sampled_params).unwrap();
        assert!(matches!(
            sampled.mode,
            PairMode::Sampled {
                drawn: 2_000_000,
                ..
            }
        ));
        for (e, s) in exact.lags.iter().zip(&sampled.lags) {
            assert_relative_eq!(s.estimated_pairs, e.pairs as f64, max_relative = 0.03);
            assert_relative_eq!(s.gamma.unwrap(), e.gamma.unwrap(), max_relative = 0.03);
            assert_relative_eq!(
                s.distance.unwrap(),
                e.distance.unwrap(),
                max_relative = 0.01
            );
        }
        let single = on_one_thread(|| semivariogram(&points, &values, &sampled_params).unwrap());
        assert_eq!(single, sampled);
        let exact_single =
            on_one_thread(|| semivariogram(&points, &values, &exact_params).unwrap());
        assert_eq!(exact_single, exact);
    }

    #[test]
    fn bad_options_and_data_are_refused_and_a_long_cutoff_is_flagged() {
        let points = [[0.0, 0.0], [3.0, 4.0], [6.0, 8.0]];
        let values = [1.0, 2.0, 4.0];
        let with = |cutoff: Option<f64>, width: Option<f64>| LagParams {
            cutoff,
            width,
            ..LagParams::default()
        };
        for params in [
            with(Some(0.0), None),
            with(Some(f64::NAN), None),
            with(Some(10.0), Some(-1.0)),
            with(Some(10.0), Some(0.01)),
            LagParams {
                lags: 0,
                ..LagParams::default()
            },
        ] {
            let error = semivariogram(&points, &values, &params).unwrap_err();
            assert!(error.is_usage(), "{error}");
        }
        assert!(matches!(
            semivariogram(&points, &values[..2], &LagParams::default()),
            Err(DiagnosticsError::LengthMismatch { .. })
        ));
        assert!(matches!(
            semivariogram(
                &[[1.0, 1.0], [1.0, 1.0]],
                &[1.0, 2.0],
                &LagParams::default()
            ),
            Err(DiagnosticsError::TooFewUnits { .. })
        ));
        let sv = semivariogram(&points, &values, &with(Some(30.0), Some(10.0))).unwrap();
        assert!(sv
            .caveats
            .iter()
            .any(|c| matches!(c, Caveat::CutoffBeyondExtent { .. })));
        assert_eq!(sv.lags[2].pairs, 0);
        assert_eq!(sv.lags[2].gamma, None);
    }
}
