//! Bad input for the schemes (issue item 9): each refused with its exit code,
//! a message saying what to change, and nothing written to either store.

use crate::common::{code, psql};
use crate::support::*;

/// Whether a store got nothing: no results schema, or no results file.
fn nothing_written(case: &Case, store: Store) -> bool {
    match store {
        Store::Postgis => {
            case.query("SELECT count(*) FROM pg_namespace WHERE nspname = '{r}'") == "0"
        }
        Store::Gpkg => !case.results_gpkg().exists(),
    }
}

#[test]
fn bad_input_is_refused_with_its_exit_code_and_nothing_written() {
    let case = Case::new("bad_input");
    create_units(&case);
    case.script(
        "CREATE TABLE {s}.targets_3857 AS SELECT id, ST_Transform(geom, 3857)::geometry(Point, 3857) AS geom
             FROM {s}.targets;
         ALTER TABLE {s}.targets_3857 ADD PRIMARY KEY (id);
         CREATE TABLE {s}.far AS SELECT g AS id, ST_SetSRID(ST_MakePoint(600000 + 50 * g, 5100000), 32631)
             ::geometry(Point, 32631) AS geom FROM generate_series(1, 10) g;",
    );
    case.copy_to_gpkg("units");
    case.copy_to_gpkg("targets_3857");
    // (store, options, exit code, words the message must hold); exit 0 marks
    // the fix of the case before it, which must then run.
    let cases: &[(Store, &str, i32, &str)] = &[
        (
            Store::Postgis,
            "--scheme grid --block-size 5000",
            65,
            "larger than the study area",
        ),
        (
            Store::Gpkg,
            "--scheme grid --block-size 5000",
            65,
            "larger than the study area",
        ),
        (
            Store::Postgis,
            "--scheme grid --block-size 800 --folds 9",
            65,
            "fewer than the 9 folds",
        ),
        (
            Store::Postgis,
            "--scheme grid --block-size 800 --folds 2 --deal systematic --block-shape hex",
            64,
            "at least 3 folds",
        ),
        (
            Store::Postgis,
            "--scheme grid --block-size 800 --folds 3 --deal systematic --block-shape hex",
            0,
            "",
        ),
        (
            Store::Postgis,
            "--scheme kmeans --folds 5 --clusters 400",
            65,
            "300 units cannot make 400 clusters",
        ),
        (
            Store::Postgis,
            "--scheme kmeans --folds 5 --clusters 3",
            64,
            "--clusters",
        ),
        (
            Store::Postgis,
            "--scheme group --group-column district --folds 9",
            65,
            "--folds 7",
        ),
        (
            Store::Gpkg,
            "--scheme group --group-column district --folds 9",
            65,
            "--folds 7",
        ),
        (
            Store::Postgis,
            "--scheme group --folds 3",
            64,
            "--group-column",
        ),
        (
            Store::Postgis,
            "--scheme group --group-column a",
            65,
            "integer or text",
        ),
        (
            Store::Gpkg,
            "--scheme group --group-column a",
            65,
            "INTEGER or TEXT",
        ),
        (
            Store::Postgis,
            "--scheme loo --exclusion-radius 100000",
            65,
            "smaller --exclusion-radius",
        ),
        (
            Store::Gpkg,
            "--scheme loo --exclusion-radius 100000",
            65,
            "smaller --exclusion-radius",
        ),
        (
            Store::Postgis,
            "--scheme grid --block-size 400 --exclusion-radius 3000",
            65,
            "smaller --exclusion-radius",
        ),
        // Prediction locations 100 km away: matching them would leave one
        // training unit, fewer than the 3 that OLS with two features needs.
        (
            Store::Postgis,
            "--scheme nndm --prediction-table {s}.far --min-training-share 0",
            65,
            "--min-training-share",
        ),
        (Store::Postgis, "--scheme nndm", 64, "--prediction-table"),
        (
            Store::Postgis,
            "--scheme knndm --prediction-table {s}.missing",
            66,
            "missing",
        ),
        (
            Store::Gpkg,
            "--scheme knndm --prediction-layer missing",
            66,
            "missing",
        ),
        (
            Store::Postgis,
            "--scheme knndm --prediction-table {s}.targets_3857",
            65,
            "--distance-srid",
        ),
        (
            Store::Postgis,
            "--scheme knndm --prediction-table {s}.targets_3857 --distance-srid 32631",
            0,
            "",
        ),
        (
            Store::Gpkg,
            "--scheme knndm --prediction-layer targets_3857",
            65,
            "ogr2ogr -t_srs",
        ),
        (
            Store::Postgis,
            "--scheme knndm --prediction-layer targets",
            64,
            "--prediction-table",
        ),
    ];
    for &(store, options, exit, words) in cases {
        if exit == 0 {
            assert_eq!(
                code(&case.run(store, "units", "y", "a,b", options)),
                0,
                "{options}"
            );
            continue;
        }
        psql(&case.sql("DROP SCHEMA IF EXISTS {r} CASCADE"));
        let _ = std::fs::remove_file(case.results_gpkg());
        let output = case.run(store, "units", "y", "a,b", options);
        let message = String::from_utf8_lossy(&output.stderr);
        assert_eq!(code(&output), exit, "{store:?} {options}: {message}");
        assert!(message.contains(words), "{store:?} {options}: {message}");
        assert!(
            nothing_written(&case, store),
            "{store:?} {options} wrote something"
        );
    }
}
