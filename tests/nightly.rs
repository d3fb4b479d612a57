//! Nightly operations from the command line (issue "nightly operations"):
//! job files, drift gates, history, compare, pin, skip-unchanged, prune,
//! least privilege, exit codes, logs and progress, completions and man pages.
//!
//! The references are outside geofold: PostgreSQL (psql straight to the
//! server, its catalogues and advisory locks), SQLite reading the GeoPackage
//! (rusqlite), RMSE recomputed in SQL from the stored held-out pairs
//! (sqrt(mean((observed − predicted)²)), common practice, no source), the
//! median of one value being that value (common practice, no source),
//! sysexits(3) for 64, 65, 69 and 78, bash for the completion script, and
//! the README's own GRANT statements. The data are an invented lattice.

mod common;
mod nightly_support;

use common::{code, db_uri, json, psql, Workdir};
use nightly_support::{job_report, run_plots, stderr, stdout, uri_as, Case};
use serde_json::Value;

/// Pooled RMSE of a run recomputed from its held-out pairs in PostgreSQL.
fn sql_rmse(case: &Case, run_id: &str) -> f64 {
    case.query(&format!(
        "SELECT sqrt(avg((observed - predicted) ^ 2)) FROM {{r}}.held_out WHERE run_id = '{run_id}'"
    ))
    .parse()
    .unwrap()
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(1.0)
}

fn f(value: &Value) -> f64 {
    value.as_f64().unwrap_or(f64::NAN)
}

