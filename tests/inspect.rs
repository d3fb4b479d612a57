//! `geofold inspect` end to end, on both stores: the Columbus neighbourhoods
//! (Anselin 1988, as shipped in libpysal 4.14.1; `tests/fixtures/columbus`)
//! loaded with GDAL's ogr2ogr, CRIME ~ INC + HOVAL, and the stored Moran's I
//! checked against esda 2.9.0 and spreg 1.9.0 (values in
//! `../shared/REFERENCES.md` §2.3, computed there with those libraries and
//! numpy, queen and rook contiguity, row-standardised).

mod common;

use common::{code, psql, psql_script, run, unique_name, Workdir};

const COLUMBUS: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/tests/fixtures/columbus/columbus.tsv"
);

/// esda 2.9.0 `Moran` of CRIME and of the OLS residuals, and spreg's
/// regression-residual moments (REFERENCES.md §2.3): (weights, subject,
/// I, z under normality, z under randomisation, z with regression moments).
type Reference = (&'static str, &'static str, f64, f64, f64, Option<f64>);

const EXPECTED: &[Reference] = &[
    (
        "queen",
        "target",
        0.5001885571828611,
        5.630312787738188,
        5.58938267504451,
        None,
    ),
    (
        "queen",
        "residuals",
        0.2221094065786734,
        2.6253093010344615,
        2.6521164508267066,
        Some(2.8393189345136642),
    ),
    (
        "rook",
        "target",
        0.5236702127502532,
        5.497820514640764,
        5.457880045909277,
        None,
    ),
    (
        "rook",
        "residuals",
        0.24986247924902633,
        2.733199815404305,
        2.7610896599606773,
        Some(2.93678616084402),
    ),
];

