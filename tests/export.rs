//! `geofold export`: one run (with its comparison runs) copied from a
//! PostGIS results schema into a GeoPackage. psql reads PostGIS, GDAL reads
//! the GeoPackage, and the two must agree; GDAL's validator checks the file.

mod common;

use std::collections::BTreeMap;

use common::fixtures::{args, create_units, grid, IdType, DEMO_COLUMNS, UNITS_COLUMNS};
use common::gdal::{
    gdal_extent, gdal_layers, gdal_rows, gdal_sql, gdal_validates, layer, listing, sha256,
    LayerInfo,
};
use common::pg::{db_uri, psql, Scratch};
use common::{assert_close, assert_contains, code, fails, json, ok_json, run_id, stdout, Workdir};

/// `geofold export --db URI --results-schema SCHEMA ARGS` in `workdir`.
fn export(workdir: &Workdir, schema: &str, args: &[&str]) -> std::process::Output {
    let mut all = vec!["export", "--db"];
    let uri = db_uri();
    all.push(&uri);
    all.extend(["--results-schema", schema]);
    all.extend(args);
    workdir.run(&all)
}

#[test]
fn results_of_a_postgis_source_go_to_a_geopackage_through_export() {
    let workdir = Workdir::new();
    assert_eq!(code(&workdir.run(&["demo", "--db", &db_uri()])), 0);
    // --results-gpkg with a PostGIS source is refused before anything is written.
    let refused = workdir.run(&args(&[
        &["run", "--db", &db_uri(), "--table", "demo.subcatchments"],
        DEMO_COLUMNS,
        &["--block-size", "4000", "--results-gpkg", "direct.gpkg"],
    ]));
    assert_contains(&fails(&refused, 64), &["geofold export"]);
    assert!(!workdir.path("direct.gpkg").exists());

    let report = json(&export(
        &workdir,
        "geofold_demo",
        &["--job", "demo_nitrate", "--to", "shared.gpkg", "--json"],
    ));
    let runs: Vec<String> = report["runs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|id| id.as_str().unwrap().to_string())
        .collect();
    assert_eq!(runs.len(), 2, "the run and its random comparison");
    let primary = &runs[0];
    assert_eq!(
        psql(&format!("SELECT scheme, primary_run_id IS NULL FROM geofold_demo.runs WHERE run_id = '{primary}'")),
        "grid|t"
    );
    let file = workdir.path("shared.gpkg");
    let ids = runs
        .iter()
        .map(|id| format!("'{id}'"))
        .collect::<Vec<_>>()
        .join(", ");
    let pg_count = |table: &str| -> u64 {
        psql(&format!(
            "SELECT count(*) FROM geofold_demo.{table} WHERE run_id IN ({ids})"
        ))
        .parse()
        .unwrap()
    };
    // Rows of the exported runs or of the job's inspections.
    let owned = |table: &str| -> u64 {
        psql(&format!(
            "SELECT count(*) FROM geofold_demo.{table} WHERE analysis_id IN ({ids})
                 OR analysis_id IN (SELECT inspection_id FROM geofold_demo.inspections WHERE job = 'demo_nitrate')"
        ))
        .parse()
        .unwrap()
    };
    let view_count = |view: &str| -> u64 {
        psql(&format!("SELECT count(*) FROM geofold_demo.{view}"))
            .parse()
            .unwrap()
    };
    let epsg = Some(32631);
    let expected: BTreeMap<String, LayerInfo> = [
        (
            "demo_nitrate",
            layer("Multi Polygon", view_count("demo_nitrate"), epsg),
        ),
        (
            "demo_nitrate_regions",
            layer("Multi Polygon", view_count("demo_nitrate_regions"), epsg),
        ),
        (
            "fold_regions",
            layer("Multi Polygon", pg_count("fold_regions"), None),
        ),
        ("schema_version", layer("None", 1, None)),
        ("store_settings", layer("None", 1, None)),
        ("runs", layer("None", 2, None)),
        ("held_out", layer("None", pg_count("held_out"), None)),
        (
            "unit_summaries",
            layer("None", pg_count("unit_summaries"), None),
        ),
        ("folds", layer("None", pg_count("folds"), None)),
        (
            "fold_score_values",
            layer("None", pg_count("fold_score_values"), None),
        ),
        (
            "run_score_values",
            layer("None", pg_count("run_score_values"), None),
        ),
        (
            "fold_exclusions",
            layer("None", pg_count("fold_exclusions"), None),
        ),
        (
            "coefficients",
            layer("None", pg_count("coefficients"), None),
        ),
        ("jobs", layer("None", 0, None)),
    ]
    .into_iter()
    .chain([
        // The runs' held-out residual Moran's I, and the figures of the job's
        // inspection (the demo inspects before it runs): they travel with it.
        ("diagnostics", layer("None", owned("diagnostics"), None)),
        (
            "coefficients",
            layer("None", pg_count("coefficients"), None),
        ),
        ("nearest_distances", layer("None", 0, None)),
        (
            "fold_distances",
            layer("None", pg_count("fold_distances"), None),
        ),
        (
            "inspections",
            layer(
                "None",
                psql("SELECT count(*) FROM geofold_demo.inspections WHERE job = 'demo_nitrate'")
                    .parse()
                    .unwrap(),
                None,
            ),
        ),
        ("semivariogram", layer("None", owned("semivariogram"), None)),
        (
            "variogram_fits",
            layer("None", owned("variogram_fits"), None),
        ),
        ("correlogram", layer("None", owned("correlogram"), None)),
    ])
    .map(|(name, info)| (name.to_string(), info))
    .collect();
    assert_eq!(gdal_layers(&file), expected);
    gdal_validates(&file);
    // Values survive: PostGIS (psql) against GDAL's reading of the export, through the views.
    let checks = [
        (
            "run_scores",
            "n_predictions, rmse, mae, bias, r2, rmse_fold_sd, baseline_rmse",
        ),
        (
            "fold_scores",
            "count(*), sum(rmse), sum(n_test), min(r2), sum(n_train)",
        ),
        (
            "predictions",
            "count(*), sum(residual), sum(squared_error), min(fold), max(fold), min(repetition)",
        ),
        ("unit_errors", "count(*), sum(predicted), sum(rmse)"),
        (
            "fold_regions",
            "count(*), sum(units), min(label), max(label)",
        ),
    ];
    for run in &runs {
        for (table, columns) in checks {
            let from_gdal = gdal_sql(
                &file,
                &format!("SELECT {columns} FROM {table} WHERE run_id = '{run}'"),
            );
            let from_postgis = psql(&format!(
                "SELECT {columns} FROM geofold_demo.{table} WHERE run_id = '{run}'"
            ));
            let (a, b): (Vec<&str>, Vec<&str>) = (
                from_gdal[0].split('|').collect(),
                from_postgis.split('|').collect(),
            );
            assert_eq!(a.len(), b.len());
            for (x, y) in a.iter().zip(&b) {
                match (x.parse::<f64>(), y.parse::<f64>()) {
                    (Ok(x), Ok(y)) => assert_close(x, y, &format!("{table} {columns} of {run}")),
                    _ => assert_eq!(x, y, "{table} {columns} of {run}"),
                }
            }
        }
    }
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        [primary.as_str()]
    );
    // The geometries are PostGIS's: GDAL's extent of the per-unit layer equals ST_Extent.
    let pg_extent = psql(
        "SELECT format('(%s, %s) - (%s, %s)', to_char(ST_XMin(e), 'FM999999990.000000'), to_char(ST_YMin(e), 'FM999999990.000000'), \
         to_char(ST_XMax(e), 'FM999999990.000000'), to_char(ST_YMax(e), 'FM999999990.000000'))
         FROM (SELECT ST_Extent(geom) AS e FROM geofold_demo.demo_nitrate) x",
    );
    assert_eq!(gdal_extent(&file, "demo_nitrate"), pg_extent);

    // The same run again is refused, leaving the file as it was.
    let hash = sha256(&file);
    let again = export(
        &workdir,
        "geofold_demo",
        &["--run", primary, "--to", "shared.gpkg"],
    );
    assert_contains(&fails(&again, 65), &["is already in it"]);
    assert_eq!(sha256(&file), hash);
    // Bad and unknown run ids.
    assert_eq!(
        code(&export(
            &workdir,
            "geofold_demo",
            &["--run", "17", "--to", "x.gpkg"]
        )),
        64
    );
    let unknown = export(
        &workdir,
        "geofold_demo",
        &[
            "--run",
            "00000000-0000-4000-8000-000000000000",
            "--to",
            "x.gpkg",
        ],
    );
    assert_eq!(code(&unknown), 66);
    assert!(!workdir.path("x.gpkg").exists());
    // The export, and the demo's report from loading the scenario.
    assert_eq!(
        listing(workdir.root()),
        ["geofold-demo.html", "shared.gpkg"]
    );
}

