//! The main `run` cases on both stores: each case's table is built once in
//! PostGIS (or written once as GeoJSON), GDAL writes the GeoPackage copy, and
//! the two stores' results must agree (`Stores::assert_same`). On top of
//! that, each case checks one store against an outside reference: PostGIS
//! functions and SQL recomputations for the PostGIS results, GDAL for the
//! GeoPackage files.

use crate::common::fixtures::{
    add_bad_rows, create_squares, create_units, write_lattice_geojson, IdType, DEMO_COLUMNS,
    LATTICE_COLUMNS, UNITS_GRID,
};
use crate::common::gdal::{gdal_layers, gdal_validates, gdal_window_count, layer, rtree_check};
use crate::common::pg::check_qgis_layer;
use crate::common::reference::{check_scores, check_units_sit_in_their_blocks};
use crate::common::stores::{Store, Stores, BOTH};
use crate::common::{assert_contains, code, stderr};

/// The columns of [`create_units`] tables, 200 m blocks (2 × 2 units), 3 folds.
const GRID: &[&str] = UNITS_GRID;

fn with<'a>(base: &[&'a str], extra: &[&'a str]) -> Vec<&'a str> {
    [base, extra].concat()
}

/// Rows of one run of one store as a count per table:
/// `fold_members|predictions|unit_errors|fold_scores|run_scores|fold_regions`.
fn result_counts(stores: &Stores, store: Store, run: &str) -> String {
    [
        "fold_members",
        "predictions",
        "unit_errors",
        "fold_scores",
        "run_scores",
        "fold_regions",
    ]
    .iter()
    .map(|table| {
        stores.query(
            store,
            &format!("SELECT count(*) FROM {table} WHERE run_id = '{run}'"),
        )[0][0]
            .clone()
    })
    .collect::<Vec<_>>()
    .join("|")
}

#[test]
fn grid_with_a_random_comparison_gives_the_same_results_on_both_stores() {
    let stores = Stores::from_postgis("both_grid", "units", |s| {
        create_units(s, "units", IdType::Integer)
    });
    let both = stores.run_ok(&with(GRID, &["--also-random"]));
    stores.assert_same(&both);
    for store in BOTH {
        let outcome = both.get(store);
        let (primary, random) = (outcome.run_id(0), outcome.run_id(1));
        assert_eq!(outcome.doc["runs"][0]["scheme"], "grid");
        assert_eq!(outcome.doc["runs"][1]["scheme"], "random");
        assert_eq!(outcome.doc["runs"][1]["primary_run_id"], primary.as_str());
        // 36 units, 3 folds, one pooled score; 9 blocks of 200 m over the 600 m
        // lattice (hand count, see create_units), for the grid run only.
        assert_eq!(
            result_counts(&stores, store, &primary),
            "36|36|36|3|1|9",
            "{store:?}"
        );
        assert_eq!(
            result_counts(&stores, store, &random),
            "36|36|36|3|1|0",
            "{store:?}"
        );
        assert_eq!(
            stores.query(
                store,
                "SELECT status, scheme, CASE WHEN primary_run_id IS NULL THEN 'primary' ELSE 'comparison' END,
                        units_read, units_used, repeats, folds FROM runs"
            ),
            [
                ["succeeded", "grid", "primary", "36", "36", "1", "3"],
                ["succeeded", "random", "comparison", "36", "36", "1", "3"]
            ],
            "{store:?}"
        );
        assert_eq!(
            stores.query(
                store,
                &format!("SELECT scheme FROM runs WHERE primary_run_id = '{primary}'")
            ),
            [["random"]],
            "{store:?}: the comparison run names its primary"
        );
        assert!(
            outcome.doc["comparison"]["understated_by"].is_number(),
            "{store:?}: the summary compares spatial and random folds"
        );
    }

    // PostGIS as the reference for the PostGIS results.
    let pg = &stores.pg;
    let primary = both.pg.run_id(0);
    for run in [primary.clone(), both.pg.run_id(1)] {
        check_scores(pg, &run, 36);
        for (table, observed) in [
            ("fold_members", "true"),
            ("predictions", "t.observed = s.target"),
            ("unit_errors", "t.observed = s.target"),
        ] {
            assert_eq!(
                pg.query(&format!(
                    "SELECT count(*) FROM {{s}}.units s JOIN {{r}}.{table} t ON s.id::text = t.unit_id
                     WHERE t.run_id = '{run}' AND {observed}"
                )),
                "36",
                "{table} joins to the source with the cast on the results side"
            );
        }
    }
    pg.bind("p", &primary);
    pg.check(
        "blocks are 200 m squares in SRID 32631 holding all units",
        "SELECT bool_and(ST_SRID(geom) = 32631 AND srid = 32631 AND kind = 'block'
                    AND abs(ST_Area(geom) - 40000) < 1e-6 AND GeometryType(geom) = 'MULTIPOLYGON')
                AND sum(units) = 36 FROM {r}.fold_regions WHERE run_id = '{p}'",
    );
    pg.check(
        "region labels name the block's column and row",
        "SELECT bool_and(label = format('block %s,%s', floor(ST_XMin(geom) / 200)::bigint,
                                                      floor(ST_YMin(geom) / 200)::bigint))
         FROM {r}.fold_regions WHERE run_id = '{p}'",
    );
    // Every unit but the two-part unit 2, whose centroid lies between its parts.
    assert_eq!(
        check_units_sit_in_their_blocks(pg, "units", &primary, "s.geom"),
        35
    );
    pg.check(
        "fold_regions has a GiST index on geom",
        "SELECT count(*) = 1 FROM pg_indexes WHERE schemaname = '{r}' AND tablename = 'fold_regions'
         AND indexdef ILIKE '%USING gist (geom)%'",
    );
    check_qgis_layer(
        &pg.results,
        "units",
        ("fid", "integer"),
        "MULTIPOLYGON",
        32631,
        36,
    );
    check_qgis_layer(
        &pg.results,
        "units_regions",
        ("region_id", "integer"),
        "MULTIPOLYGON",
        32631,
        9,
    );
    pg.check(
        "the job view shows the primary run and each unit's fold of repetition 1",
        "SELECT count(*) = 36 AND bool_and(v.run_id = '{p}' AND v.fold = m.fold)
         FROM {r}.units v JOIN {s}.units s ON s.id = v.unit_id
         JOIN {r}.fold_members m ON m.run_id = v.run_id AND m.unit_id = v.unit_id::text AND m.repetition = 1",
    );

    // GDAL as the reference for the GeoPackage.
    let file = &stores.results_gpkg;
    let layers = gdal_layers(file);
    // The layer copies the source layer's declared type: GDAL wrote the
    // untyped PostGIS column (polygons and one multipolygon) as GEOMETRY.
    assert_eq!(layers["units"], layer("Unknown (any)", 36, Some(32631)));
    assert_eq!(
        layers["units_regions"],
        layer("Multi Polygon", 9, Some(32631))
    );
    assert_eq!(layers["fold_regions"], layer("Multi Polygon", 9, None));
    gdal_validates(file);
    crate::common::gdal::sqlite_checks(file);
    assert_eq!(rtree_check(file, "units"), ("ok".to_string(), 36));
    assert_eq!(rtree_check(file, "units_regions"), ("ok".to_string(), 9));
    // GDAL's spatial filter uses the R-tree: a window over the south-west
    // 200 m block (its edges inside the neighbouring cells) finds 9 squares
    // of the lattice (3 × 3 cells touch it) and the one block.
    let window = [500_050.0, 5_000_050.0, 500_250.0, 5_000_250.0];
    assert_eq!(gdal_window_count(file, "units", window), 9);
    assert_eq!(
        gdal_window_count(
            file,
            "units_regions",
            [500_050.0, 5_000_050.0, 500_150.0, 5_000_150.0]
        ),
        1
    );
    // The source file is only read.
    gdal_validates(&stores.source_gpkg);
}

