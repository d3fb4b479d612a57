//! Tests of `spec`.

use super::*;

fn spec() -> RunSpec {
    let mut scheme_options = Options::new();
    scheme_options.insert("block-size".into(), 4000.into());
    RunSpec {
        scheme: "grid".into(),
        scheme_options,
        ..RunSpec::new(
            SourceRef::Postgis {
                db: None,
                table: "hydro.units".into(),
            },
            ColumnSpec {
                id: None,
                geom: None,
                target: "y".into(),
                features: vec!["a".into(), "b".into()],
                group: None,
                exposure: None,
            },
            ResultsRef::Postgis {
                db: None,
                schema: "geofold".into(),
            },
        )
    }
}

fn refused(change: impl FnOnce(&mut RunSpec)) -> String {
    let mut spec = spec();
    change(&mut spec);
    match spec.check() {
        Ok(_) => panic!("accepted"),
        Err(error) => {
            assert_eq!(error.exit_code(), crate::error::exit::USAGE, "{error}");
            error.to_string()
        }
    }
}

#[test]
fn a_good_spec_checks_and_survives_a_round_trip_through_json() {
    let spec = spec();
    assert!(spec.check().is_ok());
    let text = serde_json::to_string(&spec).unwrap();
    assert_eq!(serde_json::from_str::<RunSpec>(&text).unwrap(), spec);
}

#[test]
fn the_settings_hash_ignores_where_rows_come_from_and_results_go_and_follows_what_shapes_them() {
    let base = spec();
    let mut moved = spec();
    moved.results = ResultsRef::Postgis {
        db: Some("host=elsewhere".into()),
        schema: "other".into(),
    };
    moved.job = Some("nightly".into());
    moved.limits.wait_s = 60.0;
    moved.gates = crate::gates::parse_all(&["rmse<=1".into()]).unwrap();
    moved.skip_unchanged = true;
    moved.source = SourceRef::Gpkg {
        file: "copy.gpkg".into(),
        layer: Some("units".into()),
    };
    assert_eq!(base.settings_hash(), moved.settings_hash());
    let mut reseeded = spec();
    reseeded.seed = 2;
    assert_ne!(base.settings_hash(), reseeded.settings_hash());
    let mut resized = spec();
    resized
        .scheme_options
        .insert("block-size".into(), 5000.into());
    assert_ne!(base.settings_hash(), resized.settings_hash());
    assert_eq!(base.settings_hash().len(), 64);
}

#[test]
fn bad_names_and_options_are_refused_before_anything_is_opened() {
    assert!(refused(|s| s.columns.features.push(String::new())).contains("empty entry"));
    assert!(refused(|s| s.columns.features.push("a".into())).contains("twice"));
    assert!(refused(|s| s.columns.features.push("y".into())).contains("both the --target"));
    assert!(refused(|s| s.results = ResultsRef::Postgis {
        db: None,
        schema: "pg_temp".into()
    })
    .contains("reserved"));
    assert!(refused(|s| s.results = ResultsRef::Postgis {
        db: None,
        schema: "s".repeat(64)
    })
    .contains("63 bytes"));
    assert!(refused(|s| s.job = Some("j".repeat(60))).contains("at most"));
    assert!(refused(|s| s.repeats = u32::MAX).contains("--repeats"));
    assert!(refused(|s| s.exclusion_radius = Some(f64::NAN)).contains("--exclusion-radius"));
    assert!(refused(|s| s.limits.lock_timeout_s = 0.0).contains("--lock-timeout"));
    assert!(refused(|s| s.baseline_runs = 0).contains("--baseline-runs"));
    assert!(refused(|s| {
        s.scheme_options.insert("block-size".into(), 0.into());
    })
    .contains("--block-size"));
    assert!(refused(|s| {
        s.scheme_options
            .insert("folds".into(), 4_294_967_295u64.into());
    })
    .contains("--folds"));
}

#[test]
fn model_options_exposure_and_assign_only_are_checked() {
    assert!(refused(|s| s.model = "ridge".into()).contains("--penalty"));
    assert!(refused(|s| {
        s.model = "ridge".into();
        s.model_options.insert("penalty".into(), (-1.0).into());
    })
    .contains("--penalty"));
    assert!(refused(|s| {
        s.model_options.insert("neighbours".into(), 3.into());
    })
    .contains("--neighbours does not apply to --model ols"));
    assert!(refused(|s| s.columns.exposure = Some("pop".into())).contains("count models"));
    assert!(refused(|s| s.assign_only = true).contains("leave out --model"));
    assert!(refused(|s| s.model = "external".into()).contains("--assign-only"));
    let mut spec = spec();
    spec.model = "poisson".into();
    spec.columns.exposure = Some("pop".into());
    assert!(spec.check().is_ok());
    spec.model = "external".into();
    spec.model_options.insert("family".into(), "count".into());
    spec.assign_only = true;
    assert!(spec.check().is_ok());
    spec.model_options.insert("family".into(), "counts".into());
    assert!(spec.check().is_err());
}

#[test]
fn schemes_that_need_more_say_so_before_anything_is_opened() {
    let nndm = |s: &mut RunSpec| {
        s.scheme = "nndm".into();
        s.scheme_options.clear();
    };
    assert!(refused(nndm).contains("--prediction-table"));
    assert!(refused(|s| {
        s.scheme = "group".into();
        s.scheme_options.clear();
    })
    .contains("--group-column"));
    assert!(refused(|s| {
        nndm(s);
        s.prediction = Some(PredictionRef::Gpkg {
            layer: "where".into(),
        });
    })
    .contains("--prediction-table"));
    let mut ok = spec();
    nndm(&mut ok);
    ok.prediction = Some(PredictionRef::Postgis {
        table: "hydro.targets".into(),
        geom: None,
    });
    assert!(ok.check().is_ok());
    assert!(refused(|s| {
        s.prediction = Some(PredictionRef::Postgis {
            table: format!("hydro.{}", "t".repeat(64)),
            geom: None,
        });
    })
    .contains("--prediction-table"));
}
