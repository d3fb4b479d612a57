//! Leave-one-out, k-means and distance matching on the Columbus fixture
//! against `../shared/REFERENCES.md` §2.4 and §6.2 and against scikit-learn
//! and scipy at test time; the match statistic W and its spread over
//! repetitions against scipy on the generated lattice.

use std::collections::BTreeMap;

use crate::common::{code, db_uri, json, python_script, stderr};
use crate::loaders;
use crate::support::*;

/// The Columbus fixture (49 polygons, SRID 0: arbitrary projected units) as
/// `{s}.columbus`, and `{s}.columbus_grid`: the 20 × 20 grid of REFERENCES
/// §2.4 (np.linspace over the polygons' bounding box, edges included).
fn create_columbus(case: &Case) {
    use geo::BoundingRect;
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/columbus/columbus.tsv"
    );
    let mut sql = String::from(
        "CREATE TABLE {s}.columbus (id integer PRIMARY KEY, crime float8, inc float8, hoval float8,
             geom geometry(Polygon, 0));\n",
    );
    for line in std::fs::read_to_string(path).unwrap().lines().skip(1) {
        let f: Vec<&str> = line.split('\t').collect();
        sql.push_str(&format!(
            "INSERT INTO {{s}}.columbus VALUES ({}, {}, {}, {}, ST_GeomFromText('{}', 0));\n",
            f[0], f[1], f[2], f[3], f[4]
        ));
    }
    let b = loaders::columbus()
        .iter()
        .filter_map(|u| u.polygon.bounding_rect())
        .fold([f64::MAX, f64::MAX, f64::MIN, f64::MIN], |b, r| {
            [
                b[0].min(r.min().x),
                b[1].min(r.min().y),
                b[2].max(r.max().x),
                b[3].max(r.max().y),
            ]
        });
    sql.push_str(
        "CREATE TABLE {s}.columbus_grid (id integer PRIMARY KEY, geom geometry(Point, 0));\n",
    );
    let at = |low: f64, high: f64, i: usize| low + (high - low) * i as f64 / 19.0;
    for i in 0..20 {
        for j in 0..20 {
            sql.push_str(&format!(
                "INSERT INTO {{s}}.columbus_grid VALUES ({}, ST_MakePoint({:?}, {:?}));\n",
                1 + i * 20 + j,
                at(b[0], b[2], i),
                at(b[1], b[3], j)
            ));
        }
    }
    case.script(&sql);
}

