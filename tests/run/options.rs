//! Options are checked before anything is read (issue 6, items 4, 10 and
//! 11): a bad value exits 64 with the option named, on both stores, with no
//! run recorded and no results schema or file made. To show that the check
//! comes before the source is even opened, each bad value is also given with
//! a source that does not exist: it must still be 64, not 66.

use crate::common::fixtures::{create_units, IdType, UNITS_COLUMNS};
use crate::common::gdal::{gdal_validates, sha256};
use crate::common::pg::uri_with;
use crate::common::stores::{Store, Stores, BOTH};
use crate::common::{assert_contains, code, fails, stderr};

/// The columns of [`create_units`] tables, without the scheme options.
const COLUMNS: &[&str] = UNITS_COLUMNS;

fn units(label: &str) -> Stores {
    Stores::from_postgis(label, "units", |s| {
        create_units(s, "units", IdType::Integer)
    })
}

/// Asserts that `args` exits 64 on both stores naming `says`, records
/// nothing, makes no results schema or file and leaves the source file as it
/// was; and that it is 64 too when the source does not exist.
fn refused_before_reading(stores: &Stores, args: &[&str], says: &[&str]) {
    let source_hash = sha256(&stores.source_gpkg);
    for store in BOTH {
        let output = stores.workdir.run(&stores.args(store, args));
        let message = fails(&output, 64);
        assert_contains(&message, says);
        assert_eq!(stores.runs_recorded(store), 0, "{store:?} {args:?}");
        let missing = stores
            .workdir
            .run(&stores.args_on(store, "no_such_table", args));
        assert_eq!(
            code(&missing),
            64,
            "{store:?} {args:?}: checked before the source is opened: {}",
            stderr(&missing)
        );
    }
    assert!(
        !stores.pg.has_result_relation("runs")
            && stores.pg.query("SELECT to_regnamespace('{r}') IS NULL") == "t",
        "no results schema made for {args:?}"
    );
    assert!(
        !stores.results_gpkg.exists(),
        "no results file made for {args:?}"
    );
    assert_eq!(sha256(&stores.source_gpkg), source_hash);
}

fn with<'a>(extra: &[&'a str]) -> Vec<&'a str> {
    [COLUMNS, extra].concat()
}

#[test]
fn huge_or_zero_repeat_and_fold_counts_are_refused_before_anything_is_read() {
    // Issue 6 item 4: --repeats 4294967295 and other huge counts.
    let stores = units("opt_counts");
    let grid = ["--block-size", "200", "--folds", "3"];
    for repeats in ["4294967295", "1001", "0"] {
        refused_before_reading(
            &stores,
            &with(&[&grid[..], &["--repeats", repeats]].concat()),
            &["--repeats"],
        );
    }
    for folds in ["4294967295", "1001", "1", "0"] {
        refused_before_reading(
            &stores,
            &with(&["--block-size", "200", "--folds", folds]),
            &["--folds"],
        );
        refused_before_reading(
            &stores,
            &with(&["--scheme", "random", "--folds", folds]),
            &["--folds"],
        );
    }
    // Beyond u32, or negative: refused by the argument parser, also 64.
    for repeats in ["4294967296", "-1", "1e3"] {
        refused_before_reading(
            &stores,
            &with(&[&grid[..], &["--repeats", repeats]].concat()),
            &["--repeats"],
        );
    }
    // The largest accepted values do run (a control: the bounds are where the help says).
    for store in BOTH {
        let output = stores.run_one(
            store,
            &with(&["--block-size", "200", "--folds", "9", "--repeats", "1000"]),
        );
        assert_eq!(output.code(), 0, "{store:?}: {}", output.stderr());
    }
}

