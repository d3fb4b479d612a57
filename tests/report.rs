//! `geofold report`: one self-contained HTML file of a stored run, on
//! PostGIS and on GeoPackage.
//!
//! - A run on PostGIS (with an inspection of its job) and the same run copied
//!   into a GeoPackage by `geofold export` give byte-identical reports and
//!   maps: the export copies every row, the job's inspections and the unit
//!   geometries, the report is a pure function of them, and it names no store
//!   (nothing legitimately differs).
//! - The report opens in headless Chromium with no console message
//!   (`common/chromium.rs`); a screenshot of the demo's report shows the
//!   fold colours of the palette and is kept for the README
//!   (`target/report-screenshot.png`).
//! - Inspections, history and gates: a job with an inspection and three gated
//!   runs, one breaching, reports the semivariogram with its fitted model and
//!   advice, the correlogram, the held-out Moran's I as stored, and the
//!   history with the breach marked, on both stores.
//! - Runs of every scheme (hexagonal grid, k-means, groups, leave-one-out,
//!   NNDM, kNNDM) report with their four maps and map on both stores; a run
//!   with prediction locations shows the nearest-distance distributions, their
//!   medians as PostgreSQL's `percentile_cont` gives them, in both the
//!   distributions and the section on how far test units were from training.
//! - A store without a newer table is read as it is.
//! - Bad input: an unknown run or job (66, named), a fold the run does not
//!   have (64), an unwritable file (73, nothing left).

mod common;

use common::chromium::{dom_without_console_errors, screenshot};
use common::fixtures::{create_units, IdType, UNITS_COLUMNS, UNITS_GRID};
use common::stores::{Store, Stores, BOTH};
use common::{assert_contains, code, db_uri, fails, ok_json, Workdir};
use geofold::render::palette::FOLD_COLOURS;

fn store_args(stores: &Stores, store: Store, results_gpkg: &str) -> Vec<String> {
    match store {
        Store::Postgis => vec![
            "--db".into(),
            db_uri(),
            "--results-schema".into(),
            stores.pg.results.clone(),
        ],
        Store::Gpkg => vec!["--results-gpkg".into(), results_gpkg.into()],
    }
}

fn geofold(
    workdir: &Workdir,
    command: &str,
    store: Vec<String>,
    args: &[&str],
) -> std::process::Output {
    let mut all = vec![command.to_string()];
    all.extend(store);
    all.extend(args.iter().map(|a| a.to_string()));
    workdir.run(&all)
}

/// Asserts that a `report --json` document lists every section named.
fn assert_sections(doc: &serde_json::Value, wanted: &[&str]) {
    let sections = doc["sections"].as_array().expect("sections");
    for section in wanted {
        assert!(
            sections.iter().any(|s| s == section),
            "no section {section} in {doc}"
        );
    }
}

fn units_stores(label: &str) -> Stores {
    Stores::from_postgis(label, "units", |s| {
        create_units(s, "units", IdType::Integer)
    })
}