#[test]
fn a_job_file_with_two_jobs_runs_gates_and_records_history_on_postgis() {
    let case = Case::new("jobs_pg", 16);
    let file = case.job_file(
        "nightly.toml",
        &format!(
            "{}\n{}",
            case.job(
                "grid",
                &db_uri(),
                "block-size = 4000\ngate = [\"rmse<=+10%\", \"r2>=-1\"]"
            ),
            case.job(
                "tight",
                &db_uri(),
                "scheme = \"random\"\ngate = \"rmse<=0.000001\""
            )
        ),
    );
    let file = file.to_str().unwrap();
    // First night: no baseline yet for the relative gate; the tight gate is breached.
    let first = case.run(&["run", "--config", file, "--json"]);
    assert_eq!(code(&first), 1, "worst of ok and gate breached");
    let document = json(&first);
    assert_eq!(document["exit_code"], 1);
    let grid = job_report(&document, "grid");
    assert_eq!(grid["outcome"], "succeeded");
    assert_eq!(grid["summary"]["gates"][0]["verdict"], "no_baseline");
    assert_eq!(grid["summary"]["gates"][1]["verdict"], "passed");
    let tight = job_report(&document, "tight");
    assert_eq!(tight["outcome"], "gate_breached");
    let breach = &tight["summary"]["gates"][0];
    let tight_run = tight["summary"]["runs"][0]["run_id"].as_str().unwrap();
    assert_eq!(breach["verdict"], "breached");
    assert!(close(f(&breach["value"]), sql_rmse(&case, tight_run)));
    assert_eq!(f(&breach["limit"]), 0.000001);
    assert_eq!(
        case.query(&format!(
            "SELECT count(*) FROM {{r}}.held_out WHERE run_id = '{tight_run}'"
        )),
        "256",
        "a breached run still writes its results"
    );
    let text = stdout(&case.run(&["run", "--config", file, "--job", "tight"]));
    assert!(
        text.contains("gate rmse<=0.000001: BREACHED: rmse") && text.contains("limit 0.000001"),
        "{text}"
    );

    // Second night: the baseline is the median of the one earlier run, i.e. its RMSE.
    let first_grid = grid["summary"]["runs"][0]["run_id"]
        .as_str()
        .unwrap()
        .to_string();
    let second = case.run(&["run", "--config", file, "--job", "grid", "--json"]);
    assert_eq!(code(&second), 0);
    let second = json(&second);
    let gate = &job_report(&second, "grid")["summary"]["gates"][0];
    let baseline = sql_rmse(&case, &first_grid);
    assert!(close(f(&gate["baseline"]), baseline));
    assert!(close(f(&gate["limit"]), baseline * 1.1));
    assert!(gate["baseline_from"]
        .as_str()
        .unwrap()
        .contains("median of the last 1"));

    // History lists both runs with their stored scores, as the runs table holds them.
    let history = json(&case.run(&["history", "--config", file, "--job", "grid", "--json"]));
    let runs = history["runs"].as_array().unwrap();
    assert_eq!(runs.len(), 2);
    assert_eq!(
        case.query("SELECT count(*) FROM {r}.runs WHERE job = 'grid' AND status = 'succeeded'"),
        "2"
    );
    assert_eq!(runs[1]["run_id"], first_grid.as_str(), "newest first");
    let listed = stdout(&case.run(&[
        "history",
        "--db",
        &db_uri(),
        "--results-schema",
        &case.results,
    ]));
    assert!(
        listed.contains(&first_grid) && listed.contains("tight"),
        "{listed}"
    );

    // A gate on the command line replaces the file's; pinning moves the baseline.
    let breached = case.run(&[
        "run",
        "--config",
        file,
        "--job",
        "grid",
        "--gate",
        "rmse<=-50%",
        "--json",
    ]);
    assert_eq!(code(&breached), 1);
    let breached = json(&breached);
    let gates = &job_report(&breached, "grid")["summary"]["gates"];
    assert_eq!(gates.as_array().unwrap().len(), 1);
    assert!(close(f(&gates[0]["limit"]), baseline * 0.5));
    let pinned = case.run(&["pin", "--config", file, "--job", "grid", &first_grid]);
    assert_eq!(code(&pinned), 0);
    assert_eq!(
        case.query("SELECT run_id FROM {r}.runs WHERE pinned"),
        first_grid,
        "pinned in the runs table"
    );
    let against_pin = json(&case.run(&["run", "--config", file, "--job", "grid", "--json"]));
    let gate = &job_report(&against_pin, "grid")["summary"]["gates"][0];
    assert_eq!(gate["baseline_from"], format!("pinned run {first_grid}"));
    let failed_pin = case.run(&["pin", "--config", file, "--job", "grid", "not-a-run"]);
    assert_eq!(code(&failed_pin), 64);
    // Unpinning puts the median baseline back; unpinning again changes nothing.
    let unpin = [
        "pin", "--config", file, "--job", "grid", "--unpin", "--json",
    ];
    let unpinned = case.run(&[&unpin[..], &[first_grid.as_str()]].concat());
    assert_eq!(code(&unpinned), 0);
    assert_eq!(json(&unpinned)["changed"], true);
    assert_eq!(
        case.query("SELECT count(*) FROM {r}.runs WHERE pinned"),
        "0"
    );
    let against_median = json(&case.run(&["run", "--config", file, "--job", "grid", "--json"]));
    let gate = &job_report(&against_median, "grid")["summary"]["gates"][0];
    assert!(
        gate["baseline_from"].as_str().unwrap().contains("median"),
        "{gate}"
    );
    let again = case.run(&[&unpin[..], &[first_grid.as_str()]].concat());
    assert_eq!(code(&again), 0);
    assert_eq!(json(&again)["changed"], false);
}

