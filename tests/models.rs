//! The model families from the command line, on PostGIS and on GeoPackage,
//! checked against outside references: statsmodels and scikit-learn run at
//! test time on the same folds (`tests/python/models_reference.py`), scipy
//! brute force for IDW and kNN, the Spector & Mazzeo (1980) data as
//! published in Greene's *Econometric Analysis*, and the Columbus
//! leave-one-out baselines of REFERENCES.md §2.4. The units are invented
//! (`model_helpers::create_units`) except the named published data sets.
//! Bad input is in `tests/models_input.rs`.

mod common;
mod model_helpers;

use geofold::core::metrics::Family;
use geofold::core::models::build_model;
use geofold::core::models::TrainingSet;
use geofold::core::options::Options;
use geofold::core::units::{Dataset, GeometryKinds, IdKind, Skipped, UnitId};
use model_helpers::*;
use serde_json::{json, Value};

/// A dataset of the given columns (no geometry needed by the GLMs).
fn dataset(names: &[&str], columns: &[Vec<f64>], target: Vec<f64>) -> Dataset {
    let n = target.len();
    Dataset {
        ids: (1..=n as i64).map(UnitId::Int).collect(),
        points: vec![[0.0, 0.0]; n],
        target,
        features: (0..n)
            .flat_map(|i| columns.iter().map(move |c| c[i]))
            .collect(),
        feature_names: names.iter().map(|s| s.to_string()).collect(),
        id_kind: IdKind::Integer,
        geometry_kinds: GeometryKinds::default(),
        rows_read: n as u64,
        skipped: Skipped::default(),
        groups: None,
        exposure: None,
        categorical: Vec::new(),
        geometries: None,
    }
}

#[test]
fn spector_logistic_matches_greene_and_statsmodels() {
    // The data: Spector & Mazzeo (1980), as shipped in statsmodels 0.15.0
    // (statsmodels.datasets.spector), loaded at test time.
    let doc: Value =
        serde_json::from_str(&python("models_reference.py", &["spector"], "")).unwrap();
    let column = |name: &str| -> Vec<f64> {
        doc[name]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect()
    };
    let data = dataset(
        &["GPA", "TUCE", "PSI"],
        &[column("GPA"), column("TUCE"), column("PSI")],
        column("GRADE"),
    );
    assert_eq!(data.len(), 32);
    let model = build_model("logistic", &Options::new()).unwrap();
    let rows: Vec<u32> = (0..32).collect();
    let fit = model
        .fit(&TrainingSet {
            data: &data,
            rows: &rows,
        })
        .unwrap();
    let got: Vec<f64> = fit.coefficients().into_iter().map(|(_, v)| v).collect();
    // REFERENCES.md §3.1 [COMP statsmodels 0.15.0 Logit, Newton, tol 1e-12].
    let statsmodels = [
        -13.021346858115697,
        2.826112594889321,
        0.0951576613179096,
        2.3786876550933544,
    ];
    // Greene, Econometric Analysis, 5th ed., Table 21.1 (from memory, REFERENCES.md §3.1).
    let greene = [-13.021, 2.826, 0.095, 2.379];
    for ((g, s), p) in got.iter().zip(statsmodels).zip(greene) {
        assert_close(*g, s, 1e-8, "coefficient vs statsmodels");
        assert!((g - p).abs() <= 0.0005 + 1e-12, "{g} vs Greene's {p}");
    }
    // In-sample scores of the fitted probabilities, REFERENCES.md §3.1 [COMP
    // scikit-learn 1.9.1]: AUC 0.883116883117, log loss 0.402801069442,
    // Brier 0.129505338119, accuracy at 0.5 0.8125 (given to 12 digits).
    let pairs: Vec<(f64, f64)> = (0..32)
        .map(|i| (data.target[i], fit.predict(&data.view(i))))
        .collect();
    let scores = Family::Binary.score(&pairs);
    for (name, expected) in [
        ("roc_auc", 0.883116883117),
        ("log_loss", 0.402801069442),
        ("brier", 0.129505338119),
        ("accuracy", 0.8125),
    ] {
        let got = scores.get(name).unwrap();
        assert!(
            (got - expected).abs() < 1e-11,
            "{name}: {got} vs {expected}"
        );
    }
}