#[test]
fn grid_alone_gives_the_same_results_and_layers_on_both_stores() {
    let stores = Stores::from_postgis("both_grid_alone", "units", |s| {
        create_units(s, "units", IdType::Integer)
    });
    let both = stores.run_ok(GRID);
    stores.assert_same(&both);
    for store in BOTH {
        let outcome = both.get(store);
        assert_eq!(outcome.doc["runs"].as_array().unwrap().len(), 1);
        assert!(outcome.doc["comparison"].is_null(), "{store:?}");
        let layers: Vec<&str> = outcome.doc["results"]["layers"]
            .as_array()
            .unwrap()
            .iter()
            .map(|layer| layer["key"].as_str().unwrap())
            .collect();
        assert_eq!(layers, ["fid", "region_id"], "{store:?}");
    }
    // A second identical run appends: two runs, the layers show the newer one.
    let again = stores.run_ok(GRID);
    stores.assert_same(&again);
    for store in BOTH {
        assert_eq!(
            stores.query(
                store,
                "SELECT count(*), count(DISTINCT input_fingerprint) FROM runs"
            ),
            [["2", "1"]],
            "{store:?}"
        );
    }
    check_scores(&stores.pg, &again.pg.run_id(0), 36);
    gdal_validates(&stores.results_gpkg);
}

