//! Tests of the k-means scheme.

use super::*;
use crate::core::testing::Points;

fn scattered(n: usize, seed: u64) -> Points {
    let mut rng = FoldRng::new(seed, 0);
    Points::new(
        (0..n)
            .map(|_| [rng.unit_interval() * 1000.0, rng.unit_interval() * 1000.0])
            .collect(),
    )
}

fn scheme(folds: u32, clusters: Option<u32>) -> Kmeans {
    Kmeans::new(KmeansParams {
        folds,
        clusters,
        starts: 4,
    })
    .unwrap()
}

#[test]
fn one_cluster_per_fold_keeps_clusters_whole() {
    let points = scattered(2000, 1);
    let set = scheme(5, None)
        .assign(&points.input(), &mut FoldRng::new(2, 0))
        .unwrap();
    assert_eq!(set.k, 5);
    assert_eq!(set.regions.len(), 5);
    // Fold numbers follow cluster size, largest first.
    let sizes = set.fold_sizes();
    assert!(sizes.windows(2).all(|w| w[0] >= w[1]), "{sizes:?}");
    assert_eq!(sizes.iter().sum::<usize>(), 2000);
    // Each unit lies in its cluster's hull.
    use geo::Intersects;
    for (i, p) in points.points.iter().enumerate() {
        let inside = set
            .regions
            .iter()
            .filter(|r| r.geometry.intersects(&geo_types::Point::new(p[0], p[1])))
            .any(|r| r.fold == set.fold_of[i]);
        assert!(inside, "unit {i}");
    }
}

#[test]
fn more_clusters_than_folds_balance_within_the_largest_cluster() {
    let points = scattered(3000, 7);
    for seed in 0..5 {
        let set = scheme(4, Some(37))
            .assign(&points.input(), &mut FoldRng::new(seed, 0))
            .unwrap();
        let sizes = set.fold_sizes();
        let largest_cluster = set.regions.iter().map(|r| r.units as usize).max().unwrap();
        let spread = sizes.iter().max().unwrap() - sizes.iter().min().unwrap();
        assert!(spread <= largest_cluster, "{sizes:?} vs {largest_cluster}");
        assert_eq!(set.facts["clusters"], 37);
    }
}

#[test]
fn repetitions_differ_and_seeds_repeat() {
    // 40 clusters of 500 scattered points have many local optima, so two
    // streams end in different clusterings (3 clusters of uniform points
    // would reach the same optimum from any seed).
    let points = scattered(500, 3);
    let s = scheme(3, Some(40));
    let a = s.assign(&points.input(), &mut FoldRng::new(1, 0)).unwrap();
    let b = s.assign(&points.input(), &mut FoldRng::new(1, 0)).unwrap();
    assert_eq!(a, b);
    let c = s.assign(&points.input(), &mut FoldRng::new(1, 1)).unwrap();
    assert_ne!(a.fold_of, c.fold_of);
}

#[test]
fn bad_options_are_usage_errors_and_too_few_units_a_fold_error() {
    for params in [
        KmeansParams {
            folds: 5,
            clusters: Some(3),
            starts: 10,
        },
        KmeansParams {
            folds: 5,
            clusters: None,
            starts: 0,
        },
        KmeansParams {
            folds: 1,
            clusters: None,
            starts: 10,
        },
    ] {
        assert_eq!(
            Kmeans::new(params).unwrap_err().exit_code(),
            crate::error::exit::USAGE
        );
    }
    let points = scattered(4, 1);
    let error = scheme(5, None)
        .assign(&points.input(), &mut FoldRng::new(1, 0))
        .unwrap_err();
    assert_eq!(error.exit_code(), crate::error::exit::DATA);
    assert!(
        error.to_string().contains("4 units cannot make 5 clusters"),
        "{error}"
    );
}
