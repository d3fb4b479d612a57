//! The spatial diagnostics against live reference libraries and PostGIS.
//!
//! - Columbus (Anselin 1988; libpysal's copy, BSD-3): contiguity, Moran's I
//!   and its moments, the regression-residual moments and the permutation
//!   test, against libpysal 4.14.1, esda 2.9.0 and spreg 1.9.0 run at test
//!   time by `tests/python/diagnostics_reference.py` with the project's
//!   Python (`GEOFOLD_PYTHON`, set by `scripts/test.sh`).
//! - Meuse (scikit-gstat 1.0.26's copy, MIT): the sample semivariogram and
//!   the WLS fits against numpy/scipy in the same script.
//! - Columbus contiguity from a PostGIS self-join (`ST_Touches`,
//!   `ST_Relate(a, b, 'F***1****')`) against the Rust pairs, on the
//!   throwaway PostGIS of `scripts/test.sh` (`GEOFOLD_TEST_DB`).

mod common;

#[path = "fixtures/loaders.rs"]
mod fixtures;

use approx::assert_relative_eq;
use geofold::core::diagnostics::contiguity::{contiguity_pairs, Contiguity};
use geofold::core::diagnostics::moran::{moran, moran_residuals};
use geofold::core::diagnostics::pairs::LagParams;
use geofold::core::diagnostics::permutation::{moran_permutation, PermutationParams};
use geofold::core::diagnostics::semivariogram::semivariogram;
use geofold::core::diagnostics::variogram_fit::{fit_variogram, VariogramModel};
use geofold::core::diagnostics::weights::{Transform, Weights};
use geofold::core::models::ols::fit_ols;
use nalgebra::{DMatrix, DVector};
use serde_json::Value;

/// Runs the reference script once per test (about a second).
fn reference() -> Value {
    if std::env::var("GEOFOLD_PYTHON").map_or(true, |path| path.is_empty()) {
        panic!(
            "GEOFOLD_PYTHON is not set: run `bash scripts/test.sh`, or set it to the python \
             printed by `bash scripts/python-env.sh`"
        );
    }
    let output = common::python_script(
        "python/diagnostics_reference.py",
        &[fixtures::MEUSE_PATH],
        "",
    );
    serde_json::from_str(&output).expect("JSON from diagnostics_reference.py")
}

fn float(value: &Value) -> f64 {
    value.as_f64().expect("a number")
}

fn floats(value: &Value) -> Vec<f64> {
    value
        .as_array()
        .expect("an array")
        .iter()
        .map(float)
        .collect()
}

struct Columbus {
    polygons: Vec<geo_types::Geometry<f64>>,
    crime: Vec<f64>,
    design: DMatrix<f64>,
    residuals: Vec<f64>,
}

fn columbus() -> Columbus {
    let units = fixtures::columbus();
    let regression = fixtures::columbus_regression(&units);
    // geofold's QR OLS (the full-data fit the pipeline uses) against the
    // fixture's SVD solution.
    let fit = fit_ols(
        regression.design.clone(),
        DVector::from_vec(regression.crime.clone()),
        &["INC".into(), "HOVAL".into()],
    )
    .expect("OLS fit");
    for (ours, svd) in fit.coefficients.iter().zip(&regression.coefficients) {
        assert_relative_eq!(*ours, *svd, max_relative = 1e-11);
    }
    Columbus {
        polygons: units.into_iter().map(|u| u.polygon).collect(),
        crime: regression.crime,
        design: regression.design,
        residuals: regression.residuals,
    }
}