#[test]
fn a_job_file_with_two_jobs_runs_gates_and_records_history_on_geopackage() {
    let workdir = Workdir::new();
    let mut demo = workdir.geofold();
    demo.args(["demo", "--out", "basin.gpkg"]);
    assert_eq!(code(&common::run(demo)), 0);
    let job = |name: &str, extra: &str| {
        format!(
            "[job.{name}]\ngpkg = \"basin.gpkg\"\nlayer = \"subcatchments\"\ntarget = \"nitrate_mg_l\"\n\
             features = [\"farmland_share\", \"rainfall_mm\"]\n{extra}\n"
        )
    };
    let text = job("grid", "block-size = 4000\ngate = [\"rmse<=+10%\"]")
        + &job("random", "scheme = \"random\"\ngate = [\"rmse<=0.5\"]");
    std::fs::write(workdir.path("g.toml"), text).unwrap();
    let run = |args: &[&str]| {
        let mut command = workdir.geofold();
        command.args(args);
        common::run(command)
    };
    assert_eq!(code(&run(&["config-check", "g.toml"])), 0);
    for night in 0..2 {
        let output = run(&["run", "--config", "g.toml", "--json"]);
        assert_eq!(
            code(&output),
            1,
            "night {night}: the random job's gate is breached"
        );
        let document = json(&output);
        let gate = &job_report(&document, "grid")["summary"]["gates"][0];
        assert_eq!(
            gate["verdict"],
            if night == 0 { "no_baseline" } else { "passed" }
        );
    }
    // SQLite itself: four runs of the two jobs, all succeeded, held-out rows for each.
    let conn = rusqlite::Connection::open(workdir.path("basin.gpkg")).unwrap();
    let count: i64 = conn
        .query_row(
            "SELECT count(*) FROM runs WHERE job IN ('grid', 'random') AND status = 'succeeded'",
            [],
            |row| row.get(0),
        )
        .unwrap();
    assert_eq!(count, 4);
    let (run_id, mse): (String, f64) = conn
        .query_row(
            "SELECT r.run_id, avg((h.observed - h.predicted) * (h.observed - h.predicted))
             FROM runs r JOIN held_out h ON h.run_id = r.run_id WHERE r.job = 'random'
             GROUP BY r.run_id ORDER BY r.started_at DESC LIMIT 1",
            [],
            |row| Ok((row.get(0)?, row.get(1)?)),
        )
        .unwrap();
    let history = json(&run(&[
        "history", "--config", "g.toml", "--job", "random", "--json",
    ]));
    let newest = &history["runs"][0];
    assert_eq!(newest["run_id"], run_id.as_str());
    let rmse = newest["scores"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s[0] == "rmse" && s[1] == "pooled")
        .map(|s| f(&s[2]))
        .unwrap();
    assert!(close(rmse, mse.sqrt()), "{rmse} vs {}", mse.sqrt());
    // Prune keeps one run per job; the removed run's rows are gone from the file.
    let older: String = conn
        .query_row(
            "SELECT run_id FROM runs WHERE job = 'random' ORDER BY started_at LIMIT 1",
            [],
            |row| row.get(0),
        )
        .unwrap();
    drop(conn);
    // A pinned run is spared by prune; unpinned, it goes.
    let pin = |extra: &[&str]| {
        let mut args = vec!["pin", "--gpkg", "basin.gpkg", &older];
        args.extend_from_slice(extra);
        code(&run(&args))
    };
    assert_eq!(pin(&[]), 0);
    let spared = json(&run(&[
        "prune",
        "--config",
        "g.toml",
        "--job",
        "random",
        "--keep",
        "1",
        "--dry-run",
        "--json",
    ]));
    assert_eq!(spared["removed"].as_array().unwrap().len(), 0, "{spared}");
    assert_eq!(pin(&["--unpin"]), 0);
    let pruned = json(&run(&[
        "prune", "--config", "g.toml", "--job", "random", "--keep", "1", "--json",
    ]));
    assert_eq!(pruned["removed"][0]["run_id"], older.as_str());
    assert!(f(&pruned["deleted"]["bytes"]) > 0.0);
    let conn = rusqlite::Connection::open(workdir.path("basin.gpkg")).unwrap();
    let left: i64 = conn
        .query_row(
            "SELECT count(*) FROM held_out WHERE run_id = ?1",
            [&older],
            |row| row.get(0),
        )
        .unwrap();
    assert_eq!(left, 0);
}

#[test]
fn skip_unchanged_writes_nothing_until_the_input_or_the_settings_change() {
    let case = Case::new("unchanged", 12);
    let runs = || case.query("SELECT count(*) FROM {r}.runs");
    assert_eq!(
        code(&run_plots(
            &case,
            &["--skip-unchanged", "--scheme", "random"]
        )),
        0
    );
    assert_eq!(runs(), "1");
    let again = run_plots(&case, &["--skip-unchanged", "--scheme", "random"]);
    assert_eq!(code(&again), 0);
    assert_eq!(json(&again)["status"], "unchanged");
    assert_eq!(runs(), "1", "nothing written");
    assert_eq!(
        code(&run_plots(
            &case,
            &["--skip-unchanged", "--scheme", "random", "--seed", "2"]
        )),
        0
    );
    assert_eq!(runs(), "2", "another seed is another setting");
    case.query("UPDATE {s}.plots SET yield = yield + 1 WHERE id = 5 RETURNING id");
    assert_eq!(
        code(&run_plots(
            &case,
            &["--skip-unchanged", "--scheme", "random", "--seed", "2"]
        )),
        0
    );
    assert_eq!(runs(), "3", "changed input runs again");
}

