//! `geofold demo --db` against a real PostGIS (issue 2, point 10): the invented
//! scenario is loaded into `demo.subcatchments`, validated with grid and random
//! folds into schema `geofold_demo`, and the tables are read back with psql.
//! The schema names are fixed by the demo, so this file holds one test.

mod common;

use common::{check_qgis_layer, code, db_uri, psql, run, Workdir};

/// The run id printed after `label` in the summary (e.g. `grid run <uuid> (primary)`).
fn run_id_after(summary: &str, label: &str) -> String {
    let start = summary
        .find(label)
        .unwrap_or_else(|| panic!("no {label:?} in the summary:\n{summary}"))
        + label.len();
    summary[start..start + 36].to_string()
}

#[test]
fn demo_loads_the_scenario_and_writes_grid_and_random_runs() {
    let workdir = Workdir::new();
    let mut command = workdir.geofold();
    command.args(["demo", "--db", &db_uri()]);
    let output = run(command);
    assert_eq!(code(&output), 0);
    let summary = String::from_utf8_lossy(&output.stdout);
    let grid = run_id_after(&summary, "grid run ");
    let random = run_id_after(&summary, "random run ");
    assert!(
        summary.contains("spatial vs random folds"),
        "the summary sets the two side by side:\n{summary}"
    );
    assert!(summary.contains("geofold_demo.demo_nitrate"), "{summary}");

    let loaded: usize = psql("SELECT count(*) FROM demo.subcatchments")
        .parse()
        .unwrap();
    assert!(
        (200..=1000).contains(&loaded),
        "a few hundred units, got {loaded}"
    );
    let runs = psql(&format!(
        "SELECT scheme, status, job, primary_run_id IS NULL, coalesce(primary_run_id::text, '-'), units_read
         FROM geofold_demo.runs WHERE run_id IN ('{grid}', '{random}') ORDER BY scheme"
    ));
    assert_eq!(
        runs,
        format!(
            "grid|succeeded|demo_nitrate|t|-|{loaded}\nrandom|succeeded|demo_nitrate|f|{grid}|{loaded}"
        )
    );
    let used: usize = psql(&format!(
        "SELECT units_used FROM geofold_demo.runs WHERE run_id = '{grid}'"
    ))
    .parse()
    .unwrap();
    for run in [&grid, &random] {
        // Result rows join to the source by its own integer id, no cast.
        assert_eq!(
            psql(&format!(
                "SELECT count(*) FROM demo.subcatchments s JOIN geofold_demo.predictions p ON s.id = p.unit_id
                 WHERE p.run_id = '{run}' AND p.observed = s.nitrate_mg_l"
            )),
            used.to_string(),
            "predictions of run {run}"
        );
    }
    assert_eq!(
        psql(&format!(
            "SELECT (SELECT sum(n_units) FROM geofold_demo.blocks WHERE run_id = '{grid}'),
                    (SELECT count(*) FROM geofold_demo.blocks WHERE run_id = '{random}')"
        )),
        format!("{used}|0"),
        "the grid run's blocks hold every unit; the random run has none"
    );
    check_qgis_layer(
        "geofold_demo",
        "demo_nitrate",
        "fid",
        "MULTIPOLYGON",
        32631,
        used,
    );
    assert_eq!(
        psql("SELECT DISTINCT run_id FROM geofold_demo.demo_nitrate"),
        grid,
        "the view shows the grid run just written"
    );
}
