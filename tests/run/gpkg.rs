//! `run` cases only a GeoPackage has, checked against GDAL (`ogrinfo`,
//! `ogr2ogr`, `validate_gpkg.py`), SQLite's own checks and file hashes:
//! malformed files refused with nothing written, bad rows listed at once,
//! files locked by other programs, runs appended to a file, a failed run,
//! and longitude/latitude layers.
//!
//! The invented layer is [`gdal_lattice_gpkg`]: 48 squares of 1 km in
//! EPSG:32631 on open sea, written by GDAL.

use crate::common::fixtures::{gdal_lattice_gpkg, lattice_args, DEMO_COLUMNS};
use crate::common::gdal::{
    gdal_layers, gdal_sql, gdal_validates, hashes, layer, listing, ogr2ogr, ogrinfo_sql,
    set_geometry, sha256, sqlite_edit,
};
use crate::common::{
    assert_contains, code, fails, json, ok_json, run_id, stderr, Workdir, RUN_TABLES,
};

fn lattice(workdir: &Workdir, file: &str) {
    gdal_lattice_gpkg(workdir.root(), file);
}

/// One malformed input: how to make it, and what geofold must say.
struct BadCase {
    name: &'static str,
    make: fn(&Workdir, &str),
    /// Changes to [`lattice_args`]: (index, new value).
    replace: &'static [(usize, &'static str)],
    /// Arguments added to them.
    extra: &'static [&'static str],
    code: i32,
    says: &'static [&'static str],
}

impl BadCase {
    fn args(&self, file: &str) -> Vec<String> {
        let mut args = lattice_args(file);
        for (index, value) in self.replace {
            args[*index] = value.to_string();
        }
        args.extend(self.extra.iter().map(|arg| arg.to_string()));
        args
    }
}

fn edit(workdir: &Workdir, file: &str, sql: &str) {
    sqlite_edit(&workdir.path(file), sql);
}