#[test]
fn repeats_give_the_same_results_on_both_stores_and_rmse_over_repeats() {
    let stores = Stores::from_postgis("both_repeats", "units", |s| {
        create_units(s, "units", IdType::Integer)
    });
    let both = stores.run_ok(&with(GRID, &["--repeats", "3"]));
    stores.assert_same(&both);
    for store in BOTH {
        let run = both.get(store).run_id(0);
        assert_eq!(
            result_counts(&stores, store, &run),
            "108|108|36|9|1|27",
            "{store:?}"
        );
        assert_eq!(
            stores.query(
                store,
                &format!("SELECT count(*), min(repetitions), max(repetitions) FROM unit_summaries WHERE run_id = '{run}'")
            ),
            [["36", "3", "3"]],
            "{store:?}: runs with several repetitions store per-unit summaries"
        );
        let folds = &both.get(store).doc["runs"][0]["folds"];
        let numbered: Vec<(u64, u64)> = folds
            .as_array()
            .unwrap()
            .iter()
            .map(|f| {
                (
                    f["repetition"].as_u64().unwrap(),
                    f["fold"].as_u64().unwrap(),
                )
            })
            .collect();
        let expected: Vec<(u64, u64)> =
            (1..=3).flat_map(|r| (1..=3).map(move |f| (r, f))).collect();
        assert_eq!(
            numbered, expected,
            "{store:?}: --json numbers repetitions and folds from 1"
        );
        assert!(both.get(store).doc["runs"][0]["repeat_spread"]["rmse"]["sd"].is_number());
    }
    let pg = &stores.pg;
    let run = both.pg.run_id(0);
    pg.bind("p", &run);
    pg.check(
        "the 3 repetitions split the units into 3 different partitions (fold labels ignored)",
        "SELECT count(DISTINCT partition) = 3 FROM (
             SELECT repetition, string_agg(members, ';' ORDER BY members) AS partition FROM (
                 SELECT repetition, fold, string_agg(unit_id::text, ',' ORDER BY unit_id) AS members
                 FROM {r}.fold_members WHERE run_id = '{p}' GROUP BY repetition, fold) f
             GROUP BY repetition) q",
    );
    // Per-unit RMSE over repeats = sqrt(mean over the 3 predictions of
    // (observed - predicted)²); the unit's fold is its fold in repetition 1
    // (common practice, no source).
    pg.check(
        "unit_errors.rmse is the RMSE over the 3 predictions of the unit",
        "SELECT count(*) = 36 FROM {r}.unit_errors e JOIN (
             SELECT unit_id, count(*) AS n, sqrt(avg((observed - predicted)^2)) AS rmse,
                    avg(abs(observed - predicted)) AS mae, avg(predicted) AS mean_predicted,
                    min(fold) FILTER (WHERE repetition = 1) AS fold1
             FROM {r}.predictions WHERE run_id = '{p}' GROUP BY unit_id) p USING (unit_id)
         WHERE e.run_id = '{p}' AND p.n = 3 AND e.repetitions = 3 AND e.fold = p.fold1
           AND abs(e.rmse - p.rmse) <= 1e-12 * greatest(p.rmse, 1e-12)
           AND abs(e.abs_error - p.mae) <= 1e-12 * greatest(p.mae, 1e-12)
           AND abs(e.predicted - p.mean_predicted) <= 1e-12 * abs(p.mean_predicted)",
    );
    check_scores(pg, &run, 36);
    // Every unit but the two-part unit 2, whose centroid lies between its parts.
    assert_eq!(
        check_units_sit_in_their_blocks(pg, "units", &run, "s.geom"),
        35
    );
    gdal_validates(&stores.results_gpkg);
}