#[test]
fn columbus_leave_one_out_k_means_and_matching_reproduce_the_references() {
    let case = Case::new("columbus");
    create_columbus(&case);
    case.copy_to_gpkg("columbus");
    case.copy_to_gpkg("columbus_grid");
    let go = |store: Store, options: &str| {
        let output = case.run(store, "columbus", "crime", "inc,hoval", options);
        assert_eq!(code(&output), 0, "{options}");
        json(&output)
    };
    for store in STORES {
        // Plain leave-one-out of CRIME ~ INC + HOVAL: REFERENCES §6.2 [COMP
        // statsmodels 0.15.0 resid_press; brute-force refits agree to 1.7e-13]:
        // LOO RMSE 12.33822359080553, MAE 9.531388476300624, first three LOO
        // residuals 0.3982581681289499, −3.899655263264507, −5.504709154690368.
        let loo = go(
            store,
            "--scheme loo --assume-metres --prediction-table {s}.columbus_grid --prediction-layer columbus_grid",
        );
        let pooled = &loo["runs"][0]["pooled"];
        assert!((pooled["rmse"].as_f64().unwrap() - 12.33822359080553).abs() < 1e-9 * 12.34);
        assert!((pooled["mae"].as_f64().unwrap() - 9.531388476300624).abs() < 1e-9 * 9.54);
        let run = run_id(&loo);
        let residuals = case.results(
            store,
            &format!(
                "SELECT observed - predicted FROM {{r}}.held_out WHERE run_id = '{run}' \
                 AND unit_id IN ('1', '2', '3') ORDER BY unit_id"
            ),
        );
        for (found, expected) in
            residuals
                .iter()
                .zip([0.3982581681289499, -3.899655263264507, -5.504709154690368])
        {
            assert!(
                (float(found) - expected).abs() < 1e-9,
                "{store:?}: {found} vs {expected}"
            );
        }
        // W between the grid's distances to the centroids and the LOO
        // nearest-neighbour distances: REFERENCES §2.4 [COMP scipy 1.17.1]
        // 0.314220857 (given to 9 decimals); and scipy at test time on the
        // rows geofold recorded.
        let w = w_nnd(&case, store, &run, "pooled");
        assert!((w - 0.314220857).abs() < 1e-9, "{store:?}: W {w}");
        let cv = distances(&case, store, &run, "cv", None);
        let prediction = distances(&case, store, &run, "prediction", None);
        assert_eq!((cv.len(), prediction.len()), (49, 400));
        assert!((scipy_w(&cv, &prediction) - w).abs() <= 1e-12 * w);
        // NNDM with the units themselves as prediction locations is plain
        // leave-one-out: nothing excluded, the same predictions.
        let nndm = run_id(&go(
            store,
            "--scheme nndm --assume-metres --prediction-table {s}.columbus --prediction-layer columbus",
        ));
        let predictions = |run: &str| {
            case.results(
                store,
                &format!("SELECT unit_id, predicted FROM {{r}}.held_out WHERE run_id = '{run}' ORDER BY unit_id"),
            )
        };
        assert_eq!(predictions(&nndm), predictions(&run));
        assert!(case.exclusions(store, &nndm).is_empty());
        // k-means of the centroids, 5 clusters: REFERENCES §2.4 [COMP sklearn
        // 1.9.1, KMeans(n_init=200)] inertia 14.962387555; and scikit-learn's
        // Lloyd k-means at test time, started from geofold's cluster means,
        // keeps every unit in its cluster with the same inertia.
        let kmeans = go(
            store,
            "--scheme kmeans --folds 5 --starts 200 --assume-metres",
        );
        let wcss = kmeans["runs"][0]["split"]["within_cluster_sum_of_squares"]
            .as_f64()
            .unwrap();
        assert!((wcss - 14.962387555).abs() < 1e-8, "{store:?}: {wcss}");
        let run = run_id(&kmeans);
        let labels: BTreeMap<String, String> = case
            .members(store, &run)
            .into_iter()
            .map(|row| {
                let f: Vec<&str> = row.split('|').collect();
                (f[2].to_string(), f[1].to_string())
            })
            .collect();
        let input: Vec<String> = case
            .query("SELECT id, ST_X(ST_Centroid(geom)), ST_Y(ST_Centroid(geom)) FROM {s}.columbus ORDER BY id")
            .lines()
            .map(|l| {
                let f: Vec<&str> = l.split('|').collect();
                format!("{}|{}|{}", f[1], f[2], labels[f[0]])
            })
            .collect();
        let check = python_script(
            "python/schemes_reference.py",
            &["kmeans"],
            &input.join("\n"),
        );
        let f: Vec<&str> = check.trim().split('|').collect();
        assert_eq!(
            f[0], "True",
            "sklearn moves units from geofold's clusters: {check}"
        );
        assert!(
            (float(f[1]) - wcss).abs() <= 1e-9 * wcss,
            "{check} vs {wcss}"
        );
        assert!(
            (float(f[2]) - wcss).abs() <= 1e-9 * wcss,
            "{check} vs {wcss}"
        );
    }
}

