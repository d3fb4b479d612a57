//! Tests of `units`.

use super::*;
use geo_types::{point, polygon};

fn square(x: f64, y: f64) -> RawGeometry {
    RawGeometry::Decoded(Geometry::Polygon(polygon![
        (x: x, y: y), (x: x + 1.0, y: y), (x: x + 1.0, y: y + 1.0), (x: x, y: y + 1.0), (x: x, y: y)
    ]))
}

fn names() -> Vec<String> {
    vec!["a".to_string(), "b".to_string()]
}

#[test]
fn skips_are_counted_by_first_reason() {
    let mut collector = UnitCollector::new("t", "y", &names(), false);
    collector
        .push(
            UnitId::Int(1),
            square(0.0, 0.0),
            Some(1.0),
            &[Some(1.0), Some(2.0)],
        )
        .unwrap();
    collector
        .push(UnitId::Int(2), RawGeometry::Null, None, &[None, None])
        .unwrap();
    collector
        .push(
            UnitId::Int(3),
            square(0.0, 0.0),
            Some(f64::NAN),
            &[Some(1.0), Some(2.0)],
        )
        .unwrap();
    collector
        .push(
            UnitId::Int(4),
            square(0.0, 0.0),
            Some(1.0),
            &[Some(1.0), Some(f64::INFINITY)],
        )
        .unwrap();
    collector
        .push(
            UnitId::Int(5),
            RawGeometry::Decoded(Geometry::Polygon(geo_types::Polygon::new(
                geo_types::LineString::new(vec![]),
                vec![],
            ))),
            Some(1.0),
            &[Some(1.0), Some(1.0)],
        )
        .unwrap();
    let dataset = collector.finish("id").unwrap();
    assert_eq!(dataset.len(), 1);
    assert_eq!(dataset.rows_read, 5);
    assert_eq!(dataset.skipped.count("no geometry"), 1);
    assert_eq!(dataset.skipped.count("empty geometry"), 1);
    assert_eq!(dataset.skipped.count("missing target"), 1);
    assert_eq!(dataset.skipped.count("missing feature b"), 1);
    assert_eq!(dataset.skipped.total(), 4);
    assert_eq!(
        dataset.skipped.describe(),
        "1 no geometry, 1 empty geometry, 1 missing target, 1 missing feature b"
    );
    let ids: Vec<(&str, Vec<String>)> = dataset
        .skipped
        .ids()
        .map(|(reason, ids)| (reason, ids.iter().map(UnitId::to_string).collect()))
        .collect();
    assert_eq!(ids[0], ("no geometry", vec!["2".to_string()]));
    assert_eq!(ids[3], ("missing feature b", vec!["4".to_string()]));
}

#[test]
fn strict_turns_skips_into_errors_naming_rows() {
    let mut collector = UnitCollector::new("t", "y", &names(), true);
    collector
        .push(
            UnitId::Int(7),
            square(0.0, 0.0),
            None,
            &[Some(1.0), Some(2.0)],
        )
        .unwrap();
    collector
        .push(
            UnitId::Int(8),
            square(0.0, 0.0),
            Some(1.0),
            &[None, Some(2.0)],
        )
        .unwrap();
    let error = collector.finish("id").unwrap_err();
    let text = error.to_string();
    assert!(text.contains("t.y (row id=7)"), "{text}");
    assert!(text.contains("t.a (row id=8)"), "{text}");
    assert_eq!(error.exit_code(), crate::error::exit::DATA);
}

#[test]
fn duplicate_ids_are_listed() {
    let mut collector = UnitCollector::new("t", "y", &names(), false);
    for id in [3, 1, 3, 2, 1] {
        collector
            .push(
                UnitId::Int(id),
                square(0.0, 0.0),
                Some(1.0),
                &[Some(1.0), Some(2.0)],
            )
            .unwrap();
    }
    let text = collector.finish("gid").unwrap_err().to_string();
    assert!(
        text.contains("t.gid (row id=1)") && text.contains("t.gid (row id=3)"),
        "{text}"
    );
}

#[test]
fn order_of_rows_does_not_change_dataset_or_fingerprint() {
    let build = |ids: &[i64]| {
        let mut collector = UnitCollector::new("t", "y", &names(), false);
        for &id in ids {
            let value = id as f64;
            collector
                .push(
                    UnitId::Int(id),
                    RawGeometry::Decoded(Geometry::Point(point!(x: value, y: 2.0 * value))),
                    Some(value),
                    &[Some(value), Some(-value)],
                )
                .unwrap();
        }
        collector.finish("id").unwrap()
    };
    let a = build(&[5, 1, 4, 2, 3]);
    let b = build(&[1, 2, 3, 4, 5]);
    assert_eq!(a.ids, b.ids);
    assert_eq!(a.features, b.features);
    assert_eq!(a.fingerprint(), b.fingerprint());
    assert_eq!(a.features_of(0), &[1.0, -1.0]);
    assert!(a.geometry_kinds.points && !a.geometry_kinds.polygons);
}