/// The features, target, exposure and recorded fold of every unit of a run,
/// in id order, read from the source and `fold_members`.
struct RunTable {
    ids: Vec<String>,
    features: Vec<Vec<f64>>,
    target: Vec<f64>,
    exposure: Vec<f64>,
    fold: Vec<i64>,
}

fn run_table(store: &Store<'_>, run: &str, target: &str) -> RunTable {
    let folds = store.query(&format!(
        "SELECT unit_id, fold FROM {{r}}fold_members WHERE run_id = '{run}' ORDER BY CAST(unit_id AS INTEGER)"
    ));
    let units = psql(&format!(
        "SELECT id, a, b, landuse, {target}, pop FROM {}.units ORDER BY id",
        store.case.schema
    ));
    let mut table = RunTable {
        ids: Vec::new(),
        features: Vec::new(),
        target: Vec::new(),
        exposure: Vec::new(),
        fold: Vec::new(),
    };
    for (line, recorded) in units.lines().zip(&folds) {
        let f: Vec<&str> = line.split('|').collect();
        assert_eq!(f[0], recorded[0], "unit order");
        // landuse one-hot with the reference level farm (the first in byte
        // order), as geofold encodes a text feature whose every level is seen.
        table.ids.push(f[0].to_string());
        table.features.push(vec![
            number(f[1]),
            number(f[2]),
            f64::from(u8::from(f[3] == "forest")),
            f64::from(u8::from(f[3] == "urban")),
        ]);
        table.target.push(number(f[4]));
        table.exposure.push(number(f[5]));
        table.fold.push(recorded[1].parse().unwrap());
    }
    table
}

/// Runs `model` with `extra` options on `store` and compares every fold's
/// coefficients and held-out predictions with the reference library.
fn compare_with_reference(
    store: &Store<'_>,
    model: &str,
    target: &str,
    extra: &[&str],
    reference: Value,
) {
    let mut args = vec![
        "--target",
        target,
        "--features",
        "a,b,landuse",
        "--scheme",
        "grid",
        "--block-size",
        "500",
        "--folds",
        "5",
        "--model",
        model,
        "--job",
        model,
        "--json",
    ];
    args.extend(extra);
    let output = store.case.geofold(&store.run_args(&args));
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    let run = run_id(&output);
    let table = run_table(store, &run, target);
    let mut document = reference;
    document["features"] = json!(table.features);
    document["target"] = json!(table.target);
    document["fold"] = json!(table.fold);
    if model == "poisson" {
        document["exposure"] = json!(table.exposure);
    }
    let expected: Value = serde_json::from_str(&python(
        "models_reference.py",
        &["folds"],
        &document.to_string(),
    ))
    .unwrap();
    let terms = ["(intercept)", "a", "b", "landuse=forest", "landuse=urban"];
    for fold in 1..=5 {
        let reference = &expected[fold.to_string()];
        for (term, want) in terms
            .iter()
            .zip(reference["coefficients"].as_array().unwrap())
        {
            let got = number(&store.value(&format!(
                "SELECT estimate FROM {{r}}coefficients WHERE run_id = '{run}' AND fold = {fold} AND term = '{term}'"
            )));
            assert_close(
                got,
                want.as_f64().unwrap(),
                1e-8,
                &format!("{model} fold {fold} {term}"),
            );
        }
        let predicted: Vec<(String, f64)> = store
            .query(&format!(
                "SELECT unit_id, predicted FROM {{r}}predictions WHERE run_id = '{run}' AND fold = {fold} \
                 ORDER BY CAST(unit_id AS INTEGER)"
            ))
            .into_iter()
            .map(|r| (r[0].clone(), number(&r[1])))
            .collect();
        let units = reference["units"].as_array().unwrap();
        assert_eq!(predicted.len(), units.len());
        for ((id, got), (unit, want)) in predicted
            .iter()
            .zip(units.iter().zip(reference["predicted"].as_array().unwrap()))
        {
            assert_eq!(id, &table.ids[unit.as_u64().unwrap() as usize]);
            assert_close(
                *got,
                want.as_f64().unwrap(),
                1e-8,
                &format!("{model} prediction {id}"),
            );
        }
    }
}

