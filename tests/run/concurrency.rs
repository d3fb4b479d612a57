//! Other sessions and runs at the same time (issue 6, items 7, 8 and 9): a
//! reader holding the job's view in an open transaction (as a GIS does), a
//! role with only the privileges it needs, and two first runs into a new
//! results schema at once. psql, in sessions of its own, is the other party.

use crate::common::fixtures::{args, create_units, grid, IdType, UNITS_COLUMNS};
use crate::common::pg::{backends, check_qgis_layer, uri_with, HeldSession, Role, Scratch};
use crate::common::{assert_contains, code, fails, ok_json, run_id, stderr, Workdir};

#[test]
fn a_reader_on_the_job_view_makes_a_changing_run_time_out_and_an_unchanged_one_not_wait() {
    // Issue 6 item 7.
    let scratch = Scratch::new("reader");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let grid_args = args(&[
        &grid("{s}.units", "a,b", "200", "3"),
        &["--job", "units", "--lock-timeout", "1", "--json"],
    ]);
    ok_json(&scratch.geofold_run(&workdir, &grid_args));
    let mut reader = HeldSession::open("reader", None);
    reader.send(&scratch.fill("BEGIN; SELECT count(*) FROM {r}.units;"));

    // The same job with the same view definition: nothing to replace, so no
    // wait for the reader's lock.
    let second = ok_json(&scratch.geofold_run(&workdir, &grid_args));
    scratch.bind("second", &run_id(&second, 0));

    // Random folds: the job's views change (no regions view), which needs
    // the reader's lock on the view: bounded by --lock-timeout, exit 75.
    let random_args = args(&[
        &["--table", "{s}.units"],
        UNITS_COLUMNS,
        &[
            "--scheme",
            "random",
            "--folds",
            "3",
            "--job",
            "units",
            "--lock-timeout",
            "1",
        ],
    ]);
    let output = scratch.geofold_run(&workdir, &random_args);
    let message = fails(&output, 75);
    assert_contains(
        &message,
        &[
            "timed out",
            &scratch.fill("view \"{r}\".\"units\""),
            "lock timeout",
            "--lock-timeout",
        ],
    );
    scratch.check(
        "the timed-out run is failed, wrote nothing, and the views still show the second run",
        "SELECT (SELECT count(*) = 1 FROM {r}.runs WHERE status = 'failed' AND scheme = 'random')
            AND (SELECT count(*) = 0 FROM {r}.held_out h JOIN {r}.runs r USING (run_id) WHERE r.status = 'failed')
            AND (SELECT bool_and(run_id = '{second}') FROM {r}.units)
            AND (SELECT count(*) = 9 FROM {r}.units_regions)",
    );
    drop(reader);
    // With the reader gone, the same change goes through.
    let output = scratch.geofold_run(&workdir, &random_args);
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    assert!(!scratch.has_result_relation("units_regions"));
}

#[test]
fn a_role_owning_its_results_schema_with_select_on_the_source_runs() {
    // Issue 6 item 8: least privilege. The role may not create schemas; a
    // superuser makes its results schema for it, and grants it SELECT on the
    // source and USAGE on the source's schema.
    let scratch = Scratch::new("privilege");
    let role = Role::new("analyst");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    scratch.script(&format!(
        "CREATE TABLE {{s}}.hidden AS SELECT * FROM {{s}}.units;
         ALTER TABLE {{s}}.hidden ADD PRIMARY KEY (id);
         CREATE SCHEMA {{r}} AUTHORIZATION {role};
         GRANT USAGE ON SCHEMA {{s}} TO {role};
         GRANT SELECT ON {{s}}.units TO {role};",
        role = role.name
    ));
    let run_as_role = |table: &str| {
        let mut all = vec![
            "run".to_string(),
            "--db".to_string(),
            role.uri(),
            "--results-schema".to_string(),
            scratch.results.clone(),
        ];
        all.extend(
            grid(&scratch.fill(table), "a,b", "200", "3")
                .iter()
                .map(|s| s.to_string()),
        );
        all.push("--json".into());
        workdir.run(&all)
    };
    let document = ok_json(&run_as_role("{s}.units"));
    assert_eq!(document["units_used"], 36);
    check_qgis_layer(
        &scratch.results,
        &scratch.fill("{s}_units"),
        ("fid", "integer"),
        "MULTIPOLYGON",
        32631,
        36,
    );
    assert_eq!(
        crate::common::psql_at(
            &role.uri(),
            &scratch.fill("SELECT count(*) FROM {r}.{s}_units")
        ),
        "36",
        "the role reads its own layer"
    );
    // Without SELECT on a table: 77, naming the table and the grant.
    let message = fails(&run_as_role("{s}.hidden"), 77);
    assert_contains(
        &message,
        &["permission denied", "hidden", "GRANT SELECT ON"],
    );
    // Without USAGE on the source schema: 77, naming the schema's grant.
    scratch.script(&format!("REVOKE USAGE ON SCHEMA {{s}} FROM {}", role.name));
    let message = fails(&run_as_role("{s}.units"), 77);
    assert_contains(
        &message,
        &[
            "permission denied",
            &scratch.source,
            "GRANT USAGE ON SCHEMA",
        ],
    );
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.runs"),
        "1",
        "refused runs are not recorded"
    );
}