#[test]
fn malformed_files_are_refused_naming_file_layer_and_row() {
    let cases = [
        BadCase {
            name: "missing file",
            make: |_, _| {},
            replace: &[],
            extra: &[],
            code: 66,
            says: &["does not exist"],
        },
        BadCase {
            name: "text file",
            make: |workdir, file| std::fs::write(workdir.path(file), "not a database\n").unwrap(),
            replace: &[],
            extra: &[],
            code: 65,
            says: &["not a GeoPackage", "not an SQLite database"],
        },
        BadCase {
            name: "SQLite without GeoPackage tables",
            make: |workdir, file| {
                edit(
                    workdir,
                    file,
                    "CREATE TABLE units (fid INTEGER PRIMARY KEY);",
                )
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &["not a GeoPackage", "gpkg_spatial_ref_sys"],
        },
        BadCase {
            name: "missing layer",
            make: lattice,
            replace: &[(4, "nope")],
            extra: &[],
            code: 66,
            says: &["no layer nope", "units"],
        },
        BadCase {
            name: "missing column",
            make: lattice,
            replace: &[(8, "x1,rain")],
            extra: &[],
            code: 66,
            says: &["column rain", "layer units"],
        },
        BadCase {
            name: "bad magic",
            make: |workdir, file| {
                lattice(workdir, file);
                set_geometry(&workdir.path(file), "units", 7, |mut blob| {
                    blob[0] = b'X';
                    blob
                });
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &[":units.geom (row id=7)", "magic 'GP'"],
        },
        BadCase {
            name: "truncated WKB",
            make: |workdir, file| {
                lattice(workdir, file);
                set_geometry(&workdir.path(file), "units", 9, |mut blob| {
                    blob.truncate(blob.len() - 20);
                    blob
                });
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &[":units.geom (row id=9)", "WKB is truncated"],
        },
        BadCase {
            name: "a row whose geometry carries another SRS id than its layer",
            make: |workdir, file| {
                lattice(workdir, file);
                // GeoPackageBinary header (GeoPackage clause 2.1.3.1.1): the
                // srs_id is the int32 at bytes 4..8, in the byte order of flags bit 0.
                set_geometry(&workdir.path(file), "units", 4, |mut blob| {
                    let srs = 4326i32;
                    let bytes = if blob[3] & 1 == 1 {
                        srs.to_le_bytes()
                    } else {
                        srs.to_be_bytes()
                    };
                    blob[4..8].copy_from_slice(&bytes);
                    blob
                });
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &[":units.geom (row id=4)", "SRS id 4326", "32631"],
        },
        BadCase {
            name: "unknown SRS id",
            make: |workdir, file| {
                lattice(workdir, file);
                edit(
                    workdir,
                    file,
                    "PRAGMA foreign_keys = OFF;
                     UPDATE gpkg_geometry_columns SET srs_id = 999999 WHERE table_name = 'units';",
                );
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &["layer units", "unknown SRS id 999999"],
        },
        BadCase {
            name: "text in a numeric column",
            make: |workdir, file| {
                lattice(workdir, file);
                edit(workdir, file, "UPDATE units SET x1 = 'n/a' WHERE fid = 5;");
            },
            replace: &[],
            extra: &[],
            code: 65,
            says: &[":units.x1 (row id=5)", "TEXT \"n/a\""],
        },
        BadCase {
            name: "a date feature",
            make: |workdir, file| {
                lattice(workdir, file);
                edit(workdir, file, "ALTER TABLE units ADD COLUMN surveyed DATE;");
            },
            replace: &[(8, "x1,surveyed")],
            extra: &[],
            code: 65,
            says: &[
                ":units.surveyed",
                "column has type \"DATE\"; it must be numeric (INTEGER, REAL, DOUBLE…)",
            ],
        },
        BadCase {
            name: "a text target",
            make: |workdir, file| {
                lattice(workdir, file);
                edit(workdir, file, "ALTER TABLE units ADD COLUMN grade TEXT;");
            },
            replace: &[(6, "grade")],
            extra: &[],
            code: 65,
            says: &[
                ":units.grade",
                "column has type \"TEXT\"; it must be numeric",
            ],
        },
        BadCase {
            name: "job that would replace the source layer",
            make: lattice,
            replace: &[],
            extra: &["--job", "units"],
            code: 73,
            says: &["would replace the source layer", "--job"],
        },
        BadCase {
            name: "results into a text file",
            make: |workdir, file| {
                lattice(workdir, file);
                std::fs::write(workdir.path("notes.txt"), "keep me\n").unwrap();
            },
            replace: &[],
            extra: &["--results-gpkg", "notes.txt"],
            code: 65,
            says: &["notes.txt", "refusing to write results"],
        },
    ];
    // Control: the unmodified layer these cases start from is read and validated.
    let control = Workdir::new();
    lattice(&control, "control.gpkg");
    let output = control.run(&lattice_args("control.gpkg"));
    assert_eq!(code(&output), 0, "control: {}", stderr(&output));
    for (index, case) in cases.iter().enumerate() {
        let workdir = Workdir::new();
        let file = format!("case{index}.gpkg");
        (case.make)(&workdir, &file);
        let before = hashes(workdir.root());
        let output = workdir.run(&case.args(&file));
        let message = stderr(&output);
        assert_eq!(code(&output), case.code, "{}: {message}", case.name);
        let expected_file = if case.name == "results into a text file" {
            "notes.txt".to_string()
        } else {
            file.clone()
        };
        assert!(
            message.contains(&expected_file),
            "{}: the message names the file: {message}",
            case.name
        );
        for part in case.says {
            assert!(
                message.contains(part),
                "{}: expected {part:?} in {message}",
                case.name
            );
        }
        // Nothing written: the same files with the same bytes (the job lock
        // file is left out of the listing; it stays by design).
        assert_eq!(
            before,
            hashes(workdir.root()),
            "{}: files changed",
            case.name
        );
    }
}

#[test]
fn every_bad_row_is_listed_at_once() {
    let workdir = Workdir::new();
    let file = "rows.gpkg";
    lattice(&workdir, file);
    edit(
        &workdir,
        file,
        "UPDATE units SET x1 = 'n/a' WHERE fid IN (3, 4); UPDATE units SET y = x'00' WHERE fid = 30;",
    );
    set_geometry(&workdir.path(file), "units", 12, |blob| blob[..10].to_vec());
    let before = hashes(workdir.root());
    let message = fails(&workdir.run(&lattice_args(file)), 65);
    assert_contains(
        &message,
        &[
            "rows.gpkg:units.x1 (row id=3)",
            "rows.gpkg:units.x1 (row id=4)",
            "rows.gpkg:units.y (row id=30): a BLOB of 1 bytes",
            "rows.gpkg:units.geom (row id=12)",
        ],
    );
    assert_eq!(before, hashes(workdir.root()));
}

#[test]
fn an_empty_geometry_written_by_gdal_is_skipped_as_empty() {
    let workdir = Workdir::new();
    let file = "empty.gpkg";
    lattice(&workdir, file);
    // GDAL's CSV reader takes the WKT column as the geometry; its GeoPackage
    // writer sets the empty flag of the GeoPackageBinary header.
    std::fs::write(
        workdir.path("extra.csv"),
        "WKT,code,x1,x2,y\n\"POLYGON EMPTY\",U-900,0.5,2.5,1.25\n",
    )
    .unwrap();
    ogr2ogr(
        workdir.root(),
        &[
            "-append",
            file,
            "extra.csv",
            "-nln",
            "units",
            "-nlt",
            "POLYGON",
            "-a_srs",
            "EPSG:32631",
        ],
    );
    let mut args = lattice_args(file);
    args.push("--json".into());
    let summary = ok_json(&workdir.run(&args));
    assert_eq!(summary["units_read"], 49);
    assert_eq!(
        summary["skipped"],
        serde_json::json!([
            {"reason": "empty geometry", "count": 1, "ids": ["49"]},
            {"reason": "missing feature x2", "count": 1, "ids": ["11"]},
        ])
    );
    assert_eq!(summary["units_used"], 47);
}

#[test]
fn a_file_locked_by_another_program_fails_with_75_and_is_not_changed() {
    let workdir = Workdir::new();
    let file = "locked.gpkg";
    lattice(&workdir, file);
    let hash = sha256(&workdir.path(file));
    let conn = rusqlite::Connection::open(workdir.path(file)).unwrap();
    conn.execute_batch("BEGIN EXCLUSIVE").unwrap();
    let output = workdir.run(&lattice_args(file));
    conn.execute_batch("ROLLBACK").unwrap();
    drop(conn);
    let message = fails(&output, 75);
    assert_contains(&message, &["locked.gpkg", "locked by another program"]);
    assert_eq!(sha256(&workdir.path(file)), hash);

    // A results file held by a reader's open transaction (a GIS reading it):
    // the source is free, the results file is not; --lock-timeout bounds the wait.
    let results = "results.gpkg";
    let mut args = lattice_args(file);
    args.extend(["--results-gpkg", results, "--lock-timeout", "1"].map(String::from));
    assert_eq!(code(&workdir.run(&args)), 0);
    let hash = sha256(&workdir.path(results));
    let conn = rusqlite::Connection::open(workdir.path(results)).unwrap();
    conn.execute_batch("BEGIN; SELECT count(*) FROM runs;")
        .unwrap();
    let output = workdir.run(&args);
    conn.execute_batch("ROLLBACK").unwrap();
    drop(conn);
    let message = fails(&output, 75);
    assert_contains(
        &message,
        &[
            "results.gpkg",
            "locked by another program",
            "--lock-timeout",
        ],
    );
    assert_eq!(sha256(&workdir.path(results)), hash);
    // Once the reader is gone the same run succeeds.
    assert_eq!(code(&workdir.run(&args)), 0);
}

/// The arguments of a run of the demo scenario's layer (`geofold demo` writes it).
fn demo_args(extra: &[&str]) -> Vec<String> {
    let mut args: Vec<String> = [
        "run",
        "--gpkg",
        "geofold-demo.gpkg",
        "--layer",
        "subcatchments",
    ]
    .map(String::from)
    .to_vec();
    args.extend(DEMO_COLUMNS.iter().map(|s| s.to_string()));
    args.extend(["--job", "demo_nitrate"].map(String::from));
    args.extend(extra.iter().map(|s| s.to_string()));
    args
}

#[test]
fn a_second_run_appends_and_the_job_layers_show_the_latest() {
    let workdir = Workdir::new();
    let demo = ok_json(&workdir.run(&["demo", "--json"]))["blocks"].clone();
    let file = workdir.path("geofold-demo.gpkg");
    let first = run_id(&demo, 0);
    let count = |sql: &str| gdal_sql(&file, sql);
    let before_runs = count("SELECT count(*) FROM runs");
    let second = ok_json(&workdir.run(&demo_args(&[
        "--block-size",
        "3000",
        "--seed",
        "7",
        "--json",
    ])));
    let latest = run_id(&second, 0);
    // Earlier rows stay; the layers show the new run; GDAL agrees on every count.
    assert_eq!(
        count(&format!(
            "SELECT count(*) FROM held_out WHERE run_id = '{first}'"
        )),
        [demo["units_used"].to_string()]
    );
    assert_eq!(
        count("SELECT count(*) FROM runs"),
        [(before_runs[0].parse::<u64>().unwrap() + 1).to_string()]
    );
    assert_eq!(
        count("SELECT DISTINCT run_id FROM demo_nitrate"),
        [latest.as_str()]
    );
    assert_eq!(
        count("SELECT DISTINCT run_id FROM demo_nitrate_regions"),
        [latest.as_str()]
    );
    let layers = gdal_layers(&file);
    assert_eq!(
        layers["demo_nitrate"],
        layer(
            "Multi Polygon",
            second["units_used"].as_u64().unwrap(),
            Some(32631)
        )
    );
    let regions = count(&format!(
        "SELECT count(*) FROM fold_regions WHERE run_id = '{latest}' AND repetition = 1"
    ));
    assert_eq!(
        layers["demo_nitrate_regions"].count.to_string(),
        regions[0],
        "the regions layer holds the latest run's regions of repetition 1"
    );
    gdal_validates(&file);

    // A random run of the same job also becomes the per-unit layer, and the
    // regions layer goes: random folds have no regions.
    let third = ok_json(&workdir.run(&demo_args(&["--scheme", "random", "--seed", "7", "--json"])));
    let layers = gdal_layers(&file);
    assert!(
        !layers.contains_key("demo_nitrate_regions"),
        "a random run leaves no regions layer: {layers:?}"
    );
    assert_eq!(
        count("SELECT DISTINCT run_id FROM demo_nitrate"),
        [run_id(&third, 0)]
    );
    let shown: Vec<&str> = third["results"]["layers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|layer| layer["name"].as_str().unwrap())
        .collect();
    assert_eq!(shown, ["geofold-demo.gpkg:demo_nitrate"]);
    gdal_validates(&file);
}

#[test]
fn a_failed_run_leaves_no_result_rows() {
    let workdir = Workdir::new();
    assert_eq!(code(&workdir.run(&["demo"])), 0);
    let file = workdir.path("geofold-demo.gpkg");
    // GDAL as the writer: a constant feature makes every fold's design rank-deficient.
    ogrinfo_sql(&file, "UPDATE subcatchments SET elevation_m = 100");
    let count = |table: &str| gdal_sql(&file, &format!("SELECT count(*) FROM {table}"));
    let tables: Vec<&str> = RUN_TABLES
        .iter()
        .map(|(table, _)| *table)
        .chain(["demo_nitrate", "demo_nitrate_regions"])
        .collect();
    let before: Vec<Vec<String>> = tables.iter().map(|t| count(t)).collect();
    let layer_run = gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate");
    let output = workdir.run(&demo_args(&["--block-size", "4000", "--also-random"]));
    assert_contains(&fails(&output, 65), &["cannot fit"]);
    let after: Vec<Vec<String>> = tables.iter().map(|t| count(t)).collect();
    assert_eq!(before, after, "no result rows of the failed runs");
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        layer_run
    );
    let failed = gdal_sql(
        &file,
        "SELECT scheme, status FROM runs WHERE status <> 'succeeded' ORDER BY scheme",
    );
    assert_eq!(failed, ["grid|failed", "random|failed"]);
    assert_eq!(
        gdal_sql(
            &file,
            "SELECT count(*) FROM runs WHERE status = 'failed' AND error_message LIKE '%cannot fit%'"
        ),
        ["2"],
        "the failed runs say why"
    );
    gdal_validates(&file);
    // Nothing beside the demo's own files (its GeoPackage and report).
    assert_eq!(
        listing(workdir.root()),
        ["geofold-demo.gpkg", "geofold-demo.html"]
    );
}

#[test]
fn a_longitude_latitude_layer_with_grid_blocks_names_ogr2ogr() {
    let workdir = Workdir::new();
    // GeoJSON coordinates are longitude/latitude (RFC 7946); invented values near 0°, 0°.
    let features: Vec<serde_json::Value> = (0..20)
        .map(|k| {
            let (x, y) = (0.01 * (k % 5) as f64, 0.01 * (k / 5) as f64);
            serde_json::json!({
                "type": "Feature",
                "properties": {"a": k as f64, "b": ((k * 7) % 5) as f64, "y": 0.5 * k as f64 + ((k * 3) % 4) as f64},
                "geometry": {"type": "Point", "coordinates": [x, y]}
            })
        })
        .collect();
    std::fs::write(
        workdir.path("points.geojson"),
        serde_json::json!({"type": "FeatureCollection", "features": features}).to_string(),
    )
    .unwrap();
    ogr2ogr(
        workdir.root(),
        &[
            "-f",
            "GPKG",
            "points.gpkg",
            "points.geojson",
            "-nln",
            "points",
        ],
    );
    let hash = sha256(&workdir.path("points.gpkg"));
    let args = |scheme: &[&str]| -> Vec<String> {
        let mut args: Vec<String> = [
            "run",
            "--gpkg",
            "points.gpkg",
            "--target",
            "y",
            "--features",
            "a,b",
            "--folds",
            "3",
        ]
        .map(String::from)
        .to_vec();
        args.extend(scheme.iter().map(|s| s.to_string()));
        args
    };
    let grid = args(&["--scheme", "grid", "--block-size", "1000"]);
    let message = fails(&workdir.run(&grid), 64);
    assert_contains(
        &message,
        &[
            "points.gpkg:points.geom has SRID 4326",
            "ogr2ogr -t_srs EPSG:N",
        ],
    );
    assert_eq!(sha256(&workdir.path("points.gpkg")), hash);
    // --distance-srid cannot help without PostGIS, and says so.
    let mut with_srid = grid.clone();
    with_srid.extend(["--distance-srid", "32631"].map(String::from));
    assert_contains(
        &fails(&workdir.run(&with_srid), 64),
        &["reproject the file first"],
    );
    assert_eq!(sha256(&workdir.path("points.gpkg")), hash);
    // Random folds ignore distance, so they run, into the source file with the
    // default job <layer>_cv.
    let mut random = args(&["--scheme", "random"]);
    random.push("--json".into());
    let output = workdir.run(&random);
    let summary = ok_json(&output);
    assert_eq!(summary["job"], "points_cv");
    let layers = gdal_layers(&workdir.path("points.gpkg"));
    assert_eq!(layers["points_cv"], layer("Point", 20, Some(4326)));
    assert_eq!(layers["points"], layer("Point", 20, Some(4326)));
    gdal_validates(&workdir.path("points.gpkg"));
    assert_eq!(json(&output)["runs"][0]["scheme"], "random");
}
