//! GeoPackage in and out (issue 3), checked against outside references:
//! GDAL (`ogrinfo`, `ogr2ogr` and `validate_gpkg.py` from Debian's gdal-bin and
//! python3-gdal) reads every file geofold writes and writes files geofold
//! reads; PostGIS reads the same data through the other adapter; the SQLite
//! file format and the OGC GeoPackage spec give the header fields.
//!
//! The invented test layer is a lattice of 1 km squares in EPSG:32631 on open
//! sea with made-up attributes (see [`write_lattice_geojson`]).

mod common;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use common::{code, db_uri, json, psql, psql_script, run, unique_name, Workdir};
use sha2::{Digest, Sha256};

/// `geofold demo --db` uses the fixed schemas `demo` and `geofold_demo`;
/// tests in this file that load it take turns.
static DEMO_SCHEMAS: Mutex<()> = Mutex::new(());

const TARGET: &str = "nitrate_mg_l";
const FEATURES: &str = "farmland_share,rainfall_mm,elevation_m";

// ---------------------------------------------------------------- GDAL --

/// What `ogrinfo -so -al` says about one layer.
#[derive(Debug, Clone, PartialEq)]
struct LayerInfo {
    geometry: String,
    count: u64,
    /// The top-level `ID["EPSG",N]` of the layer's SRS, if it has one.
    epsg: Option<i32>,
}

fn command_output(program: &str, args: &[&str], dir: &Path) -> Output {
    Command::new(program)
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap_or_else(|e| {
            panic!("{program} must be installed (Debian gdal-bin, which scripts/test.sh installs): {e}")
        })
}

/// Layers of a GeoPackage as GDAL's `ogrinfo -so -al` lists them; asserts
/// that GDAL opens the file with nothing on stderr (a warning is a defect for
/// a GIS user).
fn gdal_layers(file: &Path) -> BTreeMap<String, LayerInfo> {
    let dir = file.parent().unwrap();
    let name = file.file_name().unwrap().to_str().unwrap();
    let output = command_output("ogrinfo", &["-ro", "-so", "-al", name], dir);
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        output.status.success(),
        "ogrinfo failed on {name}: {stderr}"
    );
    assert!(
        stderr.trim().is_empty(),
        "ogrinfo wrote to stderr for {name}:\n{stderr}"
    );
    let text = String::from_utf8_lossy(&output.stdout);
    let mut layers = BTreeMap::new();
    for block in text.split("\nLayer name: ").skip(1) {
        let layer = block.lines().next().unwrap().trim().to_string();
        let field = |label: &str| {
            block
                .lines()
                .find_map(|line| line.strip_prefix(label))
                .unwrap_or_else(|| panic!("no {label:?} for layer {layer} in:\n{block}"))
                .trim()
                .to_string()
        };
        // The CRS's own ID is the one indented by four spaces (nested ones are deeper).
        let epsg = block.lines().find_map(|line| {
            line.strip_prefix("    ID[\"EPSG\",")
                .and_then(|rest| rest.strip_suffix("]]"))
                .and_then(|code| code.parse().ok())
        });
        let info = LayerInfo {
            geometry: field("Geometry: "),
            count: field("Feature Count: ").parse().unwrap(),
            epsg,
        };
        layers.insert(layer, info);
    }
    layers
}

/// Runs GDAL's GeoPackage validator (`validate_gpkg.py`, python3-gdal) and
/// asserts it reports nothing.
fn gdal_validates(file: &Path) {
    let script = [
        "/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_gpkg.py",
        "/usr/share/doc/python3-gdal/examples/validate_gpkg.py",
    ]
    .into_iter()
    .find(|path| Path::new(path).exists())
    .expect("validate_gpkg.py from python3-gdal (a dependency of gdal-bin) is installed");
    let output = command_output(
        "/usr/bin/python3",
        &[script, file.to_str().unwrap()],
        Path::new("/"),
    );
    let report = format!(
        "{}{}",
        String::from_utf8_lossy(&output.stdout),
        String::from_utf8_lossy(&output.stderr)
    );
    assert!(
        output.status.success() && report.trim().is_empty(),
        "validate_gpkg.py rejects {}:\n{report}",
        file.display()
    );
}

