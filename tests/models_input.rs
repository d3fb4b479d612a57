//! Bad input to the model families, on PostGIS and on GeoPackage: a clear
//! message naming the fold, column and row where possible, exit code 65, and
//! nothing written (bad targets, exposures and unseen levels stop before any
//! run is recorded; a fold that cannot be fitted leaves its run `failed` with
//! no result rows). The units are invented (`model_helpers::create_units`).

mod common;
mod model_helpers;

use model_helpers::*;

/// Whether the store has any run at all.
fn has_runs(store: &Store<'_>) -> bool {
    match store.kind {
        StoreKind::Postgis => {
            psql(&format!(
                "SELECT count(*) FROM pg_tables WHERE schemaname = '{}' AND tablename = 'runs'",
                store.results_schema()
            )) == "1"
                && store.value("SELECT count(*) FROM {r}runs") != "0"
        }
        StoreKind::Gpkg => {
            store.value("SELECT count(*) FROM sqlite_master WHERE name = 'runs'") == "1"
                && store.value("SELECT count(*) FROM runs") != "0"
        }
    }
}

fn refused(store: &Store<'_>, args: &[&str], expected: &[&str]) -> String {
    let output = store.case.geofold(&store.run_args(args));
    let text = stderr(&output);
    assert_eq!(code(&output), 65, "{text}");
    for part in expected {
        assert!(text.contains(part), "{part:?} not in: {text}");
    }
    text
}

#[test]
fn targets_and_exposures_that_do_not_fit_the_family_name_the_rows_and_write_nothing() {
    let case = Case::new("targets");
    create_units(&case.schema);
    psql(&format!(
        "ALTER TABLE {s}.units ADD COLUMN signed_cases integer, ADD COLUMN bad_pop float8;
         UPDATE {s}.units SET signed_cases = CASE WHEN id = 17 THEN -2 ELSE cases END,
                              bad_pop = CASE WHEN id = 23 THEN 0 ELSE pop END;",
        s = case.schema
    ));
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        let base = ["--features", "a,b", "--block-size", "500", "--job", "bad"];
        let with = |extra: &[&'static str]| -> Vec<&str> {
            extra.iter().copied().chain(base.iter().copied()).collect()
        };
        refused(
            &store,
            &with(&["--model", "logistic", "--target", "y"]),
            &["units.y (row id=0)", "a binary model needs 0 or 1"],
        );
        refused(
            &store,
            &with(&["--model", "poisson", "--target", "y"]),
            &["units.y (row id=", "a count must be a whole number"],
        );
        refused(
            &store,
            &with(&["--model", "poisson", "--target", "signed_cases"]),
            &[
                "units.signed_cases (row id=17)",
                "a count cannot be negative",
            ],
        );
        refused(
            &store,
            &with(&[
                "--model",
                "poisson",
                "--target",
                "cases",
                "--exposure-column",
                "bad_pop",
            ]),
            &[
                "units.bad_pop (row id=23)",
                "exposure is 0; it must be positive",
            ],
        );
        assert!(!has_runs(&store), "a refused input left a run behind");
        // An exposure with a model of another family is a usage error (64).
        let output = case.geofold(&store.run_args(&with(&[
            "--model",
            "ols",
            "--target",
            "y",
            "--exposure-column",
            "pop",
        ])));
        assert_eq!(code(&output), 64, "{}", stderr(&output));
        assert!(stderr(&output).contains("for count models"));
    }
}

/// Runs a fold that cannot be fitted; the run is failed with no result rows.
fn unfittable(store: &Store<'_>, args: &[&str], expected: &[&str]) {
    let text = refused(store, args, expected);
    let failed = store.query("SELECT run_id, error_message FROM {r}runs WHERE status = 'failed'");
    let (run, message) = (&failed.last().unwrap()[0], &failed.last().unwrap()[1]);
    assert!(text.contains(message.as_str()), "{message}");
    for table in ["held_out", "folds", "fold_score_values", "coefficients"] {
        assert_eq!(
            store.value(&format!(
                "SELECT count(*) FROM {{r}}{table} WHERE run_id = '{run}'"
            )),
            "0",
            "{table}"
        );
    }
}