#[test]
fn a_postgis_run_and_its_geopackage_export_report_byte_for_byte_alike() {
    let stores = units_stores("report_same");
    // An inspection of the job first: export carries the job's inspections.
    let inspected = stores.workdir.run(
        &[
            &[
                "inspect",
                "--db",
                &db_uri(),
                "--table",
                &format!("{}.units", stores.pg.source),
                "--results-schema",
                &stores.pg.results,
            ][..],
            UNITS_COLUMNS,
            &[
                "--job",
                "units",
                "--weights",
                "knn:4",
                "--permutations",
                "99",
            ],
        ]
        .concat(),
    );
    assert_eq!(code(&inspected), 0, "{}", common::stderr(&inspected));
    let pg = stores.run_one(Store::Postgis, &[UNITS_GRID, &["--also-random"]].concat());
    assert_eq!(pg.code(), 0, "{}", pg.stderr());
    let run = pg.run_id(0);
    let workdir = &stores.workdir;
    let exported = workdir.run(&[
        "export",
        "--db",
        &db_uri(),
        "--results-schema",
        &stores.pg.results,
        "--run",
        &run,
        "--to",
        "copy.gpkg",
    ]);
    assert_eq!(code(&exported), 0, "{}", common::stderr(&exported));
    let mut pages = Vec::new();
    for (store, name) in [(Store::Postgis, "pg"), (Store::Gpkg, "gpkg")] {
        let file = format!("{name}.html");
        let doc = ok_json(&geofold(
            workdir,
            "report",
            store_args(&stores, store, "copy.gpkg"),
            &[
                "--run",
                &run,
                "--to",
                &file,
                "--target-unit",
                "mg/L",
                "--json",
            ],
        ));
        assert_eq!(doc["units_drawn"], 36);
        assert_eq!(doc["maps"].as_array().unwrap().len(), 4, "{doc}");
        assert_sections(
            &doc,
            &[
                "settings",
                "scores",
                "comparison",
                "maps",
                "coefficients",
                "autocorrelation",
            ],
        );
        pages.push(std::fs::read(workdir.path(&file)).unwrap());
        for layer in ["folds", "split", "error", "residual"] {
            let svg = format!("{name}-{layer}.svg");
            ok_json(&geofold(
                workdir,
                "map",
                store_args(&stores, store, "copy.gpkg"),
                &["--run", &run, "--layer", layer, "--to", &svg, "--json"],
            ));
        }
    }
    assert!(pages[0] == pages[1], "the two reports differ");
    for layer in ["folds", "split", "error", "residual"] {
        let a = std::fs::read(workdir.path(&format!("pg-{layer}.svg"))).unwrap();
        let b = std::fs::read(workdir.path(&format!("gpkg-{layer}.svg"))).unwrap();
        assert!(a == b, "the {layer} maps differ");
    }
    let page = String::from_utf8(pages.remove(0)).unwrap();
    // The comparison run's pooled RMSE is the one stored (psql), as the report prints it.
    let random_rmse: f64 = stores
        .pg
        .query(&format!(
            "SELECT v.value FROM {{r}}.run_score_values v JOIN {{r}}.runs r USING (run_id) \
             WHERE r.primary_run_id = '{run}' AND v.score = 'rmse' AND v.statistic = 'pooled'"
        ))
        .parse()
        .unwrap();
    // Each term's mean estimate over the folds, from the stored coefficients (psql).
    let mean_a: f64 = stores
        .pg
        .query(&format!(
            "SELECT avg(estimate) FROM {{r}}.coefficients WHERE run_id = '{run}' AND term = 'a'"
        ))
        .parse()
        .unwrap();
    assert_contains(
        &page,
        &[
            &format!(
                "<td>a</td><td class=\"num\">3</td><td class=\"num\">{}</td>",
                geofold::render::text::significant(mean_a, 4)
            ),
            &format!(
                "RMSE is {} mg/L",
                geofold::render::text::significant(random_rmse, 4)
            ),
            "square blocks of 200 m",
            "Moran's I of the held-out residuals",
            "Semivariogram of the residuals",
            "Correlogram of the residuals",
        ],
    );
    let dom = dom_without_console_errors(&workdir.path("pg.html"));
    assert_eq!(dom.matches("<figure class=\"map\"").count(), 4);
}