#[test]
fn logistic_poisson_and_ridge_folds_match_statsmodels_and_scikit_learn_on_both_stores() {
    let case = Case::new("reference");
    create_units(&case.schema);
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        compare_with_reference(
            &store,
            "logistic",
            "flag",
            &[],
            json!({"model": "logistic"}),
        );
        compare_with_reference(
            &store,
            "poisson",
            "cases",
            &["--exposure-column", "pop"],
            json!({"model": "poisson"}),
        );
        // Ridge: scikit-learn Ridge(alpha=5) on the training fold's z-scores
        // (population SD); the module doc of ridge states the convention.
        compare_with_reference(
            &store,
            "ridge",
            "y",
            &["--penalty", "5"],
            json!({"model": "ridge", "penalty": 5.0}),
        );
    }
}

#[test]
fn every_model_writes_its_family_scores_losses_and_coefficients_on_both_stores() {
    let case = Case::new("families");
    create_units(&case.schema);
    let runs: &[(&str, &str, &[&str], Family, usize)] = &[
        ("ols", "y", &[], Family::Regression, 5),
        ("ridge", "y", &["--penalty", "1"], Family::Regression, 5),
        ("logistic", "flag", &[], Family::Binary, 5),
        (
            "poisson",
            "cases",
            &["--exposure-column", "pop"],
            Family::Count,
            5,
        ),
        (
            "idw",
            "y",
            &["--neighbours", "8", "--power", "2"],
            Family::Regression,
            0,
        ),
        (
            "knn",
            "flag",
            &["--neighbours", "5", "--family", "binary"],
            Family::Binary,
            0,
        ),
        (
            "mean",
            "cases",
            &["--family", "count", "--exposure-column", "pop"],
            Family::Count,
            1,
        ),
    ];
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "units");
        for (model, target, extra, family, terms) in runs {
            let mut args = vec![
                "--target",
                target,
                "--features",
                "a,b,landuse",
                "--block-size",
                "500",
                "--model",
                model,
                "--job",
                model,
                "--json",
            ];
            args.extend(*extra);
            let output = case.geofold(&store.run_args(&args));
            assert_eq!(code(&output), 0, "{model}: {}", stderr(&output));
            let run = run_id(&output);
            let summary = json(&output);
            for score in family.scores() {
                let pooled = store.value(&format!(
                    "SELECT value FROM {{r}}run_score_values WHERE run_id = '{run}' AND score = '{}' AND statistic = 'pooled'",
                    score.name
                ));
                let baseline = store.value(&format!(
                    "SELECT value FROM {{r}}run_score_values WHERE run_id = '{run}' AND score = '{}' AND statistic = 'baseline'",
                    score.name
                ));
                assert!(
                    !pooled.is_empty() && !baseline.is_empty(),
                    "{model} {}",
                    score.name
                );
                assert_close(
                    number(&pooled),
                    summary["runs"][0]["pooled"][score.name].as_f64().unwrap(),
                    1e-12,
                    "stored vs summary",
                );
                if *model == "mean" {
                    assert_close(
                        number(&pooled),
                        number(&baseline),
                        1e-10,
                        "mean is the baseline",
                    );
                }
            }
            let losses = store.value(&format!(
                "SELECT count(loss) FROM {{r}}held_out WHERE run_id = '{run}'"
            ));
            let expected_losses = if *family == Family::Regression {
                "0"
            } else {
                "400"
            };
            assert_eq!(losses, expected_losses, "{model} losses");
            // The per-unit losses average to the pooled headline score.
            if *family != Family::Regression {
                let mean_loss = number(&store.value(&format!(
                    "SELECT avg(loss) FROM {{r}}held_out WHERE run_id = '{run}'"
                )));
                let headline = summary["runs"][0]["pooled"][family.headline()]
                    .as_f64()
                    .unwrap();
                assert_close(mean_loss, headline, 1e-10, "mean loss");
            }
            let coefficient_rows: usize = store
                .value(&format!(
                    "SELECT count(*) FROM {{r}}coefficients WHERE run_id = '{run}'"
                ))
                .parse()
                .unwrap();
            assert_eq!(coefficient_rows, 5 * terms, "{model} coefficients");
            if *terms > 0 {
                let spread = &summary["runs"][0]["coefficients"];
                assert_eq!(spread[0]["term"], "(intercept)");
                assert_eq!(spread[0]["folds"], 5);
            }
        }
    }
}