#[test]
fn columbus_against_libpysal_esda_and_spreg() {
    let reference = reference();
    let data = columbus();
    let reference_residuals = floats(&reference["columbus"]["residuals"]);
    for (ours, theirs) in data.residuals.iter().zip(&reference_residuals) {
        // numpy lstsq against geofold's QR OLS.
        assert!((ours - theirs).abs() < 1e-9, "{ours} vs {theirs}");
    }
    for (name, rule) in [("queen", Contiguity::Queen), ("rook", Contiguity::Rook)] {
        let reference = &reference["columbus"][name];
        // Contiguity: DE-9IM in Rust against libpysal's from_shapefile.
        let pairs = contiguity_pairs(&data.polygons, rule).expect("contiguity");
        let weights = Weights::from_pairs(49, &pairs, Transform::Row).expect("weights");
        let lists = reference["neighbours"].as_array().expect("lists");
        for (i, list) in lists.iter().enumerate() {
            let theirs: Vec<u32> = list
                .as_array()
                .expect("a list")
                .iter()
                .map(|v| v.as_u64().expect("an index") as u32)
                .collect();
            assert_eq!(weights.neighbours(i), theirs.as_slice(), "{name}, unit {i}");
        }
        for (transform, key) in [(Transform::Row, "r"), (Transform::Binary, "b")] {
            let weights = weights.clone().with_transform(transform);
            let mut cases = vec![("crime", &data.crime)];
            if key == "r" {
                cases.push(("residuals", &data.residuals));
            }
            for (variable, values) in cases {
                let esda = &reference[key][variable];
                let label = format!("{name}/{key}/{variable}");
                let m = moran(&weights, values).expect("Moran's I");
                let tol = 1e-10;
                assert_relative_eq!(m.sums.s0, float(&esda["S0"]), max_relative = tol);
                assert_relative_eq!(m.sums.s1, float(&esda["S1"]), max_relative = tol);
                assert_relative_eq!(m.sums.s2, float(&esda["S2"]), max_relative = tol);
                assert_relative_eq!(m.statistic, float(&esda["I"]), max_relative = tol);
                assert_relative_eq!(m.normality.expected, float(&esda["EI"]), max_relative = tol);
                assert_relative_eq!(
                    m.normality.variance,
                    float(&esda["VI_norm"]),
                    max_relative = tol
                );
                assert_relative_eq!(m.normality.z, float(&esda["z_norm"]), max_relative = tol);
                assert_relative_eq!(
                    m.normality.p_two_sided,
                    float(&esda["p_norm"]),
                    max_relative = 1e-8
                );
                assert_relative_eq!(
                    m.randomisation.variance,
                    float(&esda["VI_rand"]),
                    max_relative = tol
                );
                assert_relative_eq!(
                    m.randomisation.z,
                    float(&esda["z_rand"]),
                    max_relative = tol
                );
                assert_relative_eq!(
                    m.randomisation.p_two_sided,
                    float(&esda["p_rand"]),
                    max_relative = 1e-8
                );
                // Permutations: different random streams, so compare the
                // seed-free properties (REFERENCES §2.3): both means within
                // 0.01 of E[I], SDs within 10 % of √Var_R, and each other's
                // within 5 standard errors; the one-sided p agrees on ≤ 0.01.
                let test = moran_permutation(
                    &weights,
                    values,
                    &PermutationParams {
                        permutations: 999,
                        seed: 12345,
                    },
                )
                .expect("permutation test");
                let sd_r = m.randomisation.variance.sqrt();
                assert!(
                    (test.mean - m.normality.expected).abs() < 0.01,
                    "{label}: {test:?}"
                );
                assert!((test.sd / sd_r - 1.0).abs() < 0.1, "{label}: {test:?}");
                let esda_mean = float(&esda["EI_sim"]);
                let esda_sd = float(&esda["seI_sim"]);
                assert!((esda_mean - m.normality.expected).abs() < 0.01, "{label}");
                assert!((esda_sd / sd_r - 1.0).abs() < 0.1, "{label}");
                assert!(
                    (test.mean - esda_mean).abs() < 5.0 * sd_r * (2.0f64 / 999.0).sqrt(),
                    "{label}: {} vs {esda_mean}",
                    test.mean
                );
                assert!(
                    test.p_greater <= 0.01 && float(&esda["p_sim"]) <= 0.01,
                    "{label}"
                );
                if variable == "crime" {
                    // z ≈ 5.6: no permutation comes near (REFERENCES §2.3).
                    assert_eq!(test.p_greater, 0.001, "{label}");
                    assert_eq!(float(&esda["p_sim"]), 0.001, "{label}");
                }
            }
        }
        // Regression-residual moments against spreg's moran_res (I, z, p).
        let spreg = floats(&reference["moran_res"]);
        let m = moran_residuals(&weights, &data.residuals, &data.design).expect("residual Moran");
        assert_relative_eq!(m.statistic, spreg[0], max_relative = 1e-10);
        assert_relative_eq!(m.inference.z, spreg[1], max_relative = 1e-10);
        assert_relative_eq!(m.inference.p_two_sided, spreg[2], max_relative = 1e-8);
    }
}