#[test]
fn constant_features_separation_and_no_convergence_name_the_fold() {
    let case = Case::new("fits");
    create_units(&case.schema);
    // `flat` is 5 except in the block at the origin (25 units), so the fold
    // holding that block sees it constant in training; `sign` is a > 0,
    // which separates the outcome `a_positive` completely.
    psql(&format!(
        "ALTER TABLE {s}.units ADD COLUMN flat float8, ADD COLUMN a_positive integer;
         UPDATE {s}.units SET flat = CASE WHEN id % 20 < 5 AND id / 20 < 5 THEN id ELSE 5 END,
                              a_positive = CASE WHEN a > 0 THEN 1 ELSE 0 END;",
        s = case.schema
    ));
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        let base = ["--block-size", "500", "--folds", "5", "--job", "fits"];
        let with = |extra: &[&'static str]| -> Vec<&str> {
            extra.iter().copied().chain(base.iter().copied()).collect()
        };
        unfittable(
            &store,
            &with(&["--target", "y", "--features", "a,flat"]),
            &[
                "cannot fit fold",
                "(repetition 1) with ols",
                "feature flat is constant (5)",
            ],
        );
        unfittable(
            &store,
            &with(&[
                "--model",
                "ridge",
                "--penalty",
                "2",
                "--target",
                "y",
                "--features",
                "flat,b",
            ]),
            &["cannot fit fold", "with ridge", "feature flat is constant"],
        );
        unfittable(
            &store,
            &with(&[
                "--model",
                "logistic",
                "--target",
                "a_positive",
                "--features",
                "a,b",
            ]),
            &[
                "cannot fit fold 1 (repetition 1) with logistic",
                "complete separation of the 0/1 outcomes along feature a",
            ],
        );
        unfittable(
            &store,
            &with(&[
                "--model",
                "logistic",
                "--target",
                "flag",
                "--features",
                "a,b",
                "--max-iterations",
                "1",
            ]),
            &[
                "cannot fit fold 1 (repetition 1) with logistic",
                "no convergence within 1 iterations",
            ],
        );
    }
}

#[test]
fn held_out_levels_unseen_in_training_are_refused_or_counted() {
    let case = Case::new("levels");
    create_units(&case.schema);
    // Level `wetland` only in the block at the origin: the fold holding it
    // has no training unit with it.
    psql(&format!(
        "ALTER TABLE {s}.units ADD COLUMN cover text;
         UPDATE {s}.units SET cover = CASE WHEN id % 20 < 5 AND id / 20 < 5 THEN 'wetland'
                                           WHEN id % 2 = 0 THEN 'grass' ELSE 'scrub' END;",
        s = case.schema
    ));
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        let args = [
            "--target",
            "y",
            "--features",
            "a,cover",
            "--block-size",
            "500",
            "--job",
            "levels",
            "--json",
        ];
        let text = refused(
            &store,
            &args,
            &[
                "units.cover (row id=0, 1, 2, 3, 4 and 20 more)",
                "level \"wetland\" is held out in fold",
                "--unseen-levels zero",
            ],
        );
        assert!(!text.contains("scrub"), "{text}");
        assert!(!has_runs(&store));
        let mut zero = args.to_vec();
        zero.extend(["--unseen-levels", "zero"]);
        let output = case.geofold(&store.run_args(&zero));
        assert_eq!(code(&output), 0, "{}", stderr(&output));
        let notes = &json(&output)["runs"][0]["notes"];
        assert_eq!(
            notes[0][0],
            "cover=wetland unseen in training: all-zero indicators (the fold's reference level)"
        );
        assert_eq!(notes[0][1], 25);
        let run = run_id(&output);
        assert_eq!(
            store.value(&format!(
                "SELECT count(DISTINCT term) FROM {{r}}coefficients WHERE run_id = '{run}' AND term LIKE 'cover=%'"
            )),
            "2",
            "cover=scrub and cover=wetland are estimated in some folds (grass is the reference)"
        );
    }
}
