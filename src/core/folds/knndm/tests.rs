//! Tests of kNNDM.

use super::*;
use crate::core::matching::{cv_distances, prediction_distances};
use crate::core::testing::{clustered_points, square_grid, Points};

fn clustered(seed: u64) -> Vec<[f64; 2]> {
    clustered_points(seed, 10, 40, 30.0)
}

#[test]
fn candidate_counts_follow_the_stated_grid() {
    assert_eq!(
        candidate_counts(5, 1_000_000),
        vec![5, 16, 50, 158, 500, 1581, 5000]
    );
    assert_eq!(candidate_counts(10, 100), vec![10, 32]);
    assert_eq!(candidate_counts(5, 6), vec![5]);
}

#[test]
fn clustered_units_and_far_prediction_locations_choose_spatial_folds() {
    let points = Points::new(clustered(3));
    let far = square_grid(25);
    let mut input = points.input();
    input.prediction_points = Some(&far);
    let set = Knndm::new(5)
        .unwrap()
        .assign(&input, &mut FoldRng::new(1, 0))
        .unwrap();
    assert_ne!(set.facts["chosen_clusters"], "random");
    // Its W (recomputed here over every unit) beats random folds'.
    let target = prediction_distances(&far, &points.index);
    let chosen = wasserstein1(&cv_distances(&set, &points.points, &points.index), &target);
    let candidates = set.facts["candidates"].as_array().unwrap();
    let random_w = candidates.last().unwrap()["w"].as_f64().unwrap();
    assert!(chosen < random_w, "{chosen} vs random {random_w}");
    assert_eq!(set.fold_sizes().iter().sum::<usize>(), 400);
    assert_eq!(set.regions.len(), 5);
}

#[test]
fn prediction_locations_at_the_units_choose_random_folds() {
    // Prediction distances all 0: the shortest CV distances match best, and
    // random folds give the shortest (REFERENCES §6.5's preliminary check).
    let points = Points::new(clustered(4));
    let mut input = points.input();
    input.prediction_points = Some(&points.points);
    let set = Knndm::new(5)
        .unwrap()
        .assign(&input, &mut FoldRng::new(1, 0))
        .unwrap();
    assert_eq!(set.facts["chosen_clusters"], "random");
}

#[test]
fn the_same_seed_gives_the_same_folds() {
    let points = Points::new(clustered(5));
    let far = square_grid(10);
    let mut input = points.input();
    input.prediction_points = Some(&far);
    let a = Knndm::new(4)
        .unwrap()
        .assign(&input, &mut FoldRng::new(8, 0))
        .unwrap();
    let b = Knndm::new(4)
        .unwrap()
        .assign(&input, &mut FoldRng::new(8, 0))
        .unwrap();
    assert_eq!(a, b);
}