#[test]
fn text_ids_from_geojson_give_the_same_results_on_both_stores() {
    let stores = Stores::from_geojson("both_text", "lattice", "EPSG:32631", |path| {
        write_lattice_geojson(path, 8, 6)
    });
    let args = [
        &["--id", "code"],
        LATTICE_COLUMNS,
        &["--block-size", "2000", "--folds", "4", "--also-random"],
    ]
    .concat();
    let both = stores.run_ok(&args);
    stores.assert_same(&both);
    for store in BOTH {
        let doc = &both.get(store).doc;
        assert_eq!(doc["source"]["id_kind"], "text", "{store:?}");
        assert_eq!(doc["units_read"], 48);
        assert_eq!(doc["units_used"], 47, "unit 11 has no x2");
        assert_eq!(
            stores.query(store, "SELECT min(unit_id), max(unit_id) FROM fold_members"),
            [["U-001", "U-048"]]
        );
    }
    // The PostGIS job view carries the source's text id, keyed by an integer rank.
    let pg = &stores.pg;
    check_qgis_layer(
        &pg.results,
        "lattice",
        ("fid", "integer"),
        "POLYGON",
        32631,
        47,
    );
    assert_eq!(
        pg.query(
            "SELECT format_type(atttypid, atttypmod) FROM pg_attribute
             WHERE attrelid = '{r}.lattice'::regclass AND attname = 'unit_id'"
        ),
        "character varying"
    );
    pg.check(
        "the job view joins the source by its own text id",
        "SELECT count(*) = 47 FROM {r}.lattice v JOIN {s}.lattice s ON s.code = v.unit_id",
    );
    // The GeoPackage layer, read by GDAL with its spatial filter.
    let file = &stores.results_gpkg;
    let layers = gdal_layers(file);
    assert_eq!(layers["lattice"], layer("Polygon", 47, Some(32631)));
    gdal_validates(file);
    // A window over cells i, j = 0..2 of the lattice (its edges inside cells):
    // 9 squares, of which unit 11 (i = 2, j = 1) was skipped for its missing x2.
    let window = [600_500.0, 20_500.0, 602_500.0, 22_500.0];
    assert_eq!(gdal_window_count(&stores.source_gpkg, "lattice", window), 9);
    assert_eq!(gdal_window_count(file, "lattice", window), 8);
    assert_eq!(rtree_check(file, "lattice"), ("ok".to_string(), 47));
}