/// Rows of an SQL query as GDAL reads them (`ogr2ogr -f CSV /vsistdout/`),
/// each row its fields joined by `|`.
fn gdal_sql(file: &Path, sql: &str) -> Vec<String> {
    let dir = file.parent().unwrap();
    let name = file.file_name().unwrap().to_str().unwrap();
    let output = command_output(
        "ogr2ogr",
        &["-f", "CSV", "/vsistdout/", name, "-sql", sql],
        dir,
    );
    assert!(
        output.status.success(),
        "ogr2ogr -sql {sql:?} failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8_lossy(&output.stdout)
        .lines()
        .skip(1)
        .map(|line| {
            line.split(',')
                .map(|field| field.trim_matches('"'))
                .collect::<Vec<_>>()
                .join("|")
        })
        .collect()
}

/// Runs ogr2ogr in `dir`, asserting success.
fn ogr2ogr(dir: &Path, args: &[&str]) {
    let output = command_output("ogr2ogr", args, dir);
    assert!(
        output.status.success(),
        "ogr2ogr {args:?} failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
}

/// Features GDAL's spatial filter (`ogrinfo -spat`, which uses the R-tree)
/// finds in a window.
fn gdal_window_count(file: &Path, layer: &str, window: [f64; 4]) -> u64 {
    let dir = file.parent().unwrap();
    let name = file.file_name().unwrap().to_str().unwrap();
    let corners: Vec<String> = window.iter().map(|v| v.to_string()).collect();
    let mut args = vec!["-ro", "-so", "-spat"];
    args.extend(corners.iter().map(String::as_str));
    args.extend([name, layer]);
    let output = command_output("ogrinfo", &args, dir);
    String::from_utf8_lossy(&output.stdout)
        .lines()
        .find_map(|line| line.strip_prefix("Feature Count: "))
        .unwrap_or_else(|| panic!("no feature count from ogrinfo -spat on {layer}"))
        .trim()
        .parse()
        .unwrap()
}

/// SQLite's own check of an R-tree index (`rtreecheck`, rtree.c) and its row
/// count, which must equal the layer's feature count.
fn rtree_check(file: &Path, layer: &str) -> (String, u64) {
    let conn = rusqlite::Connection::open(file).unwrap();
    let name = format!("rtree_{layer}_geom");
    let check: String = conn
        .query_row("SELECT rtreecheck(?1)", [&name], |row| row.get(0))
        .unwrap();
    let rows: i64 = conn
        .query_row(&format!("SELECT count(*) FROM \"{name}\""), [], |row| {
            row.get(0)
        })
        .unwrap();
    (check, rows as u64)
}

// ------------------------------------------------------------- fixtures --

/// Writes an invented lattice of `nx` × `ny` squares of 1 km in EPSG:32631
/// (x from 600 km, y from 20 km: open sea) as GeoJSON, with a text code, two
/// features and a target that depends on them plus a smooth east-west
/// component, rounded to six decimals. Unit 11 has no `x2` (a gap to be skipped).
fn write_lattice_geojson(path: &Path, nx: usize, ny: usize) {
    let mut features = Vec::new();
    for j in 0..ny {
        for i in 0..nx {
            let k = j * nx + i + 1;
            let (x0, y0) = (600_000.0 + i as f64 * 1000.0, 20_000.0 + j as f64 * 1000.0);
            let x1 = ((k * 7) % 11) as f64 / 10.0;
            let x2 = ((k * 3) % 13) as f64 + 0.5;
            let target = 1.0 + 0.8 * x1 - 0.2 * x2
                + 0.6 * ((x0 - 600_000.0) / 1500.0).sin()
                + 0.05 * (k as f64).cos();
            // Six decimals: GDAL sends 15 significant digits to PostgreSQL, so
            // longer values would not reach both copies bit for bit.
            let target = (target * 1e6).round() / 1e6;
            let x2_json = if k == 11 {
                serde_json::Value::Null
            } else {
                x2.into()
            };
            features.push(serde_json::json!({
                "type": "Feature",
                "properties": {"code": format!("U-{k:03}"), "x1": x1, "x2": x2_json, "y": target},
                "geometry": {"type": "Polygon", "coordinates": [[
                    [x0, y0], [x0 + 1000.0, y0], [x0 + 1000.0, y0 + 1000.0], [x0, y0 + 1000.0], [x0, y0]
                ]]}
            }));
        }
    }
    let collection = serde_json::json!({"type": "FeatureCollection", "features": features});
    std::fs::write(path, collection.to_string()).unwrap();
}

/// A GeoPackage of the lattice written by GDAL (layer `units`, key `fid`),
/// without a spatial index so the tests can edit it with plain SQLite.
fn gdal_lattice_gpkg(workdir: &Workdir, name: &str) -> PathBuf {
    let geojson = workdir.path(&format!("{name}.geojson"));
    write_lattice_geojson(&geojson, 8, 6);
    ogr2ogr(
        workdir.root(),
        &[
            "-f",
            "GPKG",
            name,
            geojson.to_str().unwrap(),
            "-nln",
            "units",
            "-a_srs",
            "EPSG:32631",
            "-lco",
            "SPATIAL_INDEX=NO",
        ],
    );
    workdir.path(name)
}

fn lattice_args(file: &str) -> Vec<String> {
    [
        "run",
        "--gpkg",
        file,
        "--layer",
        "units",
        "--target",
        "y",
        "--features",
        "x1,x2",
        "--block-size",
        "2000",
        "--folds",
        "4",
    ]
    .map(String::from)
    .to_vec()
}

fn sha256(path: &Path) -> String {
    let bytes = std::fs::read(path).unwrap();
    Sha256::digest(bytes)
        .iter()
        .map(|byte| format!("{byte:02x}"))
        .collect()
}

/// Names in a directory, to see that nothing (temporary files, journals) is left.
fn listing(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|entry| entry.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

fn geofold(workdir: &Workdir, args: &[String]) -> Output {
    let mut command = workdir.geofold();
    command.args(args);
    run(command)
}

fn stderr(output: &Output) -> String {
    String::from_utf8_lossy(&output.stderr).into_owned()
}

fn rows_written(summary: &serde_json::Value, table: &str) -> u64 {
    summary["results"]["rows_written"]
        .as_array()
        .unwrap()
        .iter()
        .find(|entry| entry[0] == table)
        .unwrap_or_else(|| panic!("no rows_written for {table}: {summary}"))[1]
        .as_u64()
        .unwrap()
}

fn layer(geometry: &str, count: u64, epsg: Option<i32>) -> LayerInfo {
    LayerInfo {
        geometry: geometry.to_string(),
        count,
        epsg,
    }
}

/// The results layers of a file with one job `job` whose runs reported
/// `summaries`; `<job>_blocks` holds `job_blocks` blocks (those of repetition 1
/// of the latest primary run).
fn results_layers(
    job: &str,
    summaries: &[&serde_json::Value],
    job_blocks: u64,
) -> BTreeMap<String, LayerInfo> {
    let total = |table: &str| summaries.iter().map(|s| rows_written(s, table)).sum();
    let last = summaries.last().unwrap();
    let runs: u64 = summaries
        .iter()
        .map(|s| s["runs"].as_array().unwrap().len() as u64)
        .sum();
    let epsg = Some(32631);
    [
        ("blocks", layer("Polygon", total("blocks"), epsg)),
        (
            job,
            layer("Multi Polygon", last["units_used"].as_u64().unwrap(), epsg),
        ),
        (&format!("{job}_blocks"), layer("Polygon", job_blocks, epsg)),
        ("schema_version", layer("None", 1, None)),
        ("store_settings", layer("None", 2, None)),
        ("runs", layer("None", runs, None)),
        ("fold_members", layer("None", total("fold_members"), None)),
        ("predictions", layer("None", total("predictions"), None)),
        ("unit_errors", layer("None", total("unit_errors"), None)),
        ("fold_scores", layer("None", total("fold_scores"), None)),
        ("run_scores", layer("None", total("run_scores"), None)),
    ]
    .into_iter()
    .map(|(name, info)| (name.to_string(), info))
    .collect()
}

/// Two floating-point values read through different tools agree to 1e-12
/// relative (text round trips may differ in the last digit).
fn assert_close(a: &str, b: &str, what: &str) {
    let (x, y): (f64, f64) = (a.parse().unwrap(), b.parse().unwrap());
    assert!(
        (x - y).abs() <= 1e-12 * x.abs().max(y.abs()).max(1.0),
        "{what}: {a} vs {b}"
    );
}

// ---------------------------------------------------------------- tests --

#[test]
fn demo_with_no_arguments_writes_a_geopackage_gdal_opens() {
    let workdir = Workdir::new();
    let output = geofold(&workdir, &["demo".to_string()]);
    assert_eq!(code(&output), 0);
    let text = String::from_utf8_lossy(&output.stdout);
    assert!(text.contains("spatial vs random folds"), "{text}");
    assert!(
        text.contains("open geofold-demo.gpkg in QGIS"),
        "names the file to open:\n{text}"
    );
    let file = workdir.path("geofold-demo.gpkg");
    assert_eq!(listing(workdir.root()), ["geofold-demo.gpkg"]);

    // The same again as JSON (the file is replaced, not appended to).
    let output = geofold(&workdir, &["demo".to_string(), "--json".to_string()]);
    assert_eq!(code(&output), 0);
    let summary = json(&output);
    // One repetition, and the random comparison run has no blocks: every
    // block written is one of the per-unit layer's run.
    let mut expected = results_layers(
        "demo_nitrate",
        &[&summary],
        rows_written(&summary, "blocks"),
    );
    expected.insert(
        "subcatchments".into(),
        layer(
            "Multi Polygon",
            summary["units_read"].as_u64().unwrap(),
            Some(32631),
        ),
    );
    assert_eq!(gdal_layers(&file), expected);
    gdal_validates(&file);
    for layer in [
        "subcatchments",
        "blocks",
        "demo_nitrate",
        "demo_nitrate_blocks",
    ] {
        assert_eq!(
            rtree_check(&file, layer),
            ("ok".to_string(), expected[layer].count),
            "R-tree of {layer}"
        );
    }

    // SQLite file format, "The Database Header": application_id at offset 68,
    // user_version at 60, both big-endian. GeoPackage clause 1.1.1.1.1: "GPKG",
    // and 10300 for 1.3.0.
    let bytes = std::fs::read(&file).unwrap();
    assert_eq!(&bytes[68..72], b"GPKG");
    assert_eq!(u32::from_be_bytes(bytes[60..64].try_into().unwrap()), 10300);
    let conn = rusqlite::Connection::open(&file).unwrap();
    // GeoPackage Requirements 6 and 7: integrity_check says ok, foreign_key_check is empty.
    let integrity: String = conn
        .query_row("PRAGMA integrity_check", [], |row| row.get(0))
        .unwrap();
    assert_eq!(integrity, "ok");
    let dangling: i64 = conn
        .query_row("SELECT count(*) FROM pragma_foreign_key_check", [], |row| {
            row.get(0)
        })
        .unwrap();
    assert_eq!(dangling, 0);
    // The per-unit layer is the latest primary run, and GDAL reads its rows.
    let primary = summary["runs"][0]["run_id"].as_str().unwrap().to_string();
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        [primary.as_str()]
    );
    assert_eq!(
        gdal_sql(
            &file,
            &format!(
                "SELECT count(*) FROM runs WHERE status = 'succeeded' AND run_id = '{primary}'"
            )
        ),
        ["1"]
    );
}

#[test]
fn gdal_copy_of_the_postgis_table_gives_the_same_units_folds_and_scores() {
    let _demo = DEMO_SCHEMAS.lock().unwrap_or_else(|e| e.into_inner());
    let workdir = Workdir::new();
    let uri = db_uri();
    let output = geofold(&workdir, &["demo".into(), "--db".into(), uri.clone()]);
    assert_eq!(code(&output), 0);
    let schema = unique_name("gpkg_same");
    psql_script(&format!(
        "CREATE SCHEMA {schema};
         CREATE TABLE {schema}.units AS SELECT * FROM demo.subcatchments;
         ALTER TABLE {schema}.units ADD PRIMARY KEY (id);"
    ));
    // GDAL as the outside writer: PostGIS table -> GeoPackage.
    ogr2ogr(
        workdir.root(),
        &[
            "-f",
            "GPKG",
            "units.gpkg",
            &format!("PG:{uri}"),
            &format!("{schema}.units"),
            "-nln",
            "units",
        ],
    );
    let source_hash = sha256(&workdir.path("units.gpkg"));
    let common_args = |extra: &[&str]| -> Vec<String> {
        let mut args: Vec<String> = ["run", "--target", TARGET, "--features", FEATURES]
            .map(String::from)
            .to_vec();
        args.extend(
            [
                "--block-size",
                "4000",
                "--also-random",
                "--repeats",
                "2",
                "--job",
                "units",
                "--json",
            ]
            .map(String::from),
        );
        args.extend(extra.iter().map(|s| s.to_string()));
        args
    };
    let postgis = geofold(
        &workdir,
        &common_args(&[
            "--db",
            &uri,
            "--table",
            &format!("{schema}.units"),
            "--results-schema",
            &format!("{schema}_results"),
        ]),
    );
    assert_eq!(code(&postgis), 0);
    let gpkg = geofold(
        &workdir,
        &common_args(&[
            "--gpkg",
            "units.gpkg",
            "--layer",
            "units",
            "--results-gpkg",
            "results.gpkg",
        ]),
    );
    assert_eq!(code(&gpkg), 0);
    let (postgis, gpkg) = (json(&postgis), json(&gpkg));
    // Same units: the fingerprint covers every id, representative point (bit
    // for bit), target and feature value, in id order.
    for key in [
        "units_read",
        "units_used",
        "units_skipped",
        "skipped",
        "input_fingerprint",
        "comparison",
    ] {
        assert_eq!(postgis[key], gpkg[key], "{key}");
    }
    assert_eq!(gpkg["source"]["id_column"], "id", "GDAL keeps the key name");
    assert_eq!(gpkg["source"]["srs_name"], postgis["source"]["srs_name"]);
    for (a, b) in postgis["runs"]
        .as_array()
        .unwrap()
        .iter()
        .zip(gpkg["runs"].as_array().unwrap())
    {
        for key in ["scheme", "parameters", "pooled", "fold_spread", "folds"] {
            assert_eq!(a[key], b[key], "{key} of the {} run", a["scheme"]);
        }
    }
    // Fold assignments, row for row: PostGIS by psql, the GeoPackage by GDAL.
    let results = workdir.path("results.gpkg");
    for index in 0..2 {
        let pg_run = postgis["runs"][index]["run_id"].as_str().unwrap();
        let gp_run = gpkg["runs"][index]["run_id"].as_str().unwrap();
        let from_postgis: Vec<String> = psql(&format!(
            "SELECT repetition, unit_id, fold FROM {schema}_results.fold_members
             WHERE run_id = '{pg_run}' ORDER BY repetition, unit_id"
        ))
        .lines()
        .map(str::to_string)
        .collect();
        let from_gpkg = gdal_sql(
            &results,
            &format!(
                "SELECT repetition, unit_id, fold FROM fold_members WHERE run_id = '{gp_run}'
                 ORDER BY repetition, unit_id"
            ),
        );
        assert_eq!(from_postgis.len(), 2 * 382);
        assert_eq!(from_postgis, from_gpkg, "fold_members of run {index}");
    }
    let pg_run = postgis["runs"][0]["run_id"].as_str().unwrap();
    let gp_run = gpkg["runs"][0]["run_id"].as_str().unwrap();
    assert_eq!(
        psql(&format!(
            "SELECT repetition, block_col, block_row, fold, n_units FROM {schema}_results.blocks
             WHERE run_id = '{pg_run}' ORDER BY 1, 2, 3"
        ))
        .lines()
        .map(str::to_string)
        .collect::<Vec<_>>(),
        gdal_sql(
            &results,
            &format!(
                "SELECT repetition, block_col, block_row, fold, n_units FROM blocks
                 WHERE run_id = '{gp_run}' ORDER BY 1, 2, 3"
            )
        )
    );
    // The results file opens in GDAL; the per-unit layer is named after the
    // job even though the source layer has that name (it lives in another file).
    let rep1_blocks = psql(&format!(
        "SELECT count(*) FROM {schema}_results.blocks WHERE run_id = '{pg_run}' AND repetition = 1"
    ));
    let expected = results_layers("units", &[&gpkg], rep1_blocks.parse().unwrap());
    assert_eq!(gdal_layers(&results), expected);
    gdal_validates(&results);
    // The source file is only read.
    assert_eq!(sha256(&workdir.path("units.gpkg")), source_hash);
    psql(&format!(
        "DROP SCHEMA {schema} CASCADE; DROP SCHEMA {schema}_results CASCADE"
    ));
}

#[test]
fn text_ids_from_geojson_through_gdal_match_postgis() {
    let workdir = Workdir::new();
    let uri = db_uri();
    let geojson = workdir.path("lattice.geojson");
    write_lattice_geojson(&geojson, 8, 6);
    let schema = unique_name("gpkg_text");
    psql(&format!("CREATE SCHEMA {schema}"));
    // GDAL writes both copies of the same GeoJSON.
    ogr2ogr(
        workdir.root(),
        &[
            "-f",
            "PostgreSQL",
            &format!("PG:{uri}"),
            "lattice.geojson",
            "-nln",
            &format!("{schema}.units"),
            "-a_srs",
            "EPSG:32631",
            "-lco",
            "GEOMETRY_NAME=geom",
        ],
    );
    ogr2ogr(
        workdir.root(),
        &[
            "-f",
            "GPKG",
            "lattice.gpkg",
            "lattice.geojson",
            "-nln",
            "units",
            "-a_srs",
            "EPSG:32631",
        ],
    );
    let mut gpkg_args = lattice_args("lattice.gpkg");
    gpkg_args.extend(["--id", "code", "--also-random", "--json"].map(String::from));
    let gpkg = geofold(&workdir, &gpkg_args);
    assert_eq!(code(&gpkg), 0);
    let mut pg_args: Vec<String> = gpkg_args
        .iter()
        .map(String::clone)
        .filter(|arg| !["--gpkg", "lattice.gpkg", "--layer", "units"].contains(&arg.as_str()))
        .collect();
    pg_args.extend([
        "--db".to_string(),
        uri.clone(),
        "--table".to_string(),
        format!("{schema}.units"),
        "--results-schema".to_string(),
        format!("{schema}_results"),
        "--job".to_string(),
        "units_cv".to_string(),
    ]);
    let postgis = geofold(&workdir, &pg_args);
    assert_eq!(code(&postgis), 0);
    let (postgis, gpkg) = (json(&postgis), json(&gpkg));
    assert_eq!(gpkg["source"]["id_kind"], "text");
    assert_eq!(
        gpkg["job"], "units_cv",
        "default job beside the source layer"
    );
    assert_eq!(gpkg["units_read"], 48);
    assert_eq!(gpkg["skipped"]["missing_feature"]["x2"], 1);
    for key in ["units_used", "skipped", "input_fingerprint", "comparison"] {
        assert_eq!(postgis[key], gpkg[key], "{key}");
    }
    for index in 0..2 {
        assert_eq!(
            postgis["runs"][index]["folds"],
            gpkg["runs"][index]["folds"]
        );
    }
    let gp_run = gpkg["runs"][0]["run_id"].as_str().unwrap();
    let pg_run = postgis["runs"][0]["run_id"].as_str().unwrap();
    let file = workdir.path("lattice.gpkg");
    assert_eq!(
        gdal_sql(
            &file,
            &format!("SELECT unit_id, fold FROM fold_members WHERE run_id = '{gp_run}' ORDER BY unit_id")
        ),
        psql(&format!(
            "SELECT unit_id, fold FROM {schema}_results.fold_members WHERE run_id = '{pg_run}' ORDER BY unit_id COLLATE \"C\""
        ))
        .lines()
        .collect::<Vec<_>>()
    );
    // Source and results share the file; GDAL lists both.
    let layers = gdal_layers(&file);
    assert_eq!(layers["units"], layer("Polygon", 48, Some(32631)));
    assert_eq!(layers["units_cv"], layer("Polygon", 47, Some(32631)));
    gdal_validates(&file);
    // A window over cells i, j = 0..2 of the lattice (its edges inside cells):
    // 9 squares, of which unit 11 (i = 2, j = 1) was skipped for its missing x2.
    let window = [600_500.0, 20_500.0, 602_500.0, 22_500.0];
    assert_eq!(gdal_window_count(&file, "units", window), 9);
    assert_eq!(gdal_window_count(&file, "units_cv", window), 8);
    assert_eq!(rtree_check(&file, "units_cv"), ("ok".to_string(), 47));
    psql(&format!(
        "DROP SCHEMA {schema} CASCADE; DROP SCHEMA {schema}_results CASCADE"
    ));
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
    let conn = rusqlite::Connection::open(workdir.path(file)).unwrap();
    conn.execute_batch(sql).unwrap();
}

fn set_geometry(workdir: &Workdir, file: &str, fid: i64, change: fn(Vec<u8>) -> Vec<u8>) {
    let conn = rusqlite::Connection::open(workdir.path(file)).unwrap();
    let blob: Vec<u8> = conn
        .query_row("SELECT geom FROM units WHERE fid = ?1", [fid], |row| {
            row.get(0)
        })
        .unwrap();
    conn.execute(
        "UPDATE units SET geom = ?1 WHERE fid = ?2",
        rusqlite::params![change(blob), fid],
    )
    .unwrap();
}

fn lattice(workdir: &Workdir, file: &str) {
    gdal_lattice_gpkg(workdir, file);
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
                set_geometry(workdir, file, 7, |mut blob| {
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
                set_geometry(workdir, file, 9, |mut blob| {
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
            name: "job that would replace the source layer",
            make: lattice,
            replace: &[],
            extra: &["--job", "units"],
            code: 65,
            says: &["would replace units, the source layer", "--job"],
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
    let output = geofold(&control, &lattice_args("control.gpkg"));
    assert_eq!(code(&output), 0, "control: {}", stderr(&output));
    for (index, case) in cases.iter().enumerate() {
        let workdir = Workdir::new();
        let file = format!("case{index}.gpkg");
        (case.make)(&workdir, &file);
        let before: Vec<(String, String)> = listing(workdir.root())
            .into_iter()
            .map(|name| {
                let hash = sha256(&workdir.path(&name));
                (name, hash)
            })
            .collect();
        let output = geofold(&workdir, &case.args(&file));
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
        // Nothing written: the same files with the same bytes.
        let after: Vec<(String, String)> = listing(workdir.root())
            .into_iter()
            .map(|name| {
                let hash = sha256(&workdir.path(&name));
                (name, hash)
            })
            .collect();
        assert_eq!(before, after, "{}: files changed", case.name);
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
    set_geometry(&workdir, file, 12, |blob| blob[..10].to_vec());
    let output = geofold(&workdir, &lattice_args(file));
    assert_eq!(code(&output), 65);
    let message = stderr(&output);
    for part in [
        "rows.gpkg:units.x1 (row id=3)",
        "rows.gpkg:units.x1 (row id=4)",
        "rows.gpkg:units.y (row id=30): a BLOB of 1 bytes",
        "rows.gpkg:units.geom (row id=12)",
    ] {
        assert!(message.contains(part), "{part:?} in {message}");
    }
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
    let output = geofold(&workdir, &args);
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    let summary = json(&output);
    assert_eq!(summary["units_read"], 49);
    assert_eq!(summary["skipped"]["empty_geometry"], 1);
    assert_eq!(summary["skipped"]["missing_feature"]["x2"], 1);
    assert_eq!(summary["units_used"], 47);
}

#[test]
fn a_locked_file_fails_after_the_busy_timeout() {
    let workdir = Workdir::new();
    let file = "locked.gpkg";
    lattice(&workdir, file);
    let hash = sha256(&workdir.path(file));
    let conn = rusqlite::Connection::open(workdir.path(file)).unwrap();
    conn.execute_batch("BEGIN EXCLUSIVE").unwrap();
    let started = Instant::now();
    let output = geofold(&workdir, &lattice_args(file));
    let waited = started.elapsed();
    conn.execute_batch("ROLLBACK").unwrap();
    drop(conn);
    assert_eq!(code(&output), 75, "{}", stderr(&output));
    let message = stderr(&output);
    assert!(
        message.contains("locked.gpkg") && message.contains("locked by another program"),
        "{message}"
    );
    // The busy timeout is 5 s (src/adapters/gpkg/mod.rs BUSY_TIMEOUT).
    assert!(waited >= Duration::from_millis(4500), "waited {waited:?}");
    assert_eq!(sha256(&workdir.path(file)), hash);

    // A results file locked by another writer: the source is free, the store is not.
    let results = "results.gpkg";
    let mut args = lattice_args(file);
    args.extend(["--results-gpkg", results].map(String::from));
    assert_eq!(code(&geofold(&workdir, &args)), 0);
    let hash = sha256(&workdir.path(results));
    let conn = rusqlite::Connection::open(workdir.path(results)).unwrap();
    conn.execute_batch("BEGIN EXCLUSIVE").unwrap();
    let output = geofold(&workdir, &args);
    conn.execute_batch("ROLLBACK").unwrap();
    drop(conn);
    assert_eq!(code(&output), 75, "{}", stderr(&output));
    assert!(stderr(&output).contains("results.gpkg"));
    assert_eq!(sha256(&workdir.path(results)), hash);
}

#[test]
fn a_second_run_appends_and_the_unit_layer_shows_the_latest() {
    let workdir = Workdir::new();
    let demo = geofold(&workdir, &["demo".into(), "--json".into()]);
    assert_eq!(code(&demo), 0);
    let demo = json(&demo);
    let file = workdir.path("geofold-demo.gpkg");
    let first = demo["runs"][0]["run_id"].as_str().unwrap().to_string();
    let mut args: Vec<String> = [
        "run",
        "--gpkg",
        "geofold-demo.gpkg",
        "--layer",
        "subcatchments",
        "--id",
        "id",
        "--target",
        TARGET,
        "--features",
        FEATURES,
        "--block-size",
        "3000",
        "--seed",
        "7",
        "--job",
        "demo_nitrate",
        "--json",
    ]
    .map(String::from)
    .to_vec();
    let second = geofold(&workdir, &args);
    assert_eq!(code(&second), 0);
    let second = json(&second);
    let latest = second["runs"][0]["run_id"].as_str().unwrap().to_string();
    // Earlier rows stay; the layer shows the new run; GDAL agrees on every count.
    assert_eq!(
        gdal_sql(
            &file,
            &format!("SELECT count(*) FROM predictions WHERE run_id = '{first}'")
        ),
        [demo["units_used"].to_string()]
    );
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        [latest.as_str()]
    );
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate_blocks"),
        [latest.as_str()]
    );
    let mut expected = results_layers(
        "demo_nitrate",
        &[&demo, &second],
        rows_written(&second, "blocks"),
    );
    expected.insert(
        "subcatchments".into(),
        layer("Multi Polygon", 384, Some(32631)),
    );
    assert_eq!(gdal_layers(&file), expected);
    gdal_validates(&file);

    // A random run of the same job also becomes the layer, with no blocks.
    let position = args.iter().position(|arg| arg == "--block-size").unwrap();
    args[position] = "--scheme".into();
    args[position + 1] = "random".into();
    let third = geofold(&workdir, &args);
    assert_eq!(code(&third), 0);
    let third = json(&third);
    let layers = gdal_layers(&file);
    assert_eq!(layers["demo_nitrate_blocks"].count, 0);
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        [third["runs"][0]["run_id"].as_str().unwrap().to_string()]
    );
    gdal_validates(&file);
}

#[test]
fn a_failed_run_leaves_no_result_rows() {
    let workdir = Workdir::new();
    assert_eq!(code(&geofold(&workdir, &["demo".into()])), 0);
    let file = workdir.path("geofold-demo.gpkg");
    // GDAL as the writer: a constant feature makes every fold's design rank-deficient.
    let output = command_output(
        "ogrinfo",
        &[
            "geofold-demo.gpkg",
            "-sql",
            "UPDATE subcatchments SET elevation_m = 100",
        ],
        workdir.root(),
    );
    assert!(output.status.success());
    let count = |table: &str| gdal_sql(&file, &format!("SELECT count(*) FROM {table}"));
    let tables = [
        "predictions",
        "unit_errors",
        "fold_scores",
        "run_scores",
        "blocks",
        "demo_nitrate",
        "demo_nitrate_blocks",
    ];
    let before: Vec<Vec<String>> = tables.iter().map(|t| count(t)).collect();
    let layer_run = gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate");
    let args: Vec<String> = [
        "run",
        "--gpkg",
        "geofold-demo.gpkg",
        "--layer",
        "subcatchments",
        "--id",
        "id",
        "--target",
        TARGET,
        "--features",
        FEATURES,
        "--block-size",
        "4000",
        "--also-random",
        "--job",
        "demo_nitrate",
    ]
    .map(String::from)
    .to_vec();
    let output = geofold(&workdir, &args);
    assert_eq!(code(&output), 65, "{}", stderr(&output));
    assert!(
        stderr(&output).contains("cannot fit"),
        "{}",
        stderr(&output)
    );
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
    gdal_validates(&file);
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
    let args = |scheme: &str| -> Vec<String> {
        [
            "run",
            "--gpkg",
            "points.gpkg",
            "--target",
            "y",
            "--features",
            "a,b",
            "--scheme",
            scheme,
            "--block-size",
            "1000",
            "--folds",
            "3",
        ]
        .map(String::from)
        .to_vec()
    };
    let output = geofold(&workdir, &args("grid"));
    assert_eq!(code(&output), 64);
    let message = stderr(&output);
    assert!(
        message.contains("points.gpkg:points.geom has SRID 4326")
            && message.contains("ogr2ogr -t_srs EPSG:N"),
        "{message}"
    );
    assert_eq!(sha256(&workdir.path("points.gpkg")), hash);
    // --distance-srid cannot help without PostGIS, and says so.
    let mut with_srid = args("grid");
    with_srid.extend(["--distance-srid", "32631"].map(String::from));
    let output = geofold(&workdir, &with_srid);
    assert_eq!(code(&output), 64);
    assert!(stderr(&output).contains("reproject the file first"));
    // Random folds ignore distance, so they run.
    let output = geofold(&workdir, &args("random"));
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    let layers = gdal_layers(&workdir.path("points.gpkg"));
    assert_eq!(layers["points_cv"], layer("Point", 20, Some(4326)));
}

#[test]
fn results_of_a_postgis_source_go_to_a_geopackage_through_export() {
    let _demo = DEMO_SCHEMAS.lock().unwrap_or_else(|e| e.into_inner());
    let workdir = Workdir::new();
    let uri = db_uri();
    let output = geofold(&workdir, &["demo".into(), "--db".into(), uri.clone()]);
    assert_eq!(code(&output), 0);

    // --results-gpkg with a PostGIS source is refused before anything is written.
    let refused = geofold(
        &workdir,
        &[
            "run",
            "--db",
            &uri,
            "--table",
            "demo.subcatchments",
            "--target",
            TARGET,
            "--features",
            FEATURES,
            "--block-size",
            "4000",
            "--results-gpkg",
            "direct.gpkg",
        ]
        .map(String::from),
    );
    assert_eq!(code(&refused), 64);
    assert!(stderr(&refused).contains("geofold export"));
    assert!(!workdir.path("direct.gpkg").exists());

    let export = |args: &[&str]| {
        let mut all = vec![
            "export".to_string(),
            "--db".to_string(),
            uri.clone(),
            "--results-schema".to_string(),
            "geofold_demo".to_string(),
        ];
        all.extend(args.iter().map(|s| s.to_string()));
        geofold(&workdir, &all)
    };
    let output = export(&["--job", "demo_nitrate", "--to", "shared.gpkg"]);
    assert_eq!(code(&output), 0);
    let report = json(&output);
    let runs: Vec<String> = report["runs"]
        .as_array()
        .unwrap()
        .iter()
        .map(|id| id.as_str().unwrap().to_string())
        .collect();
    assert_eq!(runs.len(), 2, "the run and its random comparison");
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
    let primary = &runs[0];
    let epsg = Some(32631);
    let expected: BTreeMap<String, LayerInfo> = [
        ("blocks", layer("Polygon", pg_count("blocks"), epsg)),
        (
            "demo_nitrate",
            layer(
                "Multi Polygon",
                psql("SELECT count(*) FROM geofold_demo.demo_nitrate")
                    .parse()
                    .unwrap(),
                epsg,
            ),
        ),
        (
            "demo_nitrate_blocks",
            layer(
                "Polygon",
                psql("SELECT count(*) FROM geofold_demo.demo_nitrate_blocks")
                    .parse()
                    .unwrap(),
                epsg,
            ),
        ),
        ("schema_version", layer("None", 1, None)),
        ("store_settings", layer("None", 2, None)),
        ("runs", layer("None", 2, None)),
        (
            "fold_members",
            layer("None", pg_count("fold_members"), None),
        ),
        ("predictions", layer("None", pg_count("predictions"), None)),
        ("unit_errors", layer("None", pg_count("unit_errors"), None)),
        ("fold_scores", layer("None", pg_count("fold_scores"), None)),
        ("run_scores", layer("None", 2, None)),
    ]
    .into_iter()
    .map(|(name, info)| (name.to_string(), info))
    .collect();
    assert_eq!(gdal_layers(&file), expected);
    gdal_validates(&file);
    // Values survive: PostGIS (psql) against GDAL's reading of the export.
    let checks = [
        (
            "run_scores",
            "n_predictions, rmse, mae, bias, r2, rmse_fold_sd",
        ),
        ("fold_scores", "count(*), sum(rmse), sum(n_test), min(r2)"),
        ("predictions", "count(*), sum(residual), sum(squared_error)"),
        ("unit_errors", "count(*), sum(predicted), max(unit_key)"),
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
                assert_close(x, y, &format!("{table} {columns} of {run}"));
            }
        }
    }
    assert_eq!(
        gdal_sql(&file, "SELECT DISTINCT run_id FROM demo_nitrate"),
        [primary.as_str()]
    );
    // The geometries are PostGIS's: GDAL's extent of the per-unit layer equals ST_Extent.
    let extent = command_output(
        "ogrinfo",
        &["-ro", "-so", "shared.gpkg", "demo_nitrate"],
        workdir.root(),
    );
    let extent = String::from_utf8_lossy(&extent.stdout);
    let extent = extent
        .lines()
        .find_map(|line| line.strip_prefix("Extent: "))
        .unwrap()
        .to_string();
    let pg_extent = psql(
        "SELECT format('(%s, %s) - (%s, %s)', to_char(ST_XMin(e), 'FM999999990.000000'), to_char(ST_YMin(e), 'FM999999990.000000'), \
         to_char(ST_XMax(e), 'FM999999990.000000'), to_char(ST_YMax(e), 'FM999999990.000000'))
         FROM (SELECT ST_Extent(geom) AS e FROM geofold_demo.demo_nitrate) x",
    );
    assert_eq!(extent, pg_extent);

    // The same run again is refused, leaving the file as it was.
    let hash = sha256(&file);
    let again = export(&["--run", primary, "--to", "shared.gpkg"]);
    assert_eq!(code(&again), 65);
    assert!(stderr(&again).contains("is already in it"));
    assert_eq!(sha256(&file), hash);
    // Bad and unknown run ids.
    assert_eq!(code(&export(&["--run", "17", "--to", "x.gpkg"])), 64);
    let unknown = export(&[
        "--run",
        "00000000-0000-4000-8000-000000000000",
        "--to",
        "x.gpkg",
    ]);
    assert_eq!(code(&unknown), 66);
    assert!(!workdir.path("x.gpkg").exists());
}
