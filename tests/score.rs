//! The external-model loop end to end, on PostGIS and on GeoPackage:
//! `geofold run --assign-only`, a model fitted fold by fold in Python
//! (`tests/python/fit_folds_elsewhere.py`, numpy and statsmodels, reading the
//! fold tables), the predictions loaded into a table, `geofold score`. The
//! stored scores are checked against scikit-learn's scores of the loaded
//! predictions (`tests/python/models_reference.py scores`), and against the
//! built-in model on the same folds. Bad predictions are refused with every
//! problem listed and nothing written. The units are invented
//! (`model_helpers::create_units`).

mod common;
mod model_helpers;

use model_helpers::*;
use serde_json::{json, Value};

/// `run --assign-only` with `extra`; returns the run id.
fn assign(store: &Store<'_>, extra: &[&str]) -> String {
    let mut args = vec![
        "--features",
        "a,b",
        "--folds",
        "5",
        "--assign-only",
        "--json",
    ];
    args.extend(extra);
    let output = store.case.geofold(&store.run_args(&args));
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    assert_eq!(json(&output)["status"], "assigned");
    run_id(&output)
}

/// Fits every fold in Python and loads the predictions into the table
/// `my_predictions` (PostGIS: in the case's schema; GeoPackage: in the file).
fn fit_elsewhere(store: &Store<'_>, run: &str, target: &str, model: &str) -> String {
    match store.kind {
        StoreKind::Gpkg => {
            python(
                "fit_folds_elsewhere.py",
                &[
                    "gpkg",
                    &store.gpkg_path(),
                    run,
                    "units",
                    target,
                    "a,b",
                    model,
                ],
                "",
            );
            "my_predictions".to_string()
        }
        StoreKind::Postgis => {
            let (s, r) = (&store.case.schema, store.results_schema());
            let units = store.case.path("units.csv");
            let exclusions = store.case.path("exclusions.csv");
            let out = store.case.path("predictions.csv");
            psql(&format!(
                "\\copy (SELECT f.unit_id, f.repetition, f.fold, u.{target}, u.a, u.b FROM {r}.fold_members f \
                 JOIN {s}.units u ON u.id = f.unit_id::integer WHERE f.run_id = '{run}') TO '{}' CSV HEADER",
                units.display()
            ));
            psql(&format!(
                "\\copy (SELECT repetition, fold, unit_id FROM {r}.fold_exclusions WHERE run_id = '{run}') TO '{}' CSV HEADER",
                exclusions.display()
            ));
            python(
                "fit_folds_elsewhere.py",
                &[
                    "csv",
                    &units.display().to_string(),
                    &exclusions.display().to_string(),
                    &out.display().to_string(),
                    target,
                    "a,b",
                    model,
                ],
                "",
            );
            psql(&format!(
                "DROP TABLE IF EXISTS {s}.my_predictions;
                 CREATE TABLE {s}.my_predictions (unit_id bigint, repetition integer, fold integer, predicted float8);"
            ));
            psql(&format!(
                "\\copy {s}.my_predictions FROM '{}' CSV HEADER",
                out.display()
            ));
            format!("{s}.my_predictions")
        }
    }
}

/// Scikit-learn's scores of the loaded predictions against the observed values.
fn reference_scores(store: &Store<'_>, run: &str, family: &str, fold: Option<i64>) -> Value {
    let filter = fold.map_or(String::new(), |f| format!(" AND fold = {f}"));
    let rows = store.query(&format!(
        "SELECT observed, predicted FROM {{r}}held_out WHERE run_id = '{run}'{filter}"
    ));
    let observed: Vec<f64> = rows.iter().map(|r| number(&r[0])).collect();
    let predicted: Vec<f64> = rows.iter().map(|r| number(&r[1])).collect();
    serde_json::from_str(&python(
        "models_reference.py",
        &["scores"],
        &json!({"family": family, "observed": observed, "predicted": predicted}).to_string(),
    ))
    .unwrap()
}