#[test]
fn compare_reports_scores_folds_units_added_and_removed_and_the_largest_changes() {
    let case = Case::new("compare", 12);
    let first = json(&run_plots(&case, &["--block-size", "3000"]));
    case.query("DELETE FROM {s}.plots WHERE id = 0 RETURNING id");
    case.query(
        "INSERT INTO {s}.plots SELECT 1000, ST_Translate(geom, 0, 20000), wetness, slope, yield \
         FROM {s}.plots WHERE id = 1 RETURNING id",
    );
    let second = json(&run_plots(&case, &["--block-size", "3000"]));
    let (a, b) = (
        first["runs"][0]["run_id"].as_str().unwrap(),
        second["runs"][0]["run_id"].as_str().unwrap(),
    );
    let output = case.run(&[
        "compare",
        "--db",
        &db_uri(),
        "--results-schema",
        &case.results,
        a,
        b,
        "--top",
        "3",
        "--json",
    ]);
    assert_eq!(code(&output), 0);
    let c = json(&output);
    assert_eq!(c["units_removed"], serde_json::json!(["0"]));
    assert_eq!(c["units_added"], serde_json::json!(["1000"]));
    assert_eq!(c["same_input"], false);
    let rmse = c["scores"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["score"] == "rmse" && s["statistic"] == "pooled")
        .unwrap();
    assert!(close(
        f(&rmse["change"]),
        sql_rmse(&case, b) - sql_rmse(&case, a)
    ));
    let largest = c["largest_changes"].as_array().unwrap();
    assert_eq!(largest.len(), 3);
    let top = &largest[0];
    let unit = top["unit_id"].as_str().unwrap();
    let sql_change: f64 = case
        .query(&format!(
            "SELECT (SELECT avg(abs(observed - predicted)) FROM {{r}}.held_out WHERE run_id = '{b}' AND unit_id = '{unit}') \
                  - (SELECT avg(abs(observed - predicted)) FROM {{r}}.held_out WHERE run_id = '{a}' AND unit_id = '{unit}')"
        ))
        .parse()
        .unwrap();
    assert!(close(f(&top["change"]), sql_change));
    let largest_sql: f64 = case
        .query(&format!(
            "SELECT max(abs(b.e - a.e)) FROM
               (SELECT unit_id, avg(abs(observed - predicted)) e FROM {{r}}.held_out WHERE run_id = '{a}' GROUP BY 1) a
               JOIN (SELECT unit_id, avg(abs(observed - predicted)) e FROM {{r}}.held_out WHERE run_id = '{b}' GROUP BY 1) b
               USING (unit_id)"
        ))
        .parse()
        .unwrap();
    assert!(close(f(&top["change"]).abs(), largest_sql));
    assert!(!c["folds"].as_array().unwrap().is_empty());
}