#[test]
fn meuse_semivariogram_and_fits_against_numpy_and_scipy() {
    let reference = reference();
    let meuse = &reference["meuse"];
    let (points, zinc) = fixtures::meuse();
    let log_zinc: Vec<f64> = zinc.iter().map(|z| z.ln()).collect();
    let sv = semivariogram(&points, &log_zinc, &LagParams::default()).expect("semivariogram");
    assert_relative_eq!(sv.cutoff, float(&meuse["cutoff"]), max_relative = 1e-15);
    assert_relative_eq!(sv.width, float(&meuse["width"]), max_relative = 1e-15);
    let counts = meuse["counts"].as_array().expect("counts");
    let distances = floats(&meuse["distances"]);
    let gammas = floats(&meuse["gammas"]);
    for (k, lag) in sv.lags.iter().enumerate() {
        assert_eq!(lag.pairs, counts[k].as_u64().expect("a count"), "lag {k}");
        assert_relative_eq!(
            lag.distance.expect("filled"),
            distances[k],
            max_relative = 1e-12
        );
        assert_relative_eq!(lag.gamma.expect("filled"), gammas[k], max_relative = 1e-12);
    }
    for (name, model) in [
        ("spherical", VariogramModel::Spherical),
        ("exponential", VariogramModel::Exponential),
    ] {
        let scipy = floats(&meuse["fits"][name]);
        let fit = fit_variogram(&sv, model).expect("fit");
        assert!(
            (fit.nugget - scipy[0]).abs() < 1e-6 * (scipy[0] + scipy[1]),
            "{name}: {fit:?}"
        );
        assert_relative_eq!(fit.partial_sill, scipy[1], max_relative = 1e-6);
        assert_relative_eq!(fit.range_parameter, scipy[2], max_relative = 1e-6);
    }
}

#[test]
fn columbus_contiguity_from_postgis_equals_the_rust_pairs() {
    let data = columbus();
    let schema = common::unique_name("contiguity");
    let mut sql = format!(
        "CREATE SCHEMA {schema};\n\
         CREATE TABLE {schema}.columbus (id integer PRIMARY KEY, geom geometry(Polygon, 0));\n\
         INSERT INTO {schema}.columbus VALUES\n"
    );
    let rows: Vec<String> = data
        .polygons
        .iter()
        .enumerate()
        .map(|(i, polygon)| {
            use wkt::ToWkt;
            format!("({i}, ST_GeomFromText('{}', 0))", polygon.wkt_string())
        })
        .collect();
    sql.push_str(&rows.join(",\n"));
    sql.push_str(&format!(
        ";\nCREATE INDEX ON {schema}.columbus USING gist (geom);\nANALYZE {schema}.columbus;\n"
    ));
    common::psql_script(&sql);
    // The self-join the PostGIS store runs: bounding boxes by the GiST
    // index, then the DE-9IM predicate; each pair once (a.id < b.id).
    let pairs_of = |predicate: &str| -> Vec<(u32, u32)> {
        let out = common::psql(&format!(
            "SELECT a.id, b.id FROM {schema}.columbus a JOIN {schema}.columbus b \
             ON a.id < b.id AND a.geom && b.geom AND {predicate} ORDER BY 1, 2"
        ));
        out.lines()
            .map(|line| {
                let (a, b) = line.split_once('|').expect("two columns");
                (a.parse().expect("an id"), b.parse().expect("an id"))
            })
            .collect()
    };
    let queen = pairs_of("ST_Touches(a.geom, b.geom)");
    let rook = pairs_of("ST_Relate(a.geom, b.geom, 'F***1****')");
    common::psql(&format!("DROP SCHEMA {schema} CASCADE"));
    assert_eq!(queen.len(), 118);
    assert_eq!(rook.len(), 100);
    assert_eq!(
        contiguity_pairs(&data.polygons, Contiguity::Queen).expect("queen"),
        queen
    );
    assert_eq!(
        contiguity_pairs(&data.polygons, Contiguity::Rook).expect("rook"),
        rook
    );
    // And both paths build identical weights.
    assert_eq!(
        Weights::from_pairs(49, &queen, Transform::Row).expect("weights"),
        Weights::from_pairs(
            49,
            &contiguity_pairs(&data.polygons, Contiguity::Queen).expect("queen"),
            Transform::Row
        )
        .expect("weights")
    );
}