#[test]
fn the_external_model_loop_scores_like_a_built_in_model_on_both_stores() {
    let case = Case::new("loop");
    create_units(&case.schema);
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        // A regression model with two repetitions and an exclusion buffer, and
        // a binary one: each fitted elsewhere.
        let cases: [(&str, &str, &str, &[&str]); 2] = [
            (
                "y",
                "ols",
                "regression",
                &[
                    "--repeats",
                    "2",
                    "--scheme",
                    "random",
                    "--exclusion-radius",
                    "150",
                ],
            ),
            ("flag", "logistic", "binary", &["--block-size", "500"]),
        ];
        for (target, model, family, extra) in cases {
            let job = format!("ext_{model}");
            let mut args = vec!["--target", target, "--family", family, "--job", &job];
            args.extend(extra);
            let run = assign(&store, &args);
            let repeats = if extra.contains(&"--repeats") { 2 } else { 1 };
            assert_eq!(
                store.value(&format!(
                    "SELECT count(*) || ' ' || count(predicted) FROM {{r}}held_out WHERE run_id = '{run}'"
                )),
                format!("{} 0", 400 * repeats)
            );
            let table = fit_elsewhere(&store, &run, target, model);
            let output = case.geofold(&store.score_args(&[
                "--run",
                &run,
                "--predictions",
                &table,
                "--json",
            ]));
            assert_eq!(code(&output), 0, "{}", stderr(&output));
            assert_eq!(
                store.value(&format!(
                    "SELECT status FROM {{r}}runs WHERE run_id = '{run}'"
                )),
                "succeeded"
            );
            assert_eq!(
                store.value(&format!(
                    "SELECT count(*) FROM {{r}}held_out WHERE run_id = '{run}' AND predicted IS NULL"
                )),
                "0"
            );
            let reference = reference_scores(&store, &run, family, None);
            for (score, want) in reference.as_object().unwrap() {
                let stored = number(&store.value(&format!(
                    "SELECT value FROM {{r}}run_score_values WHERE run_id = '{run}' AND score = '{score}' \
                     AND statistic = 'pooled'"
                )));
                assert_close(
                    stored,
                    want.as_f64().unwrap(),
                    1e-12,
                    &format!("{model} {score}"),
                );
            }
            let fold_two = reference_scores(&store, &run, family, Some(2));
            let headline = if family == "binary" {
                "log_loss"
            } else {
                "rmse"
            };
            // Fold 2 of repetition 1 (and of 2 with repetitions): the stored
            // fold scores are per repetition, so compare the one-repetition run.
            if repeats == 1 {
                let stored = number(&store.value(&format!(
                    "SELECT value FROM {{r}}fold_score_values WHERE run_id = '{run}' AND repetition = 1 \
                     AND fold = 2 AND score = '{headline}'"
                )));
                assert_close(
                    stored,
                    fold_two[headline].as_f64().unwrap(),
                    1e-12,
                    "fold 2",
                );
            }
            // The job's map layer shows the scored run.
            assert_eq!(
                store.value(&format!(
                    "SELECT count(*) FROM {{r}}{job} WHERE run_id = '{run}'"
                )),
                "400"
            );
            // The built-in model on the same folds (same scheme, seed and
            // buffer) gives the same scores.
            let mut args = vec![
                "--target",
                target,
                "--model",
                model,
                "--features",
                "a,b",
                "--folds",
                "5",
                "--job",
                "built_in",
                "--json",
            ];
            args.extend(extra);
            let output = case.geofold(&store.run_args(&args));
            assert_eq!(code(&output), 0, "{}", stderr(&output));
            let built_in = json(&output)["runs"][0]["pooled"][headline]
                .as_f64()
                .unwrap();
            assert_close(
                built_in,
                reference[headline].as_f64().unwrap(),
                1e-8,
                "built-in vs external",
            );
        }
    }
}