#[test]
fn bad_rows_are_skipped_by_reason_alike_on_both_stores() {
    let stores = Stores::from_postgis("both_skips", "units", |s| {
        create_units(s, "units", IdType::Integer);
        add_bad_rows(s, "units");
    });
    let both = stores.run_ok(GRID);
    stores.assert_same(&both);
    // By construction (add_bad_rows): 101 and 102 miss the target, 103 and
    // 107 feature a, 104 feature b, 105 has no geometry, 106 an empty one.
    let expected = serde_json::json!([
        {"reason": "no geometry", "count": 1, "ids": ["105"]},
        {"reason": "empty geometry", "count": 1, "ids": ["106"]},
        {"reason": "missing target", "count": 2, "ids": ["101", "102"]},
        {"reason": "missing feature a", "count": 2, "ids": ["103", "107"]},
        {"reason": "missing feature b", "count": 1, "ids": ["104"]},
    ]);
    for store in BOTH {
        let doc = &both.get(store).doc;
        assert_eq!(doc["skipped"], expected, "{store:?}");
        assert_eq!(doc["units_skipped"], 7);
        assert_eq!(doc["units_read"], 43);
        assert_eq!(doc["units_used"], 36);
        assert_eq!(
            stores.query(store, "SELECT count(*) FROM fold_members WHERE unit_id IN ('101','102','103','104','105','106','107')"),
            [["0"]]
        );
        let counts = &stores.query(store, "SELECT units_skipped FROM runs")[0][0];
        let counts: serde_json::Value = serde_json::from_str(counts).unwrap();
        assert_eq!(
            counts,
            serde_json::json!({
                "no geometry": 1, "empty geometry": 1, "missing target": 2,
                "missing feature a": 2, "missing feature b": 1
            }),
            "{store:?}: runs.units_skipped"
        );
    }
    // The text summary counts them by reason and lists their ids.
    for store in BOTH {
        assert_contains(
            &stores.text(store, GRID),
            &[
                "skipped 7 rows: 1 no geometry, 1 empty geometry, 2 missing target, 2 missing feature a, 1 missing feature b",
                "missing target: ids 101, 102",
            ],
        );
    }
    // Under --strict every bad row is named and nothing is recorded.
    let runs_before: Vec<_> = BOTH
        .iter()
        .map(|store| stores.query(*store, "SELECT count(*) FROM runs"))
        .collect();
    let strict = stores.run(&with(GRID, &["--strict"]));
    for store in BOTH {
        let outcome = strict.get(store);
        assert_eq!(outcome.code(), 65, "{store:?}: {}", outcome.stderr());
        let message = outcome.stderr();
        for id in 101..=107 {
            assert!(
                message.contains(&format!("(row id={id})")),
                "{store:?}: row {id} named: {message}"
            );
        }
        assert_contains(
            &message,
            &["units.target (row id=101)", "units.a (row id=103)"],
        );
        assert_eq!(outcome.doc["status"], "failed");
        assert_eq!(outcome.doc["exit_code"], 65);
    }
    let runs_after: Vec<_> = BOTH
        .iter()
        .map(|store| stores.query(*store, "SELECT count(*) FROM runs"))
        .collect();
    assert_eq!(
        runs_before, runs_after,
        "bad input under --strict records no run"
    );
    assert!(stderr(&strict.pg.output).contains(&stores.pg.fill("{s}.units.target (row id=101)")));
    assert!(stderr(&strict.gpkg.output).contains("source.gpkg:units.target (row id=101)"));
}

#[test]
fn an_exclusion_radius_gives_the_same_exclusions_on_both_stores_as_postgis_finds() {
    // Squares only (their centroid is geofold's representative point), so
    // PostGIS can say which units lie within the radius of a fold's test units.
    let stores = Stores::from_postgis("both_buffer", "units", |s| create_squares(s, "units"));
    let both = stores.run_ok(&with(
        GRID,
        &["--exclusion-radius", "150", "--repeats", "2"],
    ));
    stores.assert_same(&both);
    let pg = &stores.pg;
    let run = both.pg.run_id(0);
    pg.bind("p", &run);
    // Expected exclusions: the units of other folds whose centroid is within
    // 150 m (ST_DWithin, inclusive) of a test unit's centroid (the rule of
    // Le Rest et al. 2014, as src/core/folds/mod.rs states it).
    let expected = "SELECT DISTINCT t.repetition, t.fold, o.unit_id
         FROM {r}.fold_members t JOIN {s}.units ts ON ts.id::text = t.unit_id
         JOIN {r}.fold_members o ON o.run_id = t.run_id AND o.repetition = t.repetition AND o.fold <> t.fold
         JOIN {s}.units os ON os.id::text = o.unit_id
         WHERE t.run_id = '{p}' AND ST_DWithin(ST_Centroid(ts.geom), ST_Centroid(os.geom), 150)";
    let stored = "SELECT repetition, fold, unit_id FROM {r}.fold_exclusions WHERE run_id = '{p}'";
    pg.check(
        "fold_exclusions are exactly the other folds' units within the radius",
        &format!(
            "SELECT count(*) > 0 AND NOT EXISTS (({expected}) EXCEPT ({stored}))
                 AND NOT EXISTS (({stored}) EXCEPT ({expected}))
             FROM ({stored}) x"
        ),
    );
    check_scores(pg, &run, 36);
    for store in BOTH {
        let doc = &both.get(store).doc;
        assert_eq!(doc["exclusion_radius"], 150.0);
        let excluded: u64 = doc["runs"][0]["folds"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| f["n_excluded"].as_u64().unwrap())
            .sum();
        assert!(excluded > 0, "{store:?}");
    }
}