fn ogr2ogr(args: &[&str]) {
    let output = std::process::Command::new("ogr2ogr")
        .args(args)
        .output()
        .expect("ogr2ogr (gdal-bin) runs");
    assert!(
        output.status.success(),
        "ogr2ogr {args:?} failed:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
}

/// The fixture's WKT column read by GDAL's CSV driver.
fn columbus_args(out_format: &str, out: &str) -> Vec<String> {
    [
        "-f",
        out_format,
        out,
        COLUMBUS,
        "-oo",
        "GEOM_POSSIBLE_NAMES=WKT",
        "-oo",
        "KEEP_GEOM_COLUMNS=NO",
        "-oo",
        "AUTODETECT_TYPE=YES",
        "-nlt",
        "POLYGON",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect()
}

fn inspect_args(weights: &str) -> Vec<String> {
    [
        "inspect",
        "--target",
        "CRIME",
        "--features",
        "INC,HOVAL",
        // The fixture's coordinates have no CRS (arbitrary projected units).
        "--assume-metres",
        "--weights",
        weights,
        "--permutations",
        "999",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect()
}

/// Compares one stored diagnostics row (I, z_normal, z_random, z_regression,
/// p_permutation) with the reference.
fn check_row(weights: &str, subject: &str, stored: [Option<f64>; 5]) {
    let &(_, _, i, z_n, z_r, z_reg) = EXPECTED
        .iter()
        .find(|e| e.0 == weights && e.1 == subject)
        .expect("reference row");
    let close = |got: Option<f64>, want: f64, what: &str| {
        let got = got.unwrap_or_else(|| panic!("{weights} {subject}: {what} missing"));
        assert!(
            (got - want).abs() <= 1e-9 * want.abs().max(1.0),
            "{weights} {subject}: {what} {got} vs esda/spreg {want}"
        );
    };
    close(stored[0], i, "I");
    close(stored[1], z_n, "z under normality");
    close(stored[2], z_r, "z under randomisation");
    match z_reg {
        Some(z) => close(stored[3], z, "z with regression moments"),
        None => assert!(stored[3].is_none(), "{weights} {subject}: no regression z"),
    }
    // Seed-independent bounds from REFERENCES.md §2.3 ("robust permutation
    // checks"): CRIME at the floor 1/(R+1), residuals at most 0.01.
    let p = stored[4].expect("permutation p");
    if subject == "target" {
        assert!((p - 0.001).abs() < 1e-12, "{weights} target p {p}");
    } else {
        assert!(p <= 0.01, "{weights} residuals p {p}");
    }
}

#[test]
fn columbus_in_a_geopackage_matches_esda_and_spreg() {
    let work = Workdir::new();
    let source = work.path("columbus.gpkg");
    let results = work.path("results.gpkg");
    let mut load = columbus_args("GPKG", source.to_str().unwrap());
    load.extend(["-nln".into(), "columbus".into()]);
    ogr2ogr(&load.iter().map(String::as_str).collect::<Vec<_>>());
    for weights in ["queen", "rook"] {
        let mut command = work.geofold();
        command
            .args(inspect_args(weights))
            .arg("--gpkg")
            .arg(&source)
            .arg("--results-gpkg")
            .arg(&results);
        let output = run(command);
        assert_eq!(code(&output), 0);
        let text = String::from_utf8_lossy(&output.stdout);
        assert!(text.contains("Moran's I of the residuals: 0.2"), "{text}");
        assert!(
            text.contains("Recommended") || text.contains("No size"),
            "{text}"
        );
    }
    let conn = rusqlite::Connection::open(&results).unwrap();
    let mut statement = conn
        .prepare(
            "SELECT weights, subject, value, z_normal, z_random, z_regression, p_permutation
             FROM diagnostics ORDER BY weights, subject",
        )
        .unwrap();
    let rows: Vec<(String, String, [Option<f64>; 5])> = statement
        .query_map([], |row| {
            Ok((
                row.get(0)?,
                row.get(1)?,
                [
                    row.get(2)?,
                    row.get(3)?,
                    row.get(4)?,
                    row.get(5)?,
                    row.get(6)?,
                ],
            ))
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(rows.len(), 4, "two subjects × two weights");
    for (weights, subject, stored) in rows {
        check_row(&weights, &subject, stored);
    }
    // One inspection row per call, naming its advice; the semivariogram and
    // both fitted models are stored beside it.
    let inspections: i64 = conn
        .query_row(
            "SELECT count(*) FROM inspections WHERE advice <> ''",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(inspections, 2);
    let fits: i64 = conn
        .query_row(
            "SELECT count(*) FROM variogram_fits f JOIN inspections i ON i.inspection_id = f.analysis_id",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert!(fits >= 2, "fits stored: {fits}");

    // A later run of the same job with blocks far below the fitted range is
    // warned about (the rule: below half the range; common practice, no
    // source, after the advice's reasoning).
    let range: f64 = conn
        .query_row(
            "SELECT fitted_range FROM inspections ORDER BY started_at DESC LIMIT 1",
            [],
            |r| r.get(0),
        )
        .unwrap();
    for (block, warned) in [(range / 4.0, true), (range * 1.5, false)] {
        let mut command = work.geofold();
        command
            .args([
                "run",
                "--target",
                "CRIME",
                "--features",
                "INC,HOVAL",
                "--assume-metres",
            ])
            .arg("--gpkg")
            .arg(&source)
            .arg("--results-gpkg")
            .arg(&results)
            .args(["--block-size", &block.to_string(), "--folds", "2", "--json"]);
        let output = run(command);
        assert_eq!(code(&output), 0);
        let summary = common::json(&output);
        let warnings = summary["runs"][0]["warnings"].to_string();
        assert_eq!(
            warnings.contains("well below"),
            warned,
            "{block}: {warnings}"
        );
    }
}

#[test]
fn columbus_in_postgis_matches_esda_and_spreg() {
    let work = Workdir::new();
    let schema = unique_name("columbus");
    psql_script(&format!("CREATE SCHEMA {schema};"));
    let target = format!("PG:{}", common::db_uri());
    let mut load = columbus_args("PostgreSQL", &target);
    load.extend([
        "-lco".into(),
        format!("SCHEMA={schema}"),
        "-nln".into(),
        "columbus".into(),
    ]);
    ogr2ogr(&load.iter().map(String::as_str).collect::<Vec<_>>());
    let results = format!("{schema}_results");
    for weights in ["queen", "rook"] {
        let mut command = work.geofold();
        command
            .args(inspect_args(weights))
            .args(["--db", &common::db_uri()])
            .args(["--table", &format!("{schema}.columbus")])
            .args(["--results-schema", &results]);
        let output = run(command);
        assert_eq!(code(&output), 0);
    }
    let text = psql(&format!(
        "SELECT weights, subject, value, z_normal, z_random, coalesce(z_regression::text, ''), p_permutation
         FROM {results}.diagnostics ORDER BY weights, subject"
    ));
    let rows: Vec<&str> = text.lines().collect();
    assert_eq!(rows.len(), 4, "{text}");
    for row in rows {
        let f: Vec<&str> = row.split('|').collect();
        let num = |s: &str| (!s.is_empty()).then(|| s.parse::<f64>().unwrap());
        check_row(
            f[0],
            f[1],
            [num(f[2]), num(f[3]), num(f[4]), num(f[5]), num(f[6])],
        );
    }
    // A job's inspections travel with its runs through export, and a second
    // export into the same file keeps them once.
    let job = format!("{schema}_columbus");
    let file = work.path("exported.gpkg");
    for _ in 0..2 {
        let mut command = work.geofold();
        command
            .args([
                "run",
                "--target",
                "CRIME",
                "--features",
                "INC,HOVAL",
                "--assume-metres",
            ])
            .args([
                "--db",
                &common::db_uri(),
                "--table",
                &format!("{schema}.columbus"),
            ])
            .args(["--results-schema", &results, "--block-size", "2"]);
        assert_eq!(code(&run(command)), 0);
        let mut command = work.geofold();
        command
            .args([
                "export",
                "--db",
                &common::db_uri(),
                "--results-schema",
                &results,
            ])
            .args(["--job", &job])
            .arg("--to")
            .arg(&file);
        assert_eq!(code(&run(command)), 0);
    }
    let conn = rusqlite::Connection::open(&file).unwrap();
    let count = |sql: &str| -> i64 { conn.query_row(sql, [], |r| r.get(0)).unwrap() };
    assert_eq!(count("SELECT count(*) FROM inspections"), 2);
    assert_eq!(count("SELECT count(*) FROM runs"), 2);
    assert_eq!(
        count("SELECT count(*) FROM diagnostics WHERE subject = 'held_out_residuals'"),
        2
    );
    psql_script(&format!(
        "DROP SCHEMA {schema} CASCADE; DROP SCHEMA {results} CASCADE;"
    ));
}

/// Every run stores Moran's I of its held-out residuals: on the Meuse samples
/// (Pebesma & Bivand 2005, the copy in scikit-gstat; `tests/fixtures/meuse`)
/// loaded with ogr2ogr, zinc ~ x + y under grid folds, the stored statistic
/// equals esda's over libpysal's 8-nearest-neighbour weights of the same
/// points and the stored held-out residuals (`tests/python/held_out_moran.py`).
#[test]
fn runs_store_held_out_moran_and_fold_distances_as_esda_and_scipy_compute_them() {
    let work = Workdir::new();
    let source = work.path("meuse.gpkg");
    ogr2ogr(&[
        "-f",
        "GPKG",
        source.to_str().unwrap(),
        concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/fixtures/meuse/meuse.tsv"
        ),
        "-oo",
        "X_POSSIBLE_NAMES=x",
        "-oo",
        "Y_POSSIBLE_NAMES=y",
        "-oo",
        "KEEP_GEOM_COLUMNS=YES",
        "-oo",
        "AUTODETECT_TYPE=YES",
        "-a_srs",
        "EPSG:28992",
        "-nln",
        "meuse",
    ]);
    let mut command = work.geofold();
    command.args([
        "run",
        "--gpkg",
        source.to_str().unwrap(),
        "--target",
        "zinc",
        "--features",
        "x,y",
        "--block-size",
        "500",
        "--json",
    ]);
    let output = run(command);
    assert_eq!(code(&output), 0);
    let summary = common::json(&output);
    let run_id = summary["runs"][0]["run_id"].as_str().unwrap().to_string();
    let reported = summary["runs"][0]["held_out_moran"]["moran"]["statistic"]
        .as_f64()
        .expect("held_out_moran in --json");

    let conn = rusqlite::Connection::open(&source).unwrap();
    let mut statement = conn
        .prepare(
            "SELECT m.x, m.y, h.observed - h.predicted FROM held_out h
             JOIN meuse m ON CAST(m.fid AS TEXT) = h.unit_id
             WHERE h.run_id = ?1 ORDER BY m.fid",
        )
        .unwrap();
    let lines: Vec<String> = statement
        .query_map([&run_id], |row| {
            Ok(format!(
                "{}\t{}\t{:?}",
                row.get::<_, f64>(0)?,
                row.get::<_, f64>(1)?,
                row.get::<_, f64>(2)?
            ))
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(lines.len(), 155);
    let reference: serde_json::Value = serde_json::from_str(&common::python_script(
        "python/held_out_moran.py",
        &["8"],
        &(lines.join("\n") + "\n"),
    ))
    .unwrap();
    let stored: (String, i64, f64, f64, f64, f64) = conn
        .query_row(
            "SELECT weights, n, value, expected_random, z_normal, z_random FROM diagnostics
             WHERE analysis_id = ?1 AND subject = 'held_out_residuals'",
            [&run_id],
            |r| {
                Ok((
                    r.get(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                    r.get(5)?,
                ))
            },
        )
        .unwrap();
    assert_eq!((stored.0.as_str(), stored.1), ("knn:8", 155));
    for (got, key) in [
        (stored.2, "I"),
        (stored.3, "EI"),
        (stored.4, "z_norm"),
        (stored.5, "z_rand"),
    ] {
        let want = reference[key].as_f64().unwrap();
        assert!(
            (got - want).abs() <= 1e-9 * want.abs().max(1.0),
            "{key}: stored {got}, esda {want}"
        );
    }
    assert_eq!(reported, stored.2);

    // The run's fold_distances rows against scipy's nearest neighbours and
    // numpy's quantiles over the same points and recorded folds.
    let mut statement = conn
        .prepare(
            "SELECT m.x, m.y, f.fold FROM fold_members f
             JOIN meuse m ON CAST(m.fid AS TEXT) = f.unit_id
             WHERE f.run_id = ?1 AND f.repetition = 1 ORDER BY m.fid",
        )
        .unwrap();
    let lines: Vec<String> = statement
        .query_map([&run_id], |row| {
            Ok(format!(
                "{}\t{}\t{}",
                row.get::<_, f64>(0)?,
                row.get::<_, f64>(1)?,
                row.get::<_, i64>(2)?
            ))
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    let reference: serde_json::Value = serde_json::from_str(&common::python_script(
        "python/fold_distances.py",
        &[],
        &(lines.join("\n") + "\n"),
    ))
    .unwrap();
    let mut statement = conn
        .prepare(
            "SELECT coalesce(CAST(fold AS TEXT), 'all'), minimum, p10, p25, median, p75, p90, maximum, mean,
                    sampled_from
             FROM fold_distances WHERE run_id = ?1 AND kind = 'cv' ORDER BY fold",
        )
        .unwrap();
    let rows: Vec<(String, Vec<f64>, Option<i64>)> = statement
        .query_map([&run_id], |row| {
            Ok((
                row.get(0)?,
                (1..=8).map(|i| row.get(i)).collect::<Result<_, _>>()?,
                row.get(9)?,
            ))
        })
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(
        rows.len(),
        1 + summary["runs"][0]["folds"].as_array().unwrap().len()
    );
    for (fold, values, sampled_from) in rows {
        assert_eq!(sampled_from, None, "155 units are measured whole");
        let want = reference[&fold].as_array().expect("reference fold");
        for (got, want) in values.iter().zip(want) {
            let want = want.as_f64().unwrap();
            assert!(
                (got - want).abs() <= 1e-9 * want.abs().max(1.0),
                "fold {fold}: {got} vs scipy/numpy {want}"
            );
        }
    }
}
