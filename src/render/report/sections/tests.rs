//! Tests of `sections`.

use super::*;

#[test]
fn ecdf_ends_at_one_and_is_thinned() {
    let values: Vec<f64> = (0..10_000).map(f64::from).collect();
    let curve = ecdf(&values);
    assert_eq!(curve.len(), ECDF_STEPS + 1);
    assert_eq!(curve.last(), Some(&(9999.0, 1.0)));
    assert!(curve
        .windows(2)
        .all(|w| w[0].0 <= w[1].0 && w[0].1 <= w[1].1));
    assert_eq!(ecdf(&[2.0, 1.0]), vec![(1.0, 0.0), (1.0, 0.5), (2.0, 1.0)]);
    assert_eq!(median(&[3.0, 1.0, 2.0, 10.0]), Some(2.5));
}