#[test]
fn the_harness_tells_different_results_apart() {
    // The comparison must be able to fail: the same case with another seed on
    // one store gives other folds, and assert_same must say so.
    let stores = Stores::from_postgis("both_differ", "units", |s| {
        create_units(s, "units", IdType::Integer)
    });
    let both = crate::common::stores::Both {
        pg: stores.run_one(Store::Postgis, &with(GRID, &["--seed", "1"])),
        gpkg: stores.run_one(Store::Gpkg, &with(GRID, &["--seed", "2"])),
    };
    assert_eq!((both.pg.code(), both.gpkg.code()), (0, 0));
    let compared =
        std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| stores.assert_same(&both)));
    assert!(
        compared.is_err(),
        "different seeds passed as the same results"
    );
}

#[test]
fn the_demo_scenario_copied_by_gdal_gives_the_same_results_on_both_stores() {
    // The invented demo scenario (multipolygons, rows with a missing feature),
    // loaded into PostGIS by `geofold demo --db`, copied into this case's own
    // schema, and from there by GDAL into the GeoPackage. (`geofold demo --db`
    // uses the fixed schemas demo and geofold_demo; only this test of this
    // file loads them.)
    let workdir = crate::common::Workdir::new();
    let loaded = workdir.run(&["demo", "--db", &crate::common::db_uri()]);
    assert_eq!(code(&loaded), 0, "{}", stderr(&loaded));
    let stores = Stores::from_postgis("both_demo", "units", |s| {
        s.script(
            "CREATE TABLE {s}.units AS SELECT * FROM demo.subcatchments;
             ALTER TABLE {s}.units ADD PRIMARY KEY (id);",
        )
    });
    let args = [
        DEMO_COLUMNS,
        &["--block-size", "4000", "--also-random", "--repeats", "2"],
    ]
    .concat();
    let both = stores.run_ok(&args);
    stores.assert_same(&both);
    for store in BOTH {
        let doc = &both.get(store).doc;
        assert!(
            doc["units_skipped"].as_u64().unwrap() > 0,
            "{store:?}: the scenario has gaps"
        );
        assert_eq!(
            doc["source"]["id_column"], "id",
            "{store:?}: GDAL keeps the key name"
        );
    }
    assert_eq!(
        both.pg.doc["source"]["srs_name"], both.gpkg.doc["source"]["srs_name"],
        "the same CRS"
    );
    check_scores(
        &stores.pg,
        &both.pg.run_id(0),
        both.pg.doc["units_used"].as_u64().unwrap() as usize,
    );
    gdal_validates(&stores.results_gpkg);
}

