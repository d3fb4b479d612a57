//! `geofold map`: one map of a stored run as SVG or PNG, on PostGIS and on
//! GeoPackage.
//!
//! - The per-unit numbers a map is drawn from (fold, exclusions, residual,
//!   absolute error) equal what SQL over the results views gives: psql over
//!   PostGIS, GDAL over the GeoPackage (the views are the definition; the
//!   read-back derives the same values from the stored rows). Each unit's
//!   area equals PostGIS's `ST_Area` of the source geometry (holes and
//!   multipolygons included).
//! - Every SVG parses as XML (roxmltree) and carries its legend.
//! - A PNG of a small run shows a unit of known class (its fold's test units,
//!   from SQL) in that class's colour at the unit's centre.
//! - A random-fold run (no regions) colours its units by fold.
//! - Bad input: an unknown run or job (66, the id named), a fold the run does
//!   not have (64), an unwritable file (73, nothing left behind); a run whose
//!   unit shapes are gone reports without maps and maps nothing (66).

mod common;

use common::chromium::Image;
use common::fixtures::{create_units, IdType, UNITS_COLUMNS, UNITS_GRID};
use common::stores::{Store, Stores, BOTH};
use common::{assert_contains, fails, ok_json, Workdir};
use geo::{Area, BoundingRect};
use geofold::readback::load::{load, Reading, RunChoice};
use geofold::readback::map::map_input;
use geofold::render::palette::{SPLIT_TEST, SPLIT_TRAINING};
use geofold::render::{map_frame, MapOptions};
use geofold::spec::{Limits, ResultsRef};

/// The results store of `store` in the harness.
fn results(stores: &Stores, store: Store) -> ResultsRef {
    match store {
        Store::Postgis => ResultsRef::Postgis {
            db: Some(common::db_uri()),
            schema: stores.pg.results.clone(),
        },
        Store::Gpkg => ResultsRef::Gpkg {
            file: stores.results_gpkg.clone(),
        },
    }
}

/// `geofold map` options naming `store`'s results.
fn store_args(stores: &Stores, store: Store) -> Vec<String> {
    match store {
        Store::Postgis => vec![
            "--db".into(),
            common::db_uri(),
            "--results-schema".into(),
            stores.pg.results.clone(),
        ],
        Store::Gpkg => vec!["--results-gpkg".into(), "results.gpkg".into()],
    }
}

fn map(stores: &Stores, store: Store, args: &[&str]) -> std::process::Output {
    let mut all = vec!["map".to_string()];
    all.extend(store_args(stores, store));
    all.extend(args.iter().map(|a| a.to_string()));
    stores.workdir.run(&all)
}

