//! Fixture builders for the core's unit tests.

use crate::core::folds::{FoldRng, SchemeInput};
use crate::core::neighbours::NeighbourIndex;
use crate::core::units::{Dataset, GeometryKinds, IdKind, Skipped, UnitId};

/// A dataset of points with ids 1.., target = x + y, one feature = x.
pub fn points_dataset(points: &[[f64; 2]]) -> Dataset {
    Dataset {
        ids: (1..=points.len() as i64).map(UnitId::Int).collect(),
        points: points.to_vec(),
        target: points.iter().map(|p| p[0] + p[1]).collect(),
        features: points.iter().map(|p| p[0]).collect(),
        feature_names: vec!["x".to_string()],
        id_kind: IdKind::Integer,
        geometry_kinds: GeometryKinds {
            points: true,
            polygons: false,
            other: false,
        },
        rows_read: points.len() as u64,
        skipped: Skipped::default(),
        groups: None,
        exposure: None,
        categorical: Vec::new(),
        geometries: None,
    }
}

/// Points with their neighbour index, to hand to a scheme.
pub struct Points {
    /// The points.
    pub points: Vec<[f64; 2]>,
    /// Their index.
    pub index: NeighbourIndex,
}

impl Points {
    /// Indexes `points`.
    pub fn new(points: Vec<[f64; 2]>) -> Points {
        let index = NeighbourIndex::new(&points);
        Points { points, index }
    }

    /// What a scheme sees.
    pub fn input(&self) -> SchemeInput<'_> {
        SchemeInput {
            points: &self.points,
            index: &self.index,
            groups: None,
            prediction_points: None,
            geometries: None,
            exclusion_radius: None,
        }
    }
}

/// A dataset from feature rows (`names` in column order), targets and points;
/// ids 1.. in row order.
pub fn table_dataset(
    names: &[&str],
    rows: &[Vec<f64>],
    target: &[f64],
    points: &[[f64; 2]],
) -> Dataset {
    Dataset {
        ids: (1..=target.len() as i64).map(UnitId::Int).collect(),
        points: points.to_vec(),
        target: target.to_vec(),
        features: rows.iter().flatten().copied().collect(),
        feature_names: names.iter().map(|n| n.to_string()).collect(),
        id_kind: IdKind::Integer,
        geometry_kinds: GeometryKinds::default(),
        rows_read: target.len() as u64,
        skipped: Skipped::default(),
        groups: None,
        exposure: None,
        categorical: Vec::new(),
        geometries: None,
    }
}

/// The Columbus neighbourhoods (Anselin 1988, as shipped in libpysal 4.14.1;
/// `tests/fixtures/columbus/README.md`): target CRIME, features INC and
/// HOVAL, points the polygon centroids (as shapely's `centroid`, which the
/// reference values of REFERENCES.md §2 use).
pub fn columbus() -> Dataset {
    use geo::Centroid;
    let rows = crate::core::diagnostics::contiguity::fixture::columbus();
    let points: Vec<[f64; 2]> = rows
        .iter()
        .map(|r| {
            let c = r.polygon.centroid().expect("a centroid");
            [c.x(), c.y()]
        })
        .collect();
    table_dataset(
        &["INC", "HOVAL"],
        &rows
            .iter()
            .map(|r| vec![r.income, r.house_value])
            .collect::<Vec<_>>(),
        &rows.iter().map(|r| r.crime).collect::<Vec<_>>(),
        &points,
    )
}

/// `clusters` tight clusters of `per` points each (squares of side `spread`
/// at seeded places in the 1000 × 1000 square from the origin).
pub fn clustered_points(seed: u64, clusters: usize, per: usize, spread: f64) -> Vec<[f64; 2]> {
    let mut rng = FoldRng::new(seed, 0);
    let mut points = Vec::with_capacity(clusters * per);
    for _ in 0..clusters {
        let centre = [rng.unit_interval() * 1000.0, rng.unit_interval() * 1000.0];
        for _ in 0..per {
            points.push([
                centre[0] + rng.unit_interval() * spread,
                centre[1] + rng.unit_interval() * spread,
            ]);
        }
    }
    points
}

/// A `side` × `side` grid of points over the 1000 × 1000 square, edges included.
pub fn square_grid(side: usize) -> Vec<[f64; 2]> {
    let step = 1000.0 / (side - 1) as f64;
    (0..side * side)
        .map(|i| [(i % side) as f64 * step, (i / side) as f64 * step])
        .collect()
}