#[test]
fn block_sizes_and_grid_origins_that_are_not_usable_lengths_are_refused_before_reading() {
    // Issue 6 item 10.
    let stores = units("opt_blocks");
    for size in ["0", "-100", "NaN", "inf", "1e300"] {
        refused_before_reading(
            &stores,
            &with(&["--block-size", size, "--folds", "3"]),
            &["--block-size"],
        );
    }
    for origin in ["NaN,0", "0,NaN", "inf,0"] {
        refused_before_reading(
            &stores,
            &with(&["--block-size", "200", "--grid-origin", origin]),
            &["--grid-origin"],
        );
    }
    // Grid options with a scheme that has no grid.
    refused_before_reading(
        &stores,
        &with(&["--scheme", "random", "--block-size", "200"]),
        &["--block-size"],
    );
    refused_before_reading(
        &stores,
        &with(&["--scheme", "random", "--grid-origin", "0,0"]),
        &["--grid-origin"],
    );
    refused_before_reading(&stores, &with(&["--folds", "3"]), &["--block-size"]);
    refused_before_reading(
        &stores,
        &with(&["--scheme", "hexagons", "--folds", "3"]),
        &["hexagons"],
    );
    for radius in ["0", "-1", "NaN", "inf", "1e300"] {
        refused_before_reading(
            &stores,
            &with(&["--block-size", "200", "--exclusion-radius", radius]),
            &["--exclusion-radius"],
        );
    }
}

#[test]
fn grid_origins_that_are_not_two_numbers_are_refused_naming_the_option() {
    let stores = units("opt_origin_text");
    for origin in ["1,2,3", "x,y", "5"] {
        refused_before_reading(
            &stores,
            &with(&["--block-size", "200", "--grid-origin", origin]),
            &["--grid-origin"],
        );
    }
}

#[test]
fn a_negative_grid_origin_is_a_value_and_moves_the_blocks() {
    // Issue 6 item 10: `--grid-origin -5000,0` is read as a value, not an option.
    let stores = units("opt_origin");
    let both = stores.run_ok(&with(&[
        "--block-size",
        "200",
        "--folds",
        "3",
        "--grid-origin",
        "-5000,0",
    ]));
    stores.assert_same(&both);
    let pg = &stores.pg;
    pg.bind("p", &both.pg.run_id(0));
    // Cells are [x0 + i·s, x0 + (i+1)·s): with x0 = -5000 and s = 200 the
    // lattice's x from 500000 falls in columns (500000 + 5000) / 200 = 2525 onwards.
    pg.check(
        "blocks start at multiples of 200 m from the origin and are labelled by column and row from it",
        "SELECT count(*) > 0 AND bool_and(
                    mod((ST_XMin(geom) + 5000)::numeric, 200) = 0 AND mod(ST_YMin(geom)::numeric, 200) = 0
                    AND label = format('block %s,%s', ((ST_XMin(geom) + 5000) / 200)::bigint,
                                       (ST_YMin(geom) / 200)::bigint))
                AND min(ST_XMin(geom)) = 500000 AND bool_or(label LIKE 'block 2525,%')
         FROM {r}.fold_regions WHERE run_id = '{p}'",
    );
    assert_eq!(
        both.pg.doc["runs"][0]["parameters"]["scheme"]["grid-origin"],
        serde_json::json!([-5000.0, 0.0])
    );
    // With an origin 100 m off, the same lattice falls in other blocks.
    let shifted = stores.run_ok(&with(&[
        "--block-size",
        "200",
        "--folds",
        "3",
        "--grid-origin",
        "-4900,0",
    ]));
    pg.bind("q", &shifted.pg.run_id(0));
    pg.check(
        "shifted blocks start 100 m further east",
        "SELECT min(ST_XMin(geom)) = 499900 FROM {r}.fold_regions WHERE run_id = '{q}'",
    );
    gdal_validates(&stores.results_gpkg);
}

