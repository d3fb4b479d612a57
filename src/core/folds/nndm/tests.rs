//! Tests of NNDM: plain leave-one-out when the prediction locations are the
//! units, the matching reached otherwise, and the one-pass rule against a
//! direct transcription of the iterative rule of the module doc.

use super::*;
use crate::core::matching::{cv_distances, prediction_distances};
use crate::core::testing::{clustered_points, square_grid, Points};

fn scheme(range: Option<f64>, share: f64) -> Nndm {
    Nndm::new(NndmParams {
        match_range: range,
        min_training_share: share,
    })
    .unwrap()
}

/// Clustered units: 8 tight clusters of 25 points in a 1000 × 1000 square.
fn clustered() -> Vec<[f64; 2]> {
    clustered_points(21, 8, 25, 40.0)
}

#[test]
fn prediction_locations_at_the_units_give_plain_leave_one_out() {
    let points = Points::new(clustered());
    let mut input = points.input();
    input.prediction_points = Some(&points.points);
    let set = scheme(None, 0.5)
        .assign(&input, &mut FoldRng::new(1, 0))
        .unwrap();
    assert_eq!(set.k, 200);
    assert!(!set.has_exclusions());
    assert_eq!(set.facts["matched"], true);
}

#[test]
fn far_prediction_locations_are_matched_up_to_the_range() {
    let points = Points::new(clustered());
    let grid = square_grid(30);
    let mut input = points.input();
    input.prediction_points = Some(&grid);
    let set = scheme(None, 0.5)
        .assign(&input, &mut FoldRng::new(1, 0))
        .unwrap();
    assert!(set.has_exclusions());
    // Ĝ*_j(r) ≤ Ĝ_ij(r) at every CV distance within the range (matched), or
    // the units at fault reached the training minimum.
    let cv = cv_distances(&set, &points.points, &points.index);
    let mut target = prediction_distances(&grid, &points.index);
    target.sort_by(f64::total_cmp);
    let range = target[target.len() - 1];
    let n = cv.len() as f64;
    let m = target.len() as f64;
    if set.facts["matched"] == true {
        for &r in cv.iter().filter(|&&r| r <= range) {
            let g_star = cv.iter().filter(|&&d| d <= r).count() as f64 / n;
            let g_ij = target.iter().filter(|&&d| d <= r).count() as f64 / m;
            assert!(g_star <= g_ij + 1e-12, "r = {r}: {g_star} > {g_ij}");
        }
    }
    // No training set below half of the other units.
    for fold in 0..set.k {
        assert!(set.excluded_from(fold).len() <= 199 - 100);
    }
}

#[test]
fn a_share_of_one_forbids_every_exclusion() {
    let points = Points::new(clustered());
    let grid = square_grid(30);
    let mut input = points.input();
    input.prediction_points = Some(&grid);
    let set = scheme(None, 1.0)
        .assign(&input, &mut FoldRng::new(1, 0))
        .unwrap();
    assert!(!set.has_exclusions());
    assert_eq!(set.facts["matched"], false);
    assert!(!set.warnings.is_empty());
}

/// The rule of the module doc transcribed directly: recompute every CV
/// distance and the ECDFs after every change (O(n²) per step).
fn naive(
    points: &[[f64; 2]],
    prediction: &[[f64; 2]],
    range: Option<f64>,
    share: f64,
) -> Vec<Vec<u32>> {
    let n = points.len();
    let d = |a: [f64; 2], b: [f64; 2]| ((a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)).sqrt();
    let mut target: Vec<f64> = prediction
        .iter()
        .map(|&p| {
            points
                .iter()
                .map(|&q| d(p, q))
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    target.sort_by(f64::total_cmp);
    let range = range.unwrap_or(target[target.len() - 1]);
    let floor = ((share * (n - 1) as f64).ceil() as usize).max(1);
    let mut excluded: Vec<Vec<u32>> = vec![Vec::new(); n];
    let mut frozen = vec![false; n];
    loop {
        let cv: Vec<f64> = (0..n)
            .map(|i| {
                (0..n)
                    .filter(|&j| j != i && !excluded[i].contains(&(j as u32)))
                    .map(|j| d(points[i], points[j]))
                    .fold(f64::INFINITY, f64::min)
            })
            .collect();
        let violates = |r: f64| {
            let g_star = cv.iter().filter(|&&x| x <= r).count();
            let g_ij = target.iter().filter(|&&x| x <= r).count();
            (g_star as u128) * (target.len() as u128) > (g_ij as u128) * (n as u128)
        };
        let mut candidates: Vec<usize> = (0..n)
            .filter(|&i| !frozen[i] && cv[i] <= range && violates(cv[i]))
            .collect();
        candidates.sort_by(|&a, &b| cv[a].total_cmp(&cv[b]).then(a.cmp(&b)));
        let Some(&i) = candidates.first() else { break };
        let tie: Vec<u32> = (0..n)
            .filter(|&j| {
                j != i && !excluded[i].contains(&(j as u32)) && d(points[i], points[j]) == cv[i]
            })
            .map(|j| j as u32)
            .collect();
        if excluded[i].len() + tie.len() > (n - 1) - floor {
            frozen[i] = true;
            continue;
        }
        excluded[i].extend(tie);
        excluded[i].sort_unstable();
    }
    excluded
}

#[test]
fn the_one_pass_rule_equals_the_iterative_rule() {
    let mut rng = FoldRng::new(5, 0);
    for case in 0..6 {
        let n = 40 + 10 * case;
        // Units clustered in the left quarter, prediction locations all over.
        let points: Vec<[f64; 2]> = (0..n)
            .map(|_| [rng.unit_interval() * 250.0, rng.unit_interval() * 1000.0])
            .collect();
        let prediction: Vec<[f64; 2]> = (0..60)
            .map(|_| [rng.unit_interval() * 1000.0, rng.unit_interval() * 1000.0])
            .collect();
        let range = if case % 2 == 0 { None } else { Some(60.0) };
        let share = [0.5, 0.3, 0.8][case % 3];
        let expected = naive(&points, &prediction, range, share);
        let indexed = Points::new(points);
        let mut input = indexed.input();
        input.prediction_points = Some(&prediction);
        let set = scheme(range, share)
            .assign(&input, &mut FoldRng::new(1, 0))
            .unwrap();
        assert_eq!(set.excluded, expected, "case {case}");
    }
}

#[test]
fn options_are_checked() {
    assert!(Nndm::new(NndmParams {
        match_range: Some(-1.0),
        min_training_share: 0.5
    })
    .is_err());
    assert!(Nndm::new(NndmParams {
        match_range: None,
        min_training_share: 1.5
    })
    .is_err());
    let points = Points::new(clustered());
    let error = scheme(None, 0.5)
        .assign(&points.input(), &mut FoldRng::new(1, 0))
        .unwrap_err();
    assert_eq!(error.exit_code(), crate::error::exit::USAGE);
}