#[test]
fn the_demo_report_opens_in_chromium_and_shows_the_fold_colours() {
    let workdir = Workdir::new();
    // The demo writes its report next to its GeoPackage.
    let demo = ok_json(&workdir.run(&["demo", "--out", "demo.gpkg", "--json"]));
    assert_eq!(demo["report"]["file"], "demo.html");
    assert_eq!(demo["report"]["units_without_geometry"], 0);
    // The same report again from the stored run (--gpkg is --results-gpkg
    // for the reading commands): byte for byte what the demo wrote.
    let doc = ok_json(&workdir.run(&[
        "report",
        "--gpkg",
        "demo.gpkg",
        "--job",
        "demo_nitrate",
        "--to",
        "again.html",
        "--target-unit",
        "mg/L",
        "--json",
    ]));
    assert_eq!(doc["units_without_geometry"], 0);
    assert_eq!(
        std::fs::read(workdir.path("again.html")).unwrap(),
        std::fs::read(workdir.path("demo.html")).unwrap()
    );
    let page = workdir.path("demo.html");
    let dom = dom_without_console_errors(&page);
    for id in [
        "meaning",
        "settings",
        "scores",
        "comparison",
        "test-distances",
        "maps",
        "autocorrelation",
    ] {
        assert!(
            dom.contains(&format!("<section id=\"{id}\"")),
            "no section {id}"
        );
    }
    let shot = workdir.path("shot.png");
    let image = screenshot(&page, &shot, 1100, 3400);
    // The fold layout paints each of the demo's 5 folds in its palette colour
    // over many pixels (its blocks cover the map panel).
    for (fold, colour) in FOLD_COLOURS.iter().take(5).enumerate() {
        let count = (0..image.len())
            .filter(|i| image.colour_at(*i) == (colour.r, colour.g, colour.b))
            .count();
        assert!(
            count > 2000,
            "fold {}: {count} pixels of {colour}",
            fold + 1
        );
    }
    // Kept for the README (docs/report.png is a copy of it).
    let keep = std::path::Path::new(env!("CARGO_TARGET_TMPDIR")).join("report-screenshot.png");
    std::fs::copy(&shot, &keep).unwrap();
    eprintln!("screenshot of the demo report: {}", keep.display());
}

#[test]
fn inspection_history_and_gates_are_reported_on_both_stores() {
    let stores = units_stores("report_history");
    for store in BOTH {
        let source: Vec<String> = match store {
            Store::Postgis => vec![
                "--db".into(),
                db_uri(),
                "--table".into(),
                format!("{}.units", stores.pg.source),
                "--results-schema".into(),
                stores.pg.results.clone(),
            ],
            Store::Gpkg => vec![
                "--gpkg".into(),
                "source.gpkg".into(),
                "--layer".into(),
                "units".into(),
                "--results-gpkg".into(),
                "results.gpkg".into(),
            ],
        };
        let mut inspect = vec!["inspect".to_string()];
        inspect.extend(source);
        inspect.extend(
            [
                UNITS_COLUMNS,
                &[
                    "--job",
                    "units",
                    "--weights",
                    "knn:4",
                    "--permutations",
                    "99",
                    "--json",
                ],
            ]
            .concat()
            .iter()
            .map(|s| s.to_string()),
        );
        ok_json(&stores.workdir.run(&inspect));
        for (gate, expected) in [("rmse<=1000", 0), ("rmse<=1000", 0), ("rmse<=0.001", 1)] {
            let outcome = stores.run_one(store, &[UNITS_GRID, &["--gate", gate]].concat());
            assert_eq!(outcome.code(), expected, "{}", outcome.stderr());
        }
        let file = format!("history-{store:?}.html");
        let doc = ok_json(&geofold(
            &stores.workdir,
            "report",
            store_args(&stores, store, "results.gpkg"),
            &["--job", "units", "--to", &file, "--json"],
        ));
        assert_sections(&doc, &["autocorrelation", "history"]);
        let page = std::fs::read_to_string(stores.workdir.path(&file)).unwrap();
        // The chosen model and the advice as the inspection stored them.
        let advice = stores.query(store, "SELECT advice FROM inspections")[0][0].clone();
        let model = stores.query(store, "SELECT model FROM variogram_fits WHERE chosen = 1");
        assert_contains(
            &page,
            &[
                "Semivariogram of the residuals",
                &format!("Fitted {} model", model[0][0]),
                "Correlogram of",
                "gate rmse&lt;=0.001",
                "Breaches: run 3",
            ],
        );
        assert!(
            page.contains(&*askama_escape(&advice)),
            "{store:?}: advice not in the report"
        );
        dom_without_console_errors(&stores.workdir.path(&file));
    }
}

/// The HTML escaping of the report (`render::text::escape`).
fn askama_escape(text: &str) -> String {
    geofold::render::text::escape(text).into_owned()
}