#[test]
fn two_first_runs_into_a_new_results_schema_at_once_both_succeed() {
    // Issue 6 item 9: two jobs, started together, both creating the results
    // schema. Three rounds, each with a schema of its own.
    for round in 0..3 {
        let scratch = Scratch::new("together");
        let workdir = Workdir::new();
        create_units(&scratch, "units", IdType::Integer);
        let uri = uri_with(None, &[]);
        let spawn = |job: &str| {
            let mut all = vec![
                "run".to_string(),
                "--db".to_string(),
                uri.clone(),
                "--results-schema".to_string(),
                scratch.results.clone(),
                "--job".to_string(),
                job.to_string(),
            ];
            all.extend(
                grid(&scratch.fill("{s}.units"), "a,b", "200", "3")
                    .iter()
                    .map(|s| s.to_string()),
            );
            workdir.spawn(&all)
        };
        let children = [spawn("first"), spawn("second")];
        for child in children {
            let output = child.wait_with_output().unwrap();
            assert_eq!(
                code(&output),
                0,
                "round {round}: {}",
                String::from_utf8_lossy(&output.stderr)
            );
        }
        assert_eq!(
            scratch
                .query("SELECT string_agg(job || ':' || status, ',' ORDER BY job) FROM {r}.runs"),
            "first:succeeded,second:succeeded",
            "round {round}"
        );
        assert_eq!(
            scratch.query("SELECT count(*) FROM {r}.schema_version"),
            "1",
            "round {round}: the schema was made once"
        );
        for job in ["first", "second"] {
            check_qgis_layer(
                &scratch.results,
                job,
                ("fid", "integer"),
                "MULTIPOLYGON",
                32631,
                36,
            );
        }
    }
}

#[test]
fn a_busy_job_names_the_session_holding_it() {
    // The job's lock is a session advisory lock keyed on FNV-1a of
    // "geofold job <schema> <job>" (src/adapters/postgis/store.rs,
    // migrate::lock_key). Another session holds it here, for one job whose
    // key is negative and one whose key is positive: either way the busy
    // run exits 2 at once, names the server process holding the job and its
    // application_name, and records nothing.
    use geofold::adapters::postgis::migrate::lock_key;
    let scratch = Scratch::new("busy");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let key = |job: &str| lock_key(&format!("geofold job {} {job}", scratch.results));
    let pick = |negative: bool| {
        (0..)
            .map(|i| format!("job{i}"))
            .find(|job| (key(job) < 0) == negative)
            .unwrap()
    };
    for job in [pick(true), pick(false)] {
        let mut holder = HeldSession::open("holder", None);
        holder.send(&format!("SELECT pg_advisory_lock({});", key(&job)));
        let pid = backends(&holder.name)[0].pid;
        let output = scratch.geofold_run(
            &workdir,
            &args(&[&grid("{s}.units", "a,b", "200", "3"), &["--job", &job]]),
        );
        let message = fails(&output, 2);
        assert_contains(
            &message,
            &[
                "busy",
                &job,
                &format!("server process {pid}"),
                &holder.name,
                "--wait",
            ],
        );
        assert_eq!(scratch.runs_count(), 0, "{job}: nothing recorded");
        drop(holder);
        let output = scratch.geofold_run(
            &workdir,
            &args(&[&grid("{s}.units", "a,b", "200", "3"), &["--job", &job]]),
        );
        assert_eq!(code(&output), 0, "{job}: {}", stderr(&output));
        drop_results(&scratch);
    }
}

/// Drops the results schema so the next case starts without runs.
fn drop_results(scratch: &Scratch) {
    scratch.script("DROP SCHEMA {r} CASCADE;");
}
