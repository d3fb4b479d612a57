//! Every scheme on the generated lattice: each unit tested once per
//! repetition, predictions equal to numpy refits, the same folds from either
//! store and any row order, folds balanced within the stated bounds, and
//! repetitions with their per-unit errors and spreads.

use std::collections::BTreeMap;

use crate::common::{code, json};
use crate::support::*;

/// Every scheme with the options the tests use.
pub const SCHEMES: &[(&str, &str)] = &[
    (
        "grid hex",
        "--scheme grid --block-size 450 --block-shape hex --folds 4 --grid-origin 500000,5000000",
    ),
    (
        "grid systematic",
        "--scheme grid --block-size 400 --deal systematic --folds 4",
    ),
    ("random", "--scheme random --folds 5 --repeats 2"),
    (
        "kmeans",
        "--scheme kmeans --folds 4 --clusters 12 --repeats 2",
    ),
    ("group", "--scheme group --group-column district --folds 3"),
    ("loo", "--scheme loo --exclusion-radius 150"),
    (
        "nndm",
        "--scheme nndm --prediction-table {s}.targets --prediction-layer targets",
    ),
    (
        "knndm",
        "--scheme knndm --folds 4 --prediction-table {s}.targets --prediction-layer targets",
    ),
];

#[test]
fn every_scheme_tests_each_unit_once_matches_numpy_and_splits_alike_on_both_stores() {
    let case = Case::new("every_scheme");
    create_units(&case);
    case.copy_to_gpkg("units");
    case.copy_to_gpkg("targets");
    let source = lattice_rows(&case);
    for &(name, options) in SCHEMES {
        let repeats = if options.contains("--repeats 2") {
            2
        } else {
            1
        };
        let mut membership = Vec::new();
        for store in STORES {
            let summary = case.ok(store, options);
            let run = run_id(&summary);
            each_unit_once(&case, store, &run, UNITS, repeats);
            assert_eq!(
                matches_numpy_refit(&case, store, &run, &source),
                UNITS * repeats,
                "{name}"
            );
            // Each fold's n_excluded is its number of fold_exclusions rows.
            for row in case.results(
                store,
                &format!(
                    "SELECT f.repetition, f.fold, f.n_excluded, (SELECT count(*) FROM {{r}}.fold_exclusions e \
                     WHERE e.run_id = f.run_id AND e.repetition = f.repetition AND e.fold = f.fold) \
                     FROM {{r}}.folds f WHERE f.run_id = '{run}'"
                ),
            ) {
                let f: Vec<&str> = row.split('|').collect();
                assert_eq!(f[2], f[3], "{name} {store:?} fold {row}");
            }
            // Every spatial scheme draws its folds; plain random folds have nothing to draw.
            let regions = case.results(
                store,
                &format!("SELECT count(*) FROM {{r}}.fold_regions WHERE run_id = '{run}'"),
            );
            assert_eq!(
                regions == ["0"],
                name == "random",
                "{name} {store:?} regions {regions:?}"
            );
            membership.push((case.members(store, &run), case.exclusions(store, &run)));
        }
        assert_eq!(
            membership[0], membership[1],
            "{name}: the same folds from PostGIS and GeoPackage"
        );
    }
}

#[test]
fn folds_do_not_depend_on_row_order_or_store() {
    let case = Case::new("row_order");
    create_units(&case);
    case.script(
        "CREATE TABLE {s}.shuffled AS SELECT * FROM {s}.units ORDER BY md5(id::text);
         ALTER TABLE {s}.shuffled ADD PRIMARY KEY (id);",
    );
    assert_ne!(
        case.query("SELECT id FROM {s}.shuffled LIMIT 1"),
        "1",
        "the copy is stored in another order"
    );
    case.copy_to_gpkg("shuffled");
    case.copy_to_gpkg("targets");
    for options in [
        "--scheme kmeans --folds 5 --seed 7",
        "--scheme knndm --folds 3 --seed 7 --prediction-table {s}.targets --prediction-layer targets",
        "--scheme grid --block-size 300 --block-shape hex --seed 7",
        "--scheme group --group-column district --seed 7 --folds 4",
        "--scheme nndm --prediction-table {s}.targets --prediction-layer targets --match-range 300",
    ] {
        let mut seen = Vec::new();
        for (store, table) in [(Store::Postgis, "units"), (Store::Postgis, "shuffled"), (Store::Gpkg, "shuffled")] {
            let output = case.run(store, table, "y", "a,b", options);
            assert_eq!(code(&output), 0, "{options} on {table}");
            let run = run_id(&json(&output));
            seen.push((case.members(store, &run), case.exclusions(store, &run)));
        }
        assert_eq!(seen[0], seen[1], "{options}: row order");
        assert_eq!(seen[1], seen[2], "{options}: store");
    }
}

