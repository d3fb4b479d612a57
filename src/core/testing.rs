//! Fixture builders for the core's unit tests.

use crate::core::folds::SchemeInput;
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
        }
    }
}