#[test]
fn export_prints_text_unless_json_and_json_numbers_from_1() {
    // Issue 6 item 17.
    let scratch = Scratch::new("export_text");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let document = ok_json(&scratch.geofold_run(
        &workdir,
        &args(&[
            &grid("{s}.units", "a,b", "200", "3"),
            &[
                "--repeats",
                "2",
                "--also-random",
                "--job",
                "units",
                "--json",
            ],
        ]),
    ));
    let (primary, random) = (run_id(&document, 0), run_id(&document, 1));
    let output = export(
        &workdir,
        &scratch.results,
        &["--job", "units", "--to", "text.gpkg"],
    );
    assert_eq!(code(&output), 0);
    let text = stdout(&output);
    assert!(
        serde_json::from_str::<serde_json::Value>(&text).is_err(),
        "text, not JSON:\n{text}"
    );
    assert_contains(
        &text,
        &[
            &format!("exported run {primary} of job units to text.gpkg"),
            &random,
            "open text.gpkg in QGIS",
            "units_regions",
        ],
    );
    let output = export(
        &workdir,
        &scratch.results,
        &["--job", "units", "--to", "json.gpkg", "--json"],
    );
    let report = json(&output);
    assert_eq!(report["runs"], serde_json::json!([primary, random]));
    assert_eq!(report["job"], "units");
    // Folds and repetitions are numbered from 1 in the exported tables, as in PostGIS.
    let file = workdir.path("json.gpkg");
    assert_eq!(
        gdal_rows(&file, &format!(
            "SELECT min(repetition), max(repetition), min(fold), max(fold) FROM held_out WHERE run_id = '{primary}'"
        )),
        [["1", "2", "1", "3"]]
    );
    assert_eq!(
        gdal_rows(
            &file,
            &format!("SELECT min(fold), max(fold) FROM folds WHERE run_id = '{random}'")
        ),
        [["1", "3"]]
    );
    // The per-unit layer carries each unit's fold of repetition 1.
    let layer_folds = gdal_rows(&file, "SELECT unit_id, fold FROM units ORDER BY unit_id");
    let mut pg_folds = scratch.rows(&format!(
        "SELECT unit_id, fold FROM {{r}}.fold_members WHERE run_id = '{primary}' AND repetition = 1"
    ));
    pg_folds.sort_by_key(|row| row[0].parse::<i64>().unwrap());
    assert_eq!(layer_folds.len(), 36);
    assert_eq!(layer_folds, pg_folds);
    gdal_validates(&file);
}