/// Issue 7 ("any source in one results schema"): jobs whose sources have text
/// and integer ids in two SRIDs share one results schema, one results file,
/// and the demo's file, each with its own typed layers. References: PostGIS's
/// `geometry_columns` and the catalog for the view types, GDAL for the files.
#[test]
fn jobs_with_text_and_integer_ids_in_two_srids_share_one_results_store_and_the_demo_file() {
    let stores = Stores::from_geojson("both_shared", "lattice", "EPSG:32631", |path| {
        write_lattice_geojson(path, 8, 6)
    });
    // The second source: integer ids, in Web Mercator (EPSG:3857), made by
    // PostGIS and copied into the source GeoPackage by GDAL.
    stores.pg.script(
        "CREATE TABLE {s}.lattice_b AS
           SELECT ogc_fid AS id, y, x1, x2, ST_Transform(geom, 3857)::geometry(Polygon, 3857) AS geom
           FROM {s}.lattice;
         ALTER TABLE {s}.lattice_b ADD PRIMARY KEY (id)",
    );
    crate::common::gdal::ogr2ogr(
        stores.workdir.root(),
        &[
            "-update",
            "source.gpkg",
            &format!("PG:{}", crate::common::db_uri()),
            &stores.pg.fill("{s}.lattice_b"),
            "-nln",
            "lattice_b",
        ],
    );
    let text_job = [
        &["--id", "code"],
        LATTICE_COLUMNS,
        &["--block-size", "2000"],
    ]
    .concat();
    let integer_job = [
        &["--id", "id", "--job", "lattice_b"],
        LATTICE_COLUMNS,
        &["--block-size", "2000"],
    ]
    .concat();
    for store in BOTH {
        for (table, args) in [("lattice", &text_job), ("lattice_b", &integer_job)] {
            let output = stores.workdir.run(&stores.args_on(store, table, args));
            assert_eq!(code(&output), 0, "{store:?} {table}: {}", stderr(&output));
        }
    }
    let pg = &stores.pg;
    check_qgis_layer(
        &pg.results,
        "lattice",
        ("fid", "integer"),
        "POLYGON",
        32631,
        47,
    );
    check_qgis_layer(
        &pg.results,
        "lattice_b",
        ("fid", "integer"),
        "POLYGON",
        3857,
        47,
    );
    assert_eq!(
        pg.query(
            "SELECT string_agg(c.relname || ':' || format_type(a.atttypid, a.atttypmod), ' ' ORDER BY c.relname)
             FROM pg_attribute a JOIN pg_class c ON c.oid = a.attrelid
             JOIN pg_namespace n ON n.oid = c.relnamespace
             WHERE n.nspname = '{r}' AND c.relname IN ('lattice', 'lattice_b') AND a.attname = 'unit_id'"
        ),
        "lattice:character varying lattice_b:integer",
        "each job view carries its source's id type"
    );
    assert_eq!(
        pg.query("SELECT count(DISTINCT job) FROM {r}.runs WHERE status = 'succeeded'"),
        "2"
    );
    let layers = gdal_layers(&stores.results_gpkg);
    assert_eq!(layers["lattice"], layer("Polygon", 47, Some(32631)));
    assert_eq!(layers["lattice_b"], layer("Polygon", 47, Some(3857)));
    gdal_validates(&stores.results_gpkg);

    // The demo's file (integer ids, EPSG:32631) takes both jobs too.
    let demo = stores
        .workdir
        .run(&["demo", "--out", "demo.gpkg", "--json"]);
    assert_eq!(code(&demo), 0, "{}", stderr(&demo));
    for (table, args) in [("lattice", &text_job), ("lattice_b", &integer_job)] {
        let mut all: Vec<String> = ["run", "--gpkg", "source.gpkg", "--layer", table]
            .iter()
            .map(|s| s.to_string())
            .collect();
        all.extend(["--results-gpkg".to_string(), "demo.gpkg".to_string()]);
        all.extend(args.iter().map(|s| s.to_string()));
        let output = stores.workdir.run(&all);
        assert_eq!(code(&output), 0, "demo file, {table}: {}", stderr(&output));
    }
    let demo_file = stores.workdir.path("demo.gpkg");
    let layers = gdal_layers(&demo_file);
    assert_eq!(layers["demo_nitrate"].epsg, Some(32631));
    assert_eq!(layers["lattice"], layer("Polygon", 47, Some(32631)));
    assert_eq!(layers["lattice_b"], layer("Polygon", 47, Some(3857)));
    assert_eq!(layers["lattice_b_regions"].epsg, Some(3857));
    gdal_validates(&demo_file);
}