#[test]
fn predictions_that_miss_repeat_or_misplace_units_are_refused_and_nothing_is_written() {
    let case = Case::new("badpred");
    create_units(&case.schema);
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        let run = assign(
            &store,
            &[
                "--target",
                "flag",
                "--family",
                "binary",
                "--job",
                "bad",
                "--block-size",
                "500",
            ],
        );
        let table = fit_elsewhere(&store, &run, "flag", "logistic");
        // One unit missing, one repeated, one in the wrong fold, one unknown,
        // one probability out of range.
        let source = if kind == StoreKind::Postgis {
            "{s}"
        } else {
            ""
        };
        store.execute_on_source(&format!(
            "DELETE FROM {source}my_predictions WHERE unit_id = 5;
             INSERT INTO {source}my_predictions SELECT unit_id, repetition, fold, predicted
                 FROM {source}my_predictions WHERE unit_id = 6;
             UPDATE {source}my_predictions SET fold = fold % 5 + 1 WHERE unit_id = 7;
             INSERT INTO {source}my_predictions VALUES (9999, 1, 1, 0.5);
             UPDATE {source}my_predictions SET predicted = 1.25 WHERE unit_id = 8;"
        ));
        let output = case.geofold(&store.score_args(&["--run", &run, "--predictions", &table]));
        let text = stderr(&output);
        assert_eq!(code(&output), 65, "{text}");
        for expected in [
            ".unit_id (row id=unit_id=6, repetition 1): a second prediction for the same unit",
            ".fold (row id=unit_id=7, repetition 1): fold",
            "but the unit is held out in fold",
            ".unit_id (row id=unit_id=9999, repetition 1): unknown unit",
            ".predicted (row id=unit_id=8, repetition 1): predicted value 1.25 is not a probability",
            ".unit_id (row id=repetition 1): 1 of the run's units have no prediction: 5",
        ] {
            assert!(text.contains(expected), "{expected:?} not in {text}");
        }
        assert_eq!(
            store.value(&format!(
                "SELECT status || ' ' || count(h.predicted) FROM {{r}}runs r JOIN {{r}}held_out h ON h.run_id = r.run_id \
                 WHERE r.run_id = '{run}' GROUP BY status"
            )),
            "assigned 0"
        );
        assert_eq!(
            store.value(&format!(
                "SELECT count(*) FROM {{r}}run_score_values WHERE run_id = '{run}'"
            )),
            "0"
        );
    }
}

#[test]
fn only_a_run_awaiting_predictions_takes_them_and_a_changed_source_is_refused() {
    let case = Case::new("states");
    create_units(&case.schema);
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        let run = assign(
            &store,
            &["--target", "y", "--job", "states", "--block-size", "500"],
        );
        let table = fit_elsewhere(&store, &run, "y", "ols");
        let missing =
            case.geofold(&store.score_args(&["--run", &run, "--predictions", "no_such_table"]));
        assert_eq!(code(&missing), 66, "{}", stderr(&missing));
        let unknown = case.geofold(&store.score_args(&[
            "--run",
            "00000000-0000-0000-0000-000000000000",
            "--predictions",
            &table,
        ]));
        assert_eq!(code(&unknown), 66, "{}", stderr(&unknown));
        // The source changes after the folds were assigned: refused.
        let source = if kind == StoreKind::Postgis {
            "{s}"
        } else {
            ""
        };
        store.execute_on_source(&format!("UPDATE {source}units SET y = y + 1 WHERE id = 3"));
        let changed = case.geofold(&store.score_args(&["--run", &run, "--predictions", &table]));
        assert_eq!(code(&changed), 65, "{}", stderr(&changed));
        assert!(stderr(&changed).contains("the units changed since run"));
        store.execute_on_source(&format!("UPDATE {source}units SET y = y - 1 WHERE id = 3"));
        let scored = case.geofold(&store.score_args(&["--run", &run, "--predictions", &table]));
        assert_eq!(code(&scored), 0, "{}", stderr(&scored));
        let again = case.geofold(&store.score_args(&["--run", &run, "--predictions", &table]));
        assert_eq!(code(&again), 64, "{}", stderr(&again));
        assert!(stderr(&again).contains("has status succeeded"));
        // --assign-only names no model of its own.
        let output = case.geofold(&store.run_args(&[
            "--target",
            "y",
            "--features",
            "a",
            "--block-size",
            "500",
            "--assign-only",
            "--model",
            "ols",
        ]));
        assert_eq!(code(&output), 64, "{}", stderr(&output));
    }
}