/// Checks a run's stored W (pooled, and its mean and SD over `repeats`
/// repetitions) against scipy's `wasserstein_distance` of its stored
/// distances; returns the pooled W.
fn assert_w_matches_scipy(case: &Case, store: Store, run: &str, repeats: u32) -> f64 {
    let prediction = distances(case, store, run, "prediction", None);
    assert_eq!(prediction.len(), 144);
    let mut all = Vec::new();
    let mut per = Vec::new();
    for repetition in 1..=repeats {
        let cv = distances(case, store, run, "cv", Some(repetition));
        assert_eq!(cv.len(), UNITS);
        per.push(scipy_w(&cv, &prediction));
        all.extend(cv);
    }
    let pooled = scipy_w(&all, &prediction);
    assert!((w_nnd(case, store, run, "pooled") - pooled).abs() <= 1e-12 * pooled);
    let n = repeats as f64;
    let mean = per.iter().sum::<f64>() / n;
    let sd = (per.iter().map(|w| (w - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    assert!((w_nnd(case, store, run, "repeat_mean") - mean).abs() <= 1e-12 * mean);
    assert!((w_nnd(case, store, run, "repeat_sd") - sd).abs() <= 1e-9 * mean);
    pooled
}

#[test]
fn w_and_its_spread_over_repetitions_match_scipy() {
    let case = Case::new("w_scipy");
    create_units(&case);
    case.copy_to_gpkg("units");
    case.copy_to_gpkg("targets");
    for store in STORES {
        let summary = case.ok(
            store,
            "--scheme knndm --folds 4 --repeats 3 --prediction-table {s}.targets --prediction-layer targets",
        );
        let run = run_id(&summary);
        let pooled = assert_w_matches_scipy(&case, store, &run, 3);
        let reported = &summary["runs"][0]["matching"];
        assert!((reported["w"].as_f64().unwrap() - pooled).abs() <= 1e-12 * pooled);
        assert_eq!(reported["w_per_repetition"].as_array().unwrap().len(), 3);
        if store == Store::Postgis {
            // The CV distances are those to the nearest unit of another fold
            // (no exclusions here), by PostGIS's ST_Distance.
            let off = case.query(&format!(
                "SELECT count(*) FROM {{r}}.nearest_distances n JOIN {{s}}.units u ON u.id::text = n.unit_id
                 WHERE n.run_id = '{run}' AND n.kind = 'cv' AND n.repetition = 1 AND abs(n.distance - (
                     SELECT min(ST_Distance(u.geom, o.geom)) FROM {{r}}.fold_members m
                     JOIN {{s}}.units o ON o.id::text = m.unit_id
                     WHERE m.run_id = n.run_id AND m.repetition = 1 AND m.fold <> n.fold)) > 1e-9"
            ));
            assert_eq!(off, "0");
        }
    }
}

#[test]
fn a_run_scored_from_outside_geofold_gets_the_distance_match_of_its_assigned_folds() {
    let case = Case::new("w_scored");
    create_units(&case);
    case.copy_to_gpkg("units");
    case.copy_to_gpkg("targets");
    for store in STORES {
        let assigned = case.ok(
            store,
            "--scheme knndm --folds 4 --repeats 2 --assign-only --prediction-table {s}.targets --prediction-layer targets",
        );
        let run = run_id(&assigned);
        // Any predictions will do: W depends only on the folds and the
        // prediction locations recorded when the folds were assigned.
        let members = format!(
            "SELECT unit_id, repetition, fold, 0.0 AS predicted FROM {{r}}.fold_members WHERE run_id = '{run}'"
        );
        let mut command = case.workdir.geofold();
        command.args(["score", "--run", &run, "--json"]);
        match store {
            Store::Postgis => {
                case.script(&format!("CREATE TABLE {{s}}.predicted AS {members}"));
                command.args(["--db", &db_uri(), "--results-schema", &case.r]);
                command.args(["--predictions", &format!("{}.predicted", case.s)]);
            }
            Store::Gpkg => {
                let path = case.results_gpkg();
                sqlite(
                    &path,
                    &format!("CREATE TABLE predicted AS {}", members.replace("{r}.", "")),
                );
                command.args(["--results-gpkg", &path.display().to_string()]);
                command.args(["--predictions", "predicted"]);
            }
        }
        let output = crate::common::run(command);
        assert_eq!(code(&output), 0, "{store:?}: {}", stderr(&output));
        let pooled = assert_w_matches_scipy(&case, store, &run, 2);
        // The same W as the assignment's summary showed before any fit, and
        // the same test-to-training distances.
        let scored = json(&output);
        for summary in [&scored, &assigned] {
            let reported = &summary["runs"][0]["matching"];
            assert!((reported["w"].as_f64().unwrap() - pooled).abs() <= 1e-12 * pooled);
        }
        let distances = &scored["runs"][0]["fold_distances"];
        assert!(!distances.as_array().unwrap().is_empty(), "{scored}");
        assert_eq!(distances, &assigned["runs"][0]["fold_distances"]);
    }
}
