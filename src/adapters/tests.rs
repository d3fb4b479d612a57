//! Tests of the adapters' shared pieces.

use super::*;

#[test]
fn default_jobs_include_the_schema_and_are_clean_identifiers() {
    assert_eq!(
        default_job("public.Sub-Catchments"),
        "public_sub_catchments"
    );
    assert_eq!(default_job("a.units"), "a_units");
    assert_ne!(default_job("a.units"), default_job("b.units"));
    assert_eq!(default_job("basin.gpkg:2024 units"), "job_2024_units");
    assert!(check_job(&default_job("x\"; DROP TABLE y; --")).is_ok());
    assert!(check_job("runs").is_err());
    assert!(check_job("fold_scores").is_err());
    assert!(check_job("gpkg_contents").is_err());
    assert!(check_job("Bad").is_err());
    assert!(check_job(&"a".repeat(MAX_JOB_LEN + 1)).is_err());
    assert!(default_job(&"x".repeat(200)).len() <= MAX_JOB_LEN);
}

#[test]
fn columns_resolve_as_each_store_matches_and_missing_ones_get_suggestions() {
    let existing: Vec<String> = ["id", "geom", "rainfall_mm", "Elevation"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    assert_eq!(
        resolve_columns(
            &["RAINFALL_MM", "elevation"],
            &existing,
            NameMatch::Sqlite,
            "t"
        )
        .unwrap(),
        vec!["rainfall_mm", "Elevation"]
    );
    let error = resolve_columns(
        &["Rainfall_mm", "rainfal_mm", "soil"],
        &existing,
        NameMatch::Postgres,
        "table x.y",
    )
    .unwrap_err()
    .to_string();
    assert!(
        error.contains("column rainfal_mm (did you mean rainfall_mm?)"),
        "{error}"
    );
    assert!(
        error.contains("column soil,") || error.ends_with("column soil in table x.y"),
        "{error}"
    );
    assert!(!error.contains("Rainfall_mm"), "{error}");
}

#[test]
fn lengths_are_described_in_the_crs_unit() {
    assert_eq!(describe_length(4000.0, Some("metre")), "4 km");
    assert_eq!(describe_length(800.0, Some("metre")), "800 m");
    assert_eq!(describe_length(903.094, Some("metre")), "903.1 m");
    assert_eq!(describe_length(208_152.0, Some("metre")), "208.2 km");
    assert_eq!(describe_length(1045.0, Some("metre")), "1.045 km");
    assert_eq!(describe_length(2.5, None), "2.5 CRS units");
    assert_eq!(
        describe_length(300.0, Some("US survey foot")),
        "300 × US survey foot"
    );
}