/// Units per fold of a PostGIS run's first repetition.
fn fold_sizes(case: &Case, run: &str) -> Vec<i64> {
    case.query(&format!(
        "SELECT count(*) FROM {{r}}.fold_members WHERE run_id = '{run}' AND repetition = 1 GROUP BY fold ORDER BY fold"
    ))
    .lines()
    .map(|v| v.parse().unwrap())
    .collect()
}

fn spread(sizes: &[i64]) -> i64 {
    sizes.iter().max().unwrap() - sizes.iter().min().unwrap()
}

fn largest_region(case: &Case, run: &str) -> i64 {
    case.query(&format!(
        "SELECT max(units) FROM {{r}}.fold_regions WHERE run_id = '{run}'"
    ))
    .parse()
    .unwrap()
}

#[test]
fn folds_are_balanced_within_the_stated_bounds() {
    let case = Case::new("balance");
    create_units(&case);
    // k-means clusters dealt to folds, and grid blocks dealt at random: within
    // the largest cluster or block (core/folds/deal.rs, core/folds/grid).
    for seed in ["1", "2", "3"] {
        let run = run_id(&case.ok(
            Store::Postgis,
            &format!("--scheme kmeans --folds 4 --clusters 13 --seed {seed}"),
        ));
        assert!(
            spread(&fold_sizes(&case, &run)) <= largest_region(&case, &run),
            "kmeans seed {seed}"
        );
        let run = run_id(&case.ok(
            Store::Postgis,
            &format!("--scheme grid --block-size 300 --folds 4 --seed {seed}"),
        ));
        assert!(
            spread(&fold_sizes(&case, &run)) <= largest_region(&case, &run),
            "grid seed {seed}"
        );
    }
    // Groups: within the largest group, sizes from the source table.
    let largest_group: i64 = case
        .query("SELECT max(n) FROM (SELECT count(*) AS n FROM {s}.units GROUP BY district) g")
        .parse()
        .unwrap();
    let run = run_id(&case.ok(
        Store::Postgis,
        "--scheme group --group-column district --folds 3",
    ));
    assert!(spread(&fold_sizes(&case, &run)) <= largest_group);
    // Random: sizes differ by at most one.
    let run = run_id(&case.ok(Store::Postgis, "--scheme random --folds 7"));
    assert!(spread(&fold_sizes(&case, &run)) <= 1);
}

#[test]
fn repeats_give_per_unit_errors_and_the_spread_of_scores() {
    let case = Case::new("repeats");
    create_units(&case);
    case.copy_to_gpkg("units");
    let mut per_unit = Vec::new();
    for store in STORES {
        let summary = case.ok(store, "--scheme kmeans --folds 4 --clusters 10 --repeats 4");
        let run = run_id(&summary);
        each_unit_once(&case, store, &run, UNITS, 4);
        let spread = &summary["runs"][0]["repeat_spread"]["rmse"];
        assert!(spread["sd"].as_f64().unwrap() > 0.0, "{store:?}: {spread}");
        let stored = case.results(
            store,
            &format!("SELECT rmse_repeat_mean, rmse_repeat_sd FROM {{r}}.run_scores WHERE run_id = '{run}'"),
        );
        let f: Vec<&str> = stored[0].split('|').collect();
        assert!((float(f[0]) - spread["mean"].as_f64().unwrap()).abs() < 1e-12);
        assert!((float(f[1]) - spread["sd"].as_f64().unwrap()).abs() < 1e-12);
        let rows: BTreeMap<String, f64> = case
            .results(
                store,
                &format!("SELECT unit_id, rmse FROM {{r}}.unit_summaries WHERE run_id = '{run}'"),
            )
            .iter()
            .map(|row| {
                let f: Vec<&str> = row.split('|').collect();
                (f[0].to_string(), float(f[1]))
            })
            .collect();
        assert_eq!(rows.len(), UNITS);
        per_unit.push(rows);
        if store == Store::Postgis {
            // Per-unit RMSE and MAE over the repetitions, recomputed in SQL from held_out.
            let off = case.query(&format!(
                "SELECT count(*) FROM {{r}}.unit_summaries s JOIN (
                     SELECT unit_id, sqrt(avg((observed - predicted)^2)) AS rmse, avg(abs(observed - predicted)) AS mae
                     FROM {{r}}.held_out WHERE run_id = '{run}' GROUP BY unit_id) h USING (unit_id)
                 WHERE s.run_id = '{run}' AND (abs(s.rmse - h.rmse) > 1e-12 OR abs(s.mae - h.mae) > 1e-12
                     OR s.repetitions <> 4)"
            ));
            assert_eq!(off, "0");
        }
    }
    for (unit, rmse) in &per_unit[0] {
        assert!((rmse - per_unit[1][unit]).abs() < 1e-12, "unit {unit}");
    }
}