#[test]
fn prune_removes_beyond_a_count_or_an_age_in_one_transaction_and_never_a_pinned_baseline() {
    let case = Case::new("prune", 10);
    let mut ids = Vec::new();
    for seed in 1..=4 {
        let seed = seed.to_string();
        let output = run_plots(&case, &["--scheme", "random", "--seed", &seed]);
        ids.push(
            json(&output)["runs"][0]["run_id"]
                .as_str()
                .unwrap()
                .to_string(),
        );
    }
    let store = ["--db", &db_uri(), "--results-schema", &case.results];
    let prune = |extra: &[&str]| {
        let mut args = vec!["prune"];
        args.extend_from_slice(&store);
        args.extend_from_slice(extra);
        args.push("--json");
        case.run(&args)
    };
    assert_eq!(
        code(&case.run(&[&["pin"][..], &store, &[ids[0].as_str()]].concat())),
        0
    );
    let rows_before = case.all_result_rows();
    let expected: u64 = case.rows_of_run(&ids[1]) + case.rows_of_run(&ids[2]) + 2;
    let dry = prune(&["--keep", "1", "--dry-run"]);
    assert_eq!(code(&dry), 0);
    let dry = json(&dry);
    let removed: Vec<&str> = dry["removed"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["run_id"].as_str().unwrap())
        .collect();
    assert_eq!(removed.len(), 2);
    assert!(removed.contains(&ids[1].as_str()) && removed.contains(&ids[2].as_str()));
    assert_eq!(dry["spared"][0]["run_id"], ids[0].as_str());
    assert_eq!(
        case.all_result_rows(),
        rows_before,
        "a dry run removes nothing"
    );
    let counted: u64 = dry["deleted"]["rows"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r[1].as_u64().unwrap())
        .sum();
    assert_eq!(
        counted, expected,
        "rows of both runs, their runs rows included"
    );
    let real = json(&prune(&["--keep", "1"]));
    assert!(f(&real["deleted"]["bytes"]) > 0.0);
    assert_eq!(case.rows_of_run(&ids[1]) + case.rows_of_run(&ids[2]), 0);
    assert_eq!(case.query("SELECT count(*) FROM {r}.runs"), "2");
    // By age: the newest stays (the job's layers show it), the pinned one stays.
    let fifth = json(&run_plots(&case, &["--scheme", "random", "--seed", "5"]));
    let fifth = fifth["runs"][0]["run_id"].as_str().unwrap();
    case.query(&format!(
        "UPDATE {{r}}.runs SET started_at = now() - interval '30 days' WHERE run_id <> '{fifth}' RETURNING 1"
    ));
    let aged = json(&prune(&["--older-than", "7"]));
    assert_eq!(aged["removed"][0]["run_id"], ids[3].as_str());
    assert_eq!(aged["removed"].as_array().unwrap().len(), 1);
    assert_eq!(case.query("SELECT count(*) FROM {r}.runs"), "2");
    assert_eq!(code(&prune(&["--older-than", "0"])), 64);
    assert_eq!(
        code(&case.run(&[&["prune"][..], &store].concat())),
        64,
        "a rule is required"
    );
}

/// The README's least-privilege roles, as written there.
fn readme_roles() -> String {
    let readme = include_str!("../README.md");
    let start = readme
        .find("```sql\n-- geofold_reader")
        .expect("the roles block in the README");
    let block = &readme[start + 7..];
    block[..block.find("```").unwrap()].to_string()
}

#[test]
fn the_readme_roles_run_a_job_file_with_nothing_more() {
    let case = Case::new("roles", 10);
    let (reader, writer) = (
        format!("{}_reader", case.source),
        format!("{}_writer", case.source),
    );
    let sql = readme_roles()
        .replace("geofold_reader", &reader)
        .replace("geofold_writer", &writer)
        .replace("hydro.subcatchments", &case.table())
        .replace("SCHEMA hydro ", &format!("SCHEMA {} ", case.source))
        .replace("SCHEMA geofold ", &format!("SCHEMA {} ", case.results));
    common::psql_script(&sql);
    let file = case.job_file(
        "roles.toml",
        &case.job(
            "plots",
            &uri_as(&reader),
            &format!("results-db = \"{}\"\nblock-size = 3000", uri_as(&writer)),
        ),
    );
    let output = case.run(&["run", "--config", file.to_str().unwrap()]);
    assert_eq!(code(&output), 0);
    assert_eq!(
        case.query("SELECT DISTINCT tableowner FROM pg_tables WHERE schemaname = '{r}'"),
        writer,
        "the writer owns the results"
    );
    // The reader alone cannot write results: the grant is named (77, EX_NOPERM).
    let file = case.job_file(
        "reader.toml",
        &case.job("plots", &uri_as(&reader), "block-size = 3000"),
    );
    let refused = case.run(&["run", "--config", file.to_str().unwrap()]);
    assert_eq!(code(&refused), 77);
    assert!(
        stderr(&refused).contains("permission denied"),
        "{}",
        stderr(&refused)
    );
    drop(case);
    psql(&format!(
        "DROP OWNED BY {writer}, {reader}; DROP ROLE {writer}; DROP ROLE {reader}"
    ));
}