fn with<'a>(base: &[&'a str], extra: &[&'a str]) -> Vec<&'a str> {
    [base, extra].concat()
}

fn units_stores(label: &str) -> Stores {
    Stores::from_postgis(label, "units", |s| {
        create_units(s, "units", IdType::Integer)
    })
}

#[test]
fn per_unit_numbers_equal_sql_over_the_views_on_both_stores() {
    let stores = units_stores("map_numbers");
    for repeats in ["1", "2"] {
        let both = stores.run_ok(&with(
            UNITS_GRID,
            &["--exclusion-radius", "120", "--repeats", repeats],
        ));
        for store in BOTH {
            let run = both.get(store).run_id(0);
            let mut opened =
                geofold::pipeline::open_store(&results(&stores, store), &Limits::default())
                    .unwrap();
            let stored = load(
                opened.as_mut(),
                &RunChoice::Run(uuid::Uuid::parse_str(&run).unwrap()),
                Reading {
                    units: true,
                    job: false,
                },
            )
            .unwrap();
            assert_eq!(stored.units.len(), 36, "{store:?}");
            assert_eq!(stored.units_without_geometry, 0);
            // The reference: the view unit_errors (residual = observed - predicted,
            // abs_error the mean absolute error over repetitions).
            let expected = stores.rows(
                store,
                &both,
                0,
                "SELECT unit_id, fold, residual, abs_error FROM unit_errors WHERE run_id = '{run}'",
            );
            let mut got: Vec<Vec<String>> = stored
                .units
                .iter()
                .map(|u| {
                    vec![
                        u.unit_id.clone(),
                        u.fold.unwrap().to_string(),
                        u.residual.unwrap().to_string(),
                        u.abs_error.unwrap().to_string(),
                    ]
                })
                .collect();
            got.sort();
            common::assert_rows_match(&got, &expected, &format!("{store:?} repeats {repeats}"));
            let excluded = stores.rows(
                store,
                &both,
                0,
                "SELECT unit_id, fold FROM fold_exclusions WHERE run_id = '{run}' AND repetition = 1",
            );
            assert!(!excluded.is_empty(), "the radius excludes units");
            let mut got: Vec<Vec<String>> = stored
                .units
                .iter()
                .flat_map(|u| {
                    u.excluded_from
                        .iter()
                        .map(|f| vec![u.unit_id.clone(), f.to_string()])
                })
                .collect();
            got.sort();
            assert_eq!(got, excluded, "{store:?}: exclusions");
            // Areas against PostGIS's ST_Area of the source geometry.
            let areas = stores
                .pg
                .rows("SELECT id::text, ST_Area(geom) FROM {s}.units");
            for row in areas {
                let unit = stored.units.iter().find(|u| u.unit_id == row[0]).unwrap();
                let area = unit.geometry.as_ref().unwrap().unsigned_area();
                common::assert_close(
                    area,
                    row[1].parse().unwrap(),
                    &format!("area of {}", row[0]),
                );
            }
        }
    }
}

#[test]
fn svg_maps_parse_and_carry_their_legends_on_both_stores() {
    let stores = units_stores("map_svg");
    stores.run_ok(&with(UNITS_GRID, &["--exclusion-radius", "120"]));
    for store in BOTH {
        for (layer, legend_text) in [
            ("folds", "Fold 1"),
            ("split", "Test units of fold 1"),
            ("error", "Absolute error of target"),
            ("residual", "Residual of target"),
        ] {
            let file = format!("{layer}-{store:?}.svg");
            let doc = ok_json(&map(
                &stores,
                store,
                &[
                    "--job",
                    "units",
                    "--layer",
                    layer,
                    "--to",
                    &file,
                    "--json",
                    "--target-unit",
                    "mg/L",
                ],
            ));
            assert_eq!(doc["units_drawn"], 36, "{doc}");
            let text = std::fs::read_to_string(stores.workdir.path(&file)).unwrap();
            let parsed = roxmltree::Document::parse(&text)
                .unwrap_or_else(|e| panic!("{file} is not XML: {e}"));
            let legend = parsed
                .descendants()
                .find(|n| n.attribute("class") == Some("legend"))
                .unwrap_or_else(|| panic!("{file} has no legend"));
            let words: String = legend
                .descendants()
                .filter_map(|n| n.text())
                .collect::<Vec<_>>()
                .join(" ");
            assert_contains(&words, &[legend_text]);
            if layer == "error" || layer == "residual" {
                assert_contains(&words, &["mg/L"]);
            }
        }
    }
}

#[test]
fn a_png_shows_a_unit_of_known_class_in_its_class_colour() {
    let stores = units_stores("map_png");
    let both = stores.run_ok(UNITS_GRID);
    for store in BOTH {
        // The class of each unit in fold 2's split, from SQL: its test units.
        let tested: Vec<String> = stores
            .rows(
                store,
                &both,
                0,
                "SELECT unit_id FROM fold_members WHERE run_id = '{run}' AND repetition = 1 AND fold = 2",
            )
            .into_iter()
            .map(|r| r[0].clone())
            .collect();
        assert!(!tested.is_empty());
        let file = format!("split-{store:?}.png");
        ok_json(&map(
            &stores,
            store,
            &[
                "--job", "units", "--layer", "split", "--fold", "2", "--to", &file, "--width",
                "900", "--json",
            ],
        ));
        let image = Image::decode(&std::fs::read(stores.workdir.path(&file)).unwrap());
        assert_eq!((image.width, image.height), (900, 600));
        // Where each unit is drawn: the renderer's own frame for this input and size.
        let mut opened =
            geofold::pipeline::open_store(&results(&stores, store), &Limits::default()).unwrap();
        let stored = load(
            opened.as_mut(),
            &RunChoice::Job("units".into()),
            Reading {
                units: true,
                job: false,
            },
        )
        .unwrap();
        let input = map_input(&stored, "");
        let options = MapOptions {
            width: 900,
            height: 600,
            ..MapOptions::default()
        };
        let frame = map_frame(&input, &options).unwrap();
        let (mut test_seen, mut training_seen) = (0, 0);
        for unit in &stored.units {
            // Units 1 and 2 have a hole and two parts: sample the plain squares.
            if unit.unit_id == "1" || unit.unit_id == "2" {
                continue;
            }
            let rect = unit.geometry.as_ref().unwrap().bounding_rect().unwrap();
            let centre = rect.center();
            let (x, y) = frame.to_pixel(centre.x, centre.y);
            let colour = image.colour_xy(x.round() as u32, y.round() as u32);
            let expected = if tested.contains(&unit.unit_id) {
                test_seen += 1;
                SPLIT_TEST
            } else {
                training_seen += 1;
                SPLIT_TRAINING
            };
            assert_eq!(
                colour,
                (expected.r, expected.g, expected.b),
                "{store:?}: unit {} at ({x:.0}, {y:.0})",
                unit.unit_id
            );
        }
        assert!(test_seen > 0 && training_seen > 0);
    }
}

#[test]
fn bad_runs_folds_and_files_are_refused_with_their_codes() {
    let stores = units_stores("map_bad");
    let both = stores.run_ok(UNITS_GRID);
    let workdir: &Workdir = &stores.workdir;
    for store in BOTH {
        let unknown = "00000000-0000-4000-8000-00000000abcd";
        let message = fails(
            &map(
                &stores,
                store,
                &["--run", unknown, "--layer", "folds", "--to", "x.svg"],
            ),
            66,
        );
        assert_contains(&message, &[unknown]);
        let message = fails(
            &map(
                &stores,
                store,
                &["--job", "nosuchjob", "--layer", "folds", "--to", "x.svg"],
            ),
            66,
        );
        assert_contains(&message, &["nosuchjob"]);
        let run = both.get(store).run_id(0);
        let message = fails(
            &map(
                &stores,
                store,
                &[
                    "--run", &run, "--layer", "split", "--fold", "9", "--to", "x.svg",
                ],
            ),
            64,
        );
        assert_contains(&message, &["--fold 9", "1, 2, 3"]);
        fails(
            &map(
                &stores,
                store,
                &["--run", &run, "--layer", "folds", "--to", "x.pdf"],
            ),
            64,
        );
        fails(
            &map(
                &stores,
                store,
                &[
                    "--run", &run, "--layer", "folds", "--fold", "1", "--to", "x.svg",
                ],
            ),
            64,
        );
        let message = fails(
            &map(
                &stores,
                store,
                &[
                    "--run",
                    &run,
                    "--layer",
                    "error",
                    "--to",
                    "missing-dir/x.png",
                ],
            ),
            73,
        );
        assert_contains(&message, &["missing-dir/x.png"]);
        // Nothing half-written anywhere.
        let left: Vec<String> = std::fs::read_dir(workdir.root())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|name| name.contains(".tmp") || name.starts_with("x."))
            .collect();
        assert_eq!(left, Vec::<String>::new());
    }
}