#[test]
fn bad_runs_folds_and_files_are_refused_with_their_codes() {
    let stores = units_stores("report_bad");
    let both = stores.run_ok(UNITS_GRID);
    for store in BOTH {
        let args = |extra: &[&str]| {
            geofold(
                &stores.workdir,
                "report",
                store_args(&stores, store, "results.gpkg"),
                extra,
            )
        };
        let unknown = "00000000-0000-4000-8000-00000000abcd";
        assert_contains(
            &fails(&args(&["--run", unknown, "--to", "r.html"]), 66),
            &[unknown],
        );
        assert_contains(
            &fails(&args(&["--job", "nosuchjob", "--to", "r.html"]), 66),
            &["nosuchjob"],
        );
        let run = both.get(store).run_id(0);
        assert_contains(
            &fails(&args(&["--run", &run, "--fold", "7", "--to", "r.html"]), 64),
            &["--fold 7"],
        );
        fails(&args(&["--run", "not-a-uuid", "--to", "r.html"]), 64);
        assert_contains(
            &fails(&args(&["--run", &run, "--to", "no-such-dir/r.html"]), 73),
            &["no-such-dir/r.html"],
        );
        let left: Vec<String> = std::fs::read_dir(stores.workdir.root())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|name| name.ends_with(".tmp") || name.starts_with("r."))
            .collect();
        assert_eq!(left, Vec::<String>::new());
    }
}

#[test]
fn a_store_without_a_newer_table_is_read_as_it_is() {
    // A store of an earlier results version has no coefficients table; the
    // report leaves that section out and changes nothing in the store.
    let stores = units_stores("report_older");
    let both = stores.run_ok(UNITS_GRID);
    stores.pg.script("DROP TABLE {r}.coefficients CASCADE");
    common::gdal::sqlite_edit(&stores.results_gpkg, "DROP TABLE coefficients");
    for store in BOTH {
        let run = both.get(store).run_id(0);
        let doc = ok_json(&geofold(
            &stores.workdir,
            "report",
            store_args(&stores, store, "results.gpkg"),
            &["--run", &run, "--to", "older.html", "--json"],
        ));
        assert_sections(&doc, &["scores", "maps"]);
        assert!(
            !doc["sections"]
                .as_array()
                .unwrap()
                .iter()
                .any(|s| s == "coefficients"),
            "{doc}"
        );
    }
    assert!(!stores.pg.has_result_relation("coefficients"));
}

/// `{s}.targets` (and layer `targets` of source.gpkg): 10 × 10 prediction
/// points 70 m apart from (500010, 5000010), inside the units' area and up
/// to about 100 m beyond it.
fn add_targets(stores: &Stores) {
    stores.pg.script(
        "CREATE TABLE {s}.targets (id integer PRIMARY KEY, geom geometry(Point, 32631));
         INSERT INTO {s}.targets
         SELECT 1 + 10*i + j, ST_SetSRID(ST_MakePoint(500010 + 70*i, 5000010 + 70*j), 32631)
         FROM generate_series(0, 9) i, generate_series(0, 9) j;",
    );
    common::gdal::ogr2ogr(
        stores.workdir.root(),
        &[
            "-f",
            "GPKG",
            "-update",
            "source.gpkg",
            &format!("PG:{}", db_uri()),
            &format!("{}.targets", stores.pg.source),
            "-nln",
            "targets",
        ],
    );
}

/// The prediction-location options of `store` for the targets of [`add_targets`].
fn targets(store: Store) -> [&'static str; 2] {
    match store {
        Store::Postgis => ["--prediction-table", "{s}.targets"],
        Store::Gpkg => ["--prediction-layer", "targets"],
    }
}