#[test]
fn names_over_63_bytes_are_refused_before_reading() {
    // Issue 6 item 10: PostgreSQL names end at 63 bytes (NAMEDATALEN - 1); a
    // job's layers add `_regions`, so a job name ends at 55.
    let stores = units("opt_names");
    let grid = with(&["--block-size", "200", "--folds", "3"]);
    let long_job = "j".repeat(56);
    refused_before_reading(
        &stores,
        &[&grid[..], &["--job", &long_job]].concat(),
        &["--job"],
    );
    let accented = "é".repeat(28); // 56 bytes in 28 characters
    refused_before_reading(
        &stores,
        &[&grid[..], &["--job", &accented]].concat(),
        &["--job"],
    );
    // A job of 55 bytes runs, and its regions layer is named in full.
    let job = format!("j{}", "x".repeat(54));
    for store in BOTH {
        let output = stores.run_one(store, &[&grid[..], &["--job", &job]].concat());
        assert_eq!(output.code(), 0, "{store:?}: {}", output.stderr());
        let layers: Vec<&str> = output.doc["results"]["layers"]
            .as_array()
            .unwrap()
            .iter()
            .map(|layer| layer["name"].as_str().unwrap())
            .collect();
        assert!(layers[1].ends_with(&format!("{job}_regions")), "{layers:?}");
    }
    assert!(stores.pg.has_result_relation(&format!("{job}_regions")));

    // A results schema of 64 bytes (PostGIS only).
    let schema = "s".repeat(64);
    let output = stores.workdir.run(&stores.args(
        Store::Postgis,
        &[&grid[..], &["--results-schema", &schema]].concat(),
    ));
    assert_contains(&fails(&output, 64), &["--results-schema", "63 bytes"]);
    assert_eq!(
        crate::common::psql(&format!(
            "SELECT count(*) FROM pg_namespace WHERE nspname LIKE '{}%'",
            "s".repeat(63)
        )),
        "0"
    );
}

#[test]
fn a_target_among_the_features_and_empty_or_repeated_features_are_refused_before_reading() {
    // Issue 6 item 10.
    let stores = units("opt_features");
    let grid = ["--block-size", "200", "--folds", "3"];
    let cases: &[(&str, &[&str])] = &[
        ("a,target", &["--target", "--features"]),
        ("a,TARGET", &["--target"]),
        ("a,,b", &["empty entry"]),
        ("a,", &["empty entry"]),
        (",a", &["empty entry"]),
        ("a, ,b", &["empty entry"]),
        ("a,a", &["twice"]),
        ("a, A", &["twice"]),
    ];
    for (features, says) in cases {
        let args = [
            &["--id", "id", "--target", "target", "--features", features][..],
            &grid[..],
        ]
        .concat();
        refused_before_reading(&stores, &args, says);
    }
    let args = [
        &["--id", "id", "--target", " ", "--features", "a"][..],
        &grid[..],
    ]
    .concat();
    refused_before_reading(&stores, &args, &["--target"]);
}

#[test]
fn exit_70_is_kept_for_bugs() {
    // Issue 6 item 11: each of these is the user's to fix, with its own code.
    let stores = units("opt_not70");
    let grid = with(&["--block-size", "200", "--folds", "3"]);
    // A database that does not exist: the source is not found (66).
    let uri = uri_with(None, &[]);
    let missing_db = format!(
        "{}/geofold_no_such_database",
        uri.rsplit_once('/').unwrap().0
    );
    let output = stores.workdir.run(
        &[
            &[
                "run".to_string(),
                "--db".to_string(),
                missing_db,
                "--table".to_string(),
                "x.units".to_string(),
            ][..],
            &grid.iter().map(|s| s.to_string()).collect::<Vec<_>>()[..],
        ]
        .concat(),
    );
    let message = fails(&output, 66);
    assert_contains(&message, &["geofold_no_such_database"]);
    // A results schema PostgreSQL reserves (64).
    let output = stores.workdir.run(&stores.args(
        Store::Postgis,
        &[&grid[..], &["--results-schema", "pg_x"]].concat(),
    ));
    assert_contains(&fails(&output, 64), &["pg_"]);
    // Jobs named like system tables or results tables (64) on both stores.
    for job in [
        "gpkg_contents",
        "gpkg_spatial_ref_sys",
        "rtree_units_geom",
        "sqlite_master",
        "runs",
        "fold_scores",
        "schema_version",
    ] {
        refused_before_reading(
            &stores,
            &[&grid[..], &["--job", job]].concat(),
            &["--job", job],
        );
    }
    for job in ["Units", "1units", "units-cv", "units cv"] {
        refused_before_reading(&stores, &[&grid[..], &["--job", job]].concat(), &["--job"]);
    }
}