#[test]
fn a_run_whose_unit_shapes_are_gone_reports_without_maps_and_maps_nothing() {
    let stores = units_stores("map_gone");
    let both = stores.run_ok(UNITS_GRID);
    // The PostGIS source table and the GeoPackage job layer (the results file
    // is not the source's, so its unit layer holds the shapes) are dropped.
    stores.pg.script("DROP TABLE {s}.units CASCADE");
    common::gdal::sqlite_edit(&stores.results_gpkg, "DROP TABLE units");
    for store in BOTH {
        let run = both.get(store).run_id(0);
        let message = fails(
            &map(
                &stores,
                store,
                &["--run", &run, "--layer", "error", "--to", "gone.svg"],
            ),
            66,
        );
        assert_contains(&message, &[&run, "36 units"]);
        assert!(!stores.workdir.path("gone.svg").exists());
        let mut all = vec!["report".to_string()];
        all.extend(store_args(&stores, store));
        all.extend(["--run", &run, "--to", "gone.html", "--json"].map(String::from));
        let doc = ok_json(&stores.workdir.run(&all));
        assert_eq!(doc["units_without_geometry"], 36, "{doc}");
        assert_eq!(doc["maps"], serde_json::json!([]));
        assert!(doc["geometry_problem"].is_string(), "{doc}");
    }
}

#[test]
fn a_random_fold_run_has_no_regions_and_colours_its_units_by_fold() {
    let stores = units_stores("map_random");
    let both = stores.run_ok(&[UNITS_COLUMNS, &["--scheme", "random", "--folds", "4"]].concat());
    for store in BOTH {
        let run = both.get(store).run_id(0);
        let mut opened =
            geofold::pipeline::open_store(&results(&stores, store), &Limits::default()).unwrap();
        let stored = load(
            opened.as_mut(),
            &RunChoice::Run(uuid::Uuid::parse_str(&run).unwrap()),
            Reading {
                units: true,
                job: false,
            },
        )
        .unwrap();
        assert!(stored.regions.is_empty(), "random folds have no regions");
        assert_eq!(stored.fold_numbers(), vec![1, 2, 3, 4]);
        let doc = ok_json(&map(
            &stores,
            store,
            &[
                "--run",
                &run,
                "--layer",
                "folds",
                "--to",
                "random.svg",
                "--json",
            ],
        ));
        assert_eq!(doc["units_drawn"], 36);
        let text = std::fs::read_to_string(stores.workdir.path("random.svg")).unwrap();
        roxmltree::Document::parse(&text).unwrap();
        assert_contains(&text, &["Fold 4"]);
    }
}
