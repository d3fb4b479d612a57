//! Tests of `schema`.

use super::*;

fn memory() -> Connection {
    let conn = Connection::open_in_memory().unwrap();
    register_functions(&conn).unwrap();
    create_container(&conn).unwrap();
    conn
}

fn square_blob(x: f64, y: f64) -> Vec<u8> {
    let square = crate::core::geometry::cell_polygon([x, y], 1.0, 0, 0);
    let shape = geo_types::MultiPolygon::new(vec![square]);
    blob::encode_wkb(-1, &crate::adapters::wkb::multipolygon(&shape, None)).unwrap()
}

fn table() -> FeatureTable {
    FeatureTable {
        name: "cells".into(),
        key: "fid".into(),
        columns: "label TEXT".into(),
        geometry_type: "POLYGON".into(),
        geometry_not_null: false,
        srs_id: -1,
        z: 0,
        m: 0,
        description: "test".into(),
    }
}

fn rtree_rows(conn: &Connection) -> Vec<(i64, f64, f64)> {
    let mut statement = conn
        .prepare("SELECT id, minx, maxy FROM rtree_cells_geom ORDER BY id")
        .unwrap();
    statement
        .query_map([], |row| Ok((row.get(0)?, row.get(1)?, row.get(2)?)))
        .unwrap()
        .map(Result::unwrap)
        .collect()
}

#[test]
fn both_trigger_sets_keep_the_index_right() {
    for set in [TriggerSet::V1_3, TriggerSet::V1_4] {
        let conn = memory();
        let table = table();
        create_feature_table(&conn, &table).unwrap();
        conn.execute(
            "INSERT INTO cells (fid, label, geom) VALUES (1, 'a', ?1)",
            [square_blob(0.0, 0.0)],
        )
        .unwrap();
        index_feature_table(&conn, &table, set).unwrap();
        // Through the triggers: insert, move, empty, delete.
        conn.execute(
            "INSERT INTO cells (fid, label, geom) VALUES (2, 'b', ?1)",
            [square_blob(10.0, 10.0)],
        )
        .unwrap();
        conn.execute(
            "UPDATE cells SET geom = ?1 WHERE fid = 1",
            [square_blob(5.0, 5.0)],
        )
        .unwrap();
        assert_eq!(rtree_rows(&conn), vec![(1, 5.0, 6.0), (2, 10.0, 11.0)]);
        conn.execute("UPDATE cells SET geom = NULL WHERE fid = 2", [])
            .unwrap();
        assert_eq!(rtree_rows(&conn), vec![(1, 5.0, 6.0)]);
        conn.execute("DELETE FROM cells WHERE fid = 1", []).unwrap();
        assert!(rtree_rows(&conn).is_empty());
        let extent: Option<f64> = conn
            .query_row(
                "SELECT min_x FROM gpkg_contents WHERE table_name = 'cells'",
                [],
                |row| row.get(0),
            )
            .unwrap();
        assert_eq!(extent, Some(0.0));
    }
}

#[test]
fn functions_read_header_or_wkb() {
    let conn = memory();
    let with_envelope = square_blob(2.0, 3.0);
    let min_y: f64 = conn
        .query_row("SELECT ST_MinY(?1)", [&with_envelope], |row| row.get(0))
        .unwrap();
    assert_eq!(min_y, 3.0);
    let empty: i64 = conn
        .query_row(
            "SELECT ST_IsEmpty(?1)",
            [blob::encode(0, None, b"")],
            |row| row.get(0),
        )
        .unwrap();
    assert_eq!(empty, 1);
    let null: Option<f64> = conn
        .query_row("SELECT ST_MaxX(NULL)", [], |row| row.get(0))
        .unwrap();
    assert_eq!(null, None);
    assert!(conn
        .query_row("SELECT ST_MaxX(x'0102')", [], |row| row.get::<_, f64>(0))
        .is_err());
}

#[test]
fn wkt_names_are_read() {
    assert_eq!(
        wkt_name(crate::demo::DEMO_SRS_WKT).as_deref(),
        Some("WGS 84 / UTM zone 31N")
    );
}