#[test]
fn a_random_only_run_exports_without_a_regions_layer() {
    // Issue 6 item 17.
    let scratch = Scratch::new("export_random");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let document = ok_json(&scratch.geofold_run(
        &workdir,
        &args(&[
            &["--table", "{s}.units"],
            UNITS_COLUMNS,
            &[
                "--scheme",
                "random",
                "--folds",
                "4",
                "--job",
                "scattered",
                "--json",
            ],
        ]),
    ));
    let layers: Vec<&str> = document["results"]["layers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|layer| layer["name"].as_str().unwrap())
        .collect();
    assert_eq!(
        layers,
        [scratch.fill("{r}.scattered")],
        "no regions layer in PostGIS"
    );
    assert!(!scratch.has_result_relation("scattered_regions"));
    let output = export(
        &workdir,
        &scratch.results,
        &["--job", "scattered", "--to", "random.gpkg"],
    );
    assert_eq!(code(&output), 0);
    let file = workdir.path("random.gpkg");
    let found = gdal_layers(&file);
    assert_eq!(found["scattered"], layer("Multi Polygon", 36, Some(32631)));
    assert!(!found.contains_key("scattered_regions"), "{found:?}");
    assert_eq!(found["fold_regions"].count, 0);
    gdal_validates(&file);
    let text = stdout(&output);
    assert!(
        !text.contains("scattered_regions"),
        "the summary names no regions layer the file does not have:\n{text}"
    );
}