#[test]
fn runs_of_every_scheme_report_and_map_on_both_stores() {
    let stores = units_stores("report_schemes");
    add_targets(&stores);
    let schemes: [&[&str]; 6] = [
        &[
            "--scheme",
            "grid",
            "--block-shape",
            "hex",
            "--block-size",
            "200",
            "--folds",
            "3",
        ],
        &["--scheme", "kmeans", "--folds", "3"],
        &[
            "--scheme",
            "group",
            "--group-column",
            "label",
            "--folds",
            "3",
        ],
        &["--scheme", "loo"],
        &["--scheme", "nndm"],
        &["--scheme", "knndm", "--folds", "3"],
    ];
    for store in BOTH {
        for scheme in schemes {
            let matching = scheme[1].ends_with("nndm");
            let mut args = [UNITS_COLUMNS, scheme].concat();
            if matching {
                args.extend(targets(store));
            }
            let outcome = stores.run_one(store, &args);
            assert_eq!(outcome.code(), 0, "{scheme:?}: {}", outcome.stderr());
            let run = outcome.run_id(0);
            let doc = ok_json(&geofold(
                &stores.workdir,
                "report",
                store_args(&stores, store, "results.gpkg"),
                &["--run", &run, "--to", "scheme.html", "--json"],
            ));
            assert_eq!(doc["units_drawn"], 36, "{scheme:?}: {doc}");
            assert_eq!(
                doc["maps"].as_array().unwrap().len(),
                4,
                "{scheme:?}: {doc}"
            );
            if matching {
                assert_sections(&doc, &["distances"]);
            }
            let page = std::fs::read_to_string(stores.workdir.path("scheme.html")).unwrap();
            assert_contains(&page, &[&format!("<dd>{} (", scheme[1])]);
            ok_json(&geofold(
                &stores.workdir,
                "map",
                store_args(&stores, store, "results.gpkg"),
                &[
                    "--run",
                    &run,
                    "--layer",
                    "folds",
                    "--to",
                    "scheme.svg",
                    "--json",
                ],
            ));
            let svg = std::fs::read_to_string(stores.workdir.path("scheme.svg")).unwrap();
            roxmltree::Document::parse(&svg)
                .unwrap_or_else(|e| panic!("{scheme:?}: the fold map is not XML: {e}"));
        }
    }
}

#[test]
fn nearest_distances_of_a_run_with_prediction_locations_are_reported_on_both_stores() {
    let stores = units_stores("report_distances");
    add_targets(&stores);
    for store in BOTH {
        let outcome = stores.run_one(store, &[UNITS_GRID, &targets(store)].concat());
        assert_eq!(outcome.code(), 0, "{}", outcome.stderr());
        let run = outcome.run_id(0);
        let file = format!("distances-{store:?}.html");
        let doc = ok_json(&geofold(
            &stores.workdir,
            "report",
            store_args(&stores, store, "results.gpkg"),
            &["--run", &run, "--to", &file, "--json"],
        ));
        assert_sections(&doc, &["distances", "test-distances"]);
        // The medians as PostgreSQL's percentile_cont computes them over the
        // stored distances (the GeoPackage run stores the same distances).
        let medians = stores.pg.rows(
            "SELECT kind, percentile_cont(0.5) WITHIN GROUP (ORDER BY distance)
             FROM {r}.nearest_distances WHERE (kind = 'cv' AND repetition = 1) OR kind = 'prediction'
             GROUP BY kind ORDER BY kind",
        );
        assert_eq!(medians.len(), 2, "{medians:?}");
        let median = |kind: &str| -> String {
            let value: f64 = medians.iter().find(|r| r[0] == kind).unwrap()[1]
                .parse()
                .unwrap();
            geofold::render::text::significant(value, 4)
        };
        let page = std::fs::read_to_string(stores.workdir.path(&file)).unwrap();
        assert_contains(
            &page,
            &[
                &format!("nearest training unit: {} m (36 test units)", median("cv")),
                &format!(
                    "nearest observed unit: {} m (100 places)",
                    median("prediction")
                ),
                "W (nearest-distance match)",
                // The run's fold_distances summary (every unit measured: no sample).
                &format!(
                    "a median {} m from the nearest unit its model was trained on",
                    median("cv")
                ),
                &format!(
                    "The places to be predicted are a median {} m from the nearest observed unit",
                    median("prediction")
                ),
            ],
        );
        dom_without_console_errors(&stores.workdir.path(&file));
    }
}
