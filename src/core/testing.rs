//! Fixture builders for the core's unit tests.

use crate::core::units::{Dataset, GeometryKinds, IdKind, SkipCounts, UnitId};

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
        skipped: SkipCounts::default(),
    }
}