#[test]
fn idw_and_knn_match_brute_force_and_the_columbus_baselines_on_both_stores() {
    // Columbus (Anselin 1988, as shipped in libpysal 4.14.1; tests/fixtures/
    // columbus/README.md), polygons without a CRS: leave-one-out as random
    // folds with K = 49 (one unit each).
    let case = Case::new("columbus");
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/columbus/columbus.tsv"
    ))
    .unwrap();
    let mut values = Vec::new();
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split('\t').collect();
        values.push(format!(
            "({}, {}, {}, {}, ST_GeomFromText('{}', 0))",
            f[0], f[1], f[2], f[3], f[4]
        ));
    }
    psql(&format!(
        "CREATE TABLE {s}.columbus (id integer PRIMARY KEY, crime float8, inc float8, hoval float8, geom geometry);
         INSERT INTO {s}.columbus VALUES {};",
        values.join(", "),
        s = case.schema
    ));
    let points: Vec<[f64; 2]> = psql(&format!(
        "SELECT ST_X(ST_Centroid(geom)), ST_Y(ST_Centroid(geom)) FROM {}.columbus ORDER BY id",
        case.schema
    ))
    .lines()
    .map(|l| {
        let f: Vec<f64> = l.split('|').map(number).collect();
        [f[0], f[1]]
    })
    .collect();
    let crime: Vec<f64> = psql(&format!(
        "SELECT crime FROM {}.columbus ORDER BY id",
        case.schema
    ))
    .lines()
    .map(number)
    .collect();
    // REFERENCES.md §2.4 [COMP numpy; sklearn KNeighborsRegressor], to 9 decimals.
    /// Options, IDW power, neighbours, reference RMSE and MAE.
    type Baseline<'a> = (&'a [&'a str], Option<f64>, usize, f64, f64);
    let cases: [Baseline<'_>; 2] = [
        (
            &["--model", "idw", "--neighbours", "48", "--power", "2"],
            Some(2.0),
            48,
            12.276030394,
            9.153082371,
        ),
        (
            &["--model", "knn", "--neighbours", "5"],
            None,
            5,
            11.633349694,
            7.825957939,
        ),
    ];
    for kind in [StoreKind::Postgis, StoreKind::Gpkg] {
        let store = Store::new(&case, kind, "columbus");
        for (extra, power, k, rmse, mae) in &cases {
            let mut args = vec![
                "--target",
                "crime",
                "--features",
                "inc,hoval",
                "--scheme",
                "random",
                "--folds",
                "49",
                "--assume-metres",
                "--job",
                "loo",
                "--json",
            ];
            args.extend(*extra);
            let output = case.geofold(&store.run_args(&args));
            assert_eq!(code(&output), 0, "{}", stderr(&output));
            let summary = json(&output);
            let pooled = &summary["runs"][0]["pooled"];
            assert!(
                (pooled["rmse"].as_f64().unwrap() - rmse).abs() < 6e-9,
                "{pooled}"
            );
            assert!(
                (pooled["mae"].as_f64().unwrap() - mae).abs() < 6e-9,
                "{pooled}"
            );
            let run = run_id(&output);
            let rows = store.query(&format!(
                "SELECT unit_id, fold, predicted FROM {{r}}predictions WHERE run_id = '{run}' \
                 ORDER BY CAST(unit_id AS INTEGER)"
            ));
            let fold: Vec<i64> = rows.iter().map(|r| r[1].parse().unwrap()).collect();
            let reference: Value = serde_json::from_str(&python(
                "models_reference.py",
                &["neighbours"],
                &json!({"points": points, "target": crime, "fold": fold, "k": k, "power": power})
                    .to_string(),
            ))
            .unwrap();
            for (row, want) in rows.iter().zip(reference["predicted"].as_array().unwrap()) {
                assert_close(
                    number(&row[2]),
                    want.as_f64().unwrap(),
                    1e-9,
                    &format!("unit {}", row[0]),
                );
            }
        }
    }
}
