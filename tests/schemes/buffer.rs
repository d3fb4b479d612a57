//! The exclusion buffer of every scheme against PostGIS's `ST_DWithin`.

use crate::support::*;

/// Asserts a PostGIS run's exclusions against `ST_DWithin`: no training unit
/// of a fold within `radius` of one of its test units, every excluded unit
/// within `radius` of one, and no test unit listed as excluded.
fn buffer_matches_st_dwithin(case: &Case, run: &str, radius: f64) {
    let leaks = case.query(&format!(
        "SELECT count(*) FROM {{r}}.fold_members t
         JOIN {{s}}.units ut ON ut.id::text = t.unit_id
         JOIN {{r}}.fold_members o ON o.run_id = t.run_id AND o.repetition = t.repetition AND o.fold <> t.fold
         JOIN {{s}}.units uo ON uo.id::text = o.unit_id
         WHERE t.run_id = '{run}' AND ST_DWithin(ut.geom, uo.geom, {radius})
         AND NOT EXISTS (SELECT 1 FROM {{r}}.fold_exclusions e WHERE e.run_id = t.run_id
             AND e.repetition = t.repetition AND e.fold = t.fold AND e.unit_id = o.unit_id)"
    ));
    assert_eq!(
        leaks, "0",
        "training units within {radius} of a test unit (run {run})"
    );
    let stray = case.query(&format!(
        "SELECT count(*) FROM {{r}}.fold_exclusions e JOIN {{s}}.units ue ON ue.id::text = e.unit_id
         WHERE e.run_id = '{run}' AND NOT EXISTS (
             SELECT 1 FROM {{r}}.fold_members t JOIN {{s}}.units ut ON ut.id::text = t.unit_id
             WHERE t.run_id = e.run_id AND t.repetition = e.repetition AND t.fold = e.fold
             AND ST_DWithin(ut.geom, ue.geom, {radius}))"
    ));
    assert_eq!(
        stray, "0",
        "excluded units farther than {radius} from every test unit (run {run})"
    );
    let tested = case.query(&format!(
        "SELECT count(*) FROM {{r}}.fold_exclusions e JOIN {{r}}.fold_members t
         ON t.run_id = e.run_id AND t.repetition = e.repetition AND t.fold = e.fold AND t.unit_id = e.unit_id
         WHERE e.run_id = '{run}'"
    ));
    assert_eq!(tested, "0", "a test unit listed as excluded (run {run})");
}

#[test]
fn exclusion_buffers_match_st_dwithin_on_every_scheme_and_both_stores() {
    let case = Case::new("buffer");
    create_units(&case);
    case.copy_to_gpkg("units");
    // The lattice spacing is exactly 100 m, so radius 100 puts units at
    // exactly the radius: the rule is "≤ R is excluded", as ST_DWithin.
    for (options, radius) in [
        (
            "--scheme grid --block-size 400 --exclusion-radius 100",
            100.0,
        ),
        ("--scheme loo --exclusion-radius 100", 100.0),
        (
            "--scheme kmeans --folds 4 --exclusion-radius 150 --repeats 2",
            150.0,
        ),
        (
            "--scheme group --group-column district --exclusion-radius 250",
            250.0,
        ),
        ("--scheme random --exclusion-radius 120", 120.0),
    ] {
        let run = run_id(&case.ok(Store::Postgis, options));
        buffer_matches_st_dwithin(&case, &run, radius);
        if radius == 100.0 {
            let at_radius = case.query(&format!(
                "SELECT count(*) FROM {{r}}.fold_exclusions e JOIN {{s}}.units ue ON ue.id::text = e.unit_id
                 JOIN {{r}}.fold_members t ON t.run_id = e.run_id AND t.repetition = e.repetition AND t.fold = e.fold
                 JOIN {{s}}.units ut ON ut.id::text = t.unit_id
                 WHERE e.run_id = '{run}' AND ST_Distance(ut.geom, ue.geom) = {radius}"
            ));
            assert_ne!(
                at_radius, "0",
                "{options}: units at exactly the radius are excluded"
            );
        }
        let postgis = case.exclusions(Store::Postgis, &run);
        assert!(!postgis.is_empty(), "{options}");
        let gpkg = run_id(&case.ok(Store::Gpkg, options));
        assert_eq!(
            postgis,
            case.exclusions(Store::Gpkg, &gpkg),
            "{options}: the same exclusions from both stores"
        );
    }
}
