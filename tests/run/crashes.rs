//! Runs cut off midway (issue 6, items 5 and 6): a database session
//! terminated during the result COPY, geofold killed with SIGKILL while it
//! reads or writes, on PostGIS and in a GeoPackage. Whatever happened, the
//! next run finds no run still `running` (a run whose process is gone is
//! marked failed with the reason), no result rows of a dead run, earlier
//! runs intact, an interrupted GeoPackage write rolled back from its hot
//! journal, and no temporary files left.
//!
//! The slow steps are made by the tests, not by timing: a trigger that
//! sleeps (PostgreSQL's `pg_sleep`) or computes a large cross join (SQLite),
//! and a view that sleeps before its rows. Where geofold is in the server is
//! read from `pg_stat_activity` by its `application_name`.

use std::path::Path;
use std::process::Child;
use std::time::Duration;

use crate::common::fixtures::{create_units, gdal_lattice_gpkg, lattice_args, IdType, UNITS_GRID};
use crate::common::gdal::{full_listing, gdal_sql, gdal_validates, listing, sqlite_edit};
use crate::common::pg::{backends, terminate_backend, unique_name, uri_with, Scratch};
use crate::common::{assert_contains, code, kill_9, ok_json, stderr, wait_until, Workdir};

const LIMIT: Duration = Duration::from_secs(120);

/// `geofold run` on `{s}.<table>` of a [`create_units`] table into `{r}`,
/// connecting with `application_name` = `app`.
fn pg_args(scratch: &Scratch, app: &str, table: &str) -> Vec<String> {
    let mut args: Vec<String> = [
        "run",
        "--db",
        &uri_with(None, &[("application_name", app)]),
        "--table",
        &scratch.fill(&format!("{{s}}.{table}")),
        "--results-schema",
        &scratch.results,
        "--job",
        "units",
    ]
    .map(String::from)
    .to_vec();
    args.extend(UNITS_GRID.iter().map(|s| s.to_string()));
    args
}

/// Waits until a backend of `app` runs a statement containing every part
/// (and is active in it); returns its pid.
fn wait_for_statement(app: &str, parts: &[&str], child: &mut Child) -> i32 {
    let mut pid = 0;
    wait_until(&format!("{app} to run {parts:?}"), LIMIT, || {
        if let Ok(Some(status)) = child.try_wait() {
            panic!("geofold ended ({status}) before running {parts:?}");
        }
        match backends(app)
            .into_iter()
            .find(|b| b.state == "active" && parts.iter().all(|p| b.query.contains(p)))
        {
            Some(backend) => {
                pid = backend.pid;
                true
            }
            None => false,
        }
    });
    pid
}

fn finish(child: Child) -> std::process::Output {
    let output = child.wait_with_output().expect("geofold ends");
    eprintln!("stderr: {}", String::from_utf8_lossy(&output.stderr));
    output
}

/// The sleeping trigger: the COPY into held_out waits 60 s before any row.
fn add_sleeping_trigger(scratch: &Scratch) {
    scratch.script(
        "CREATE FUNCTION {r}.slow() RETURNS trigger LANGUAGE plpgsql
             AS $$ BEGIN PERFORM pg_sleep(60); RETURN NULL; END $$;
         CREATE TRIGGER slow BEFORE INSERT ON {r}.held_out
             FOR EACH STATEMENT EXECUTE FUNCTION {r}.slow();",
    );
}

/// No run says `running`; every run but the first succeeded one failed,
/// with a reason, and left no result rows.
fn check_dead_runs_marked_failed(scratch: &Scratch, dead: usize) {
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.runs WHERE status = 'running'"),
        "0",
        "no run still says running"
    );
    assert_eq!(
        scratch.query(
            "SELECT count(*) FROM {r}.runs WHERE status = 'failed' AND error_message <> '' AND finished_at IS NOT NULL"
        ),
        dead.to_string(),
        "every dead run is failed with a reason"
    );
    assert_eq!(
        scratch.query(
            "SELECT count(*) FROM {r}.held_out h JOIN {r}.runs r USING (run_id) WHERE r.status <> 'succeeded'"
        ),
        "0",
        "no result rows of a dead run"
    );
}

#[test]
fn a_session_terminated_during_the_result_copy_leaves_no_run_running() {
    let scratch = Scratch::new("terminated");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let app = unique_name("terminated");
    ok_json(&workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()));
    add_sleeping_trigger(&scratch);
    let mut child = workdir.spawn(&pg_args(&scratch, &app, "units"));
    let pid = wait_for_statement(&app, &["COPY", "held_out"], &mut child);
    terminate_backend(pid);
    let output = finish(child);
    assert_eq!(code(&output), 75, "a lost session is a temporary failure");
    scratch.script("DROP TRIGGER slow ON {r}.held_out;");
    // The next run succeeds and finds the terminated run failed.
    ok_json(&workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()));
    check_dead_runs_marked_failed(&scratch, 1);
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.runs WHERE status = 'succeeded'"),
        "2"
    );
}

#[test]
fn geofold_killed_during_the_result_copy_is_marked_failed_by_the_next_run() {
    let scratch = Scratch::new("killed_copy");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    let app = unique_name("killed_copy");
    let first = ok_json(
        &workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()),
    );
    add_sleeping_trigger(&scratch);
    let mut child = workdir.spawn(&pg_args(&scratch, &app, "units"));
    let pid = wait_for_statement(&app, &["COPY", "held_out"], &mut child);
    kill_9(&mut child);
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.runs WHERE status = 'running'"),
        "1",
        "the killed run was recorded as running"
    );
    // Its server session lives on (asleep in the trigger) and holds the job:
    // another run of the job is busy (concurrency.rs checks the message names
    // the holder).
    let busy = workdir.run(&pg_args(&scratch, &app, "units"));
    assert_eq!(code(&busy), 2, "{}", stderr(&busy));
    assert_contains(&stderr(&busy), &["busy", "units"]);
    // The session ends (an administrator, or the server noticing the client
    // is gone); the next run marks the run failed.
    terminate_backend(pid);
    scratch.script("DROP TRIGGER slow ON {r}.held_out;");
    let last = ok_json(
        &workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()),
    );
    check_dead_runs_marked_failed(&scratch, 1);
    assert_eq!(
        scratch.query("SELECT count(*) FROM {r}.runs WHERE status = 'failed' AND error_message LIKE '%is gone%'"),
        "1",
        "the reason says the process is gone"
    );
    scratch.bind("first", &crate::common::run_id(&first, 0));
    scratch.bind("last", &crate::common::run_id(&last, 0));
    scratch.check(
        "the earlier run is intact and the job view shows the last one",
        "SELECT (SELECT count(*) = 36 FROM {r}.held_out WHERE run_id = '{first}')
            AND (SELECT bool_and(run_id = '{last}') FROM {r}.units)",
    );
}

#[test]
fn geofold_killed_while_reading_leaves_nothing_running() {
    let scratch = Scratch::new("killed_read");
    let workdir = Workdir::new();
    create_units(&scratch, "units", IdType::Integer);
    // A view that sleeps before its rows: the read waits in the server.
    scratch.script("CREATE VIEW {s}.slow_units AS SELECT u.* FROM {s}.units u, pg_sleep(60) z;");
    let app = unique_name("killed_read");
    ok_json(&workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()));
    let mut child = workdir.spawn(&pg_args(&scratch, &app, "slow_units"));
    let pid = wait_for_statement(&app, &["COPY", "slow_units"], &mut child);
    kill_9(&mut child);
    terminate_backend(pid);
    // The job is free again once the killed process's sessions are gone.
    wait_until("the killed process's sessions to end", LIMIT, || {
        backends(&app).is_empty()
    });
    ok_json(&workdir.run(&[&pg_args(&scratch, &app, "units")[..], &["--json".into()]].concat()));
    check_dead_runs_marked_failed(&scratch, 0);
    assert_eq!(
        scratch
            .query("SELECT count(*), count(*) FILTER (WHERE status = 'succeeded') FROM {r}.runs"),
        "2|2",
        "a run killed before its rows were read was never recorded"
    );
}

/// The runs table of a GeoPackage, read-only: `status` counts.
fn gpkg_status(file: &Path) -> Vec<String> {
    gdal_sql(
        file,
        "SELECT status, count(*) FROM runs GROUP BY status ORDER BY status",
    )
}

fn journal(file: &Path) -> std::path::PathBuf {
    let mut name = file.as_os_str().to_owned();
    name.push("-journal");
    name.into()
}

#[test]
fn a_geopackage_write_killed_midway_is_rolled_back_by_the_next_run() {
    let workdir = Workdir::new();
    gdal_lattice_gpkg(workdir.root(), "source.gpkg");
    let results = workdir.path("results.gpkg");
    let mut args = lattice_args("source.gpkg");
    args.extend(["--results-gpkg", "results.gpkg", "--job", "units", "--json"].map(String::from));
    let first = ok_json(&workdir.run(&args));
    // A slow insert into held_out while the file holds 2 runs (the first and
    // the one to be killed): each row computes a 4-million-row cross join.
    sqlite_edit(
        &results,
        "CREATE TABLE slow_rows (x INTEGER);
         WITH RECURSIVE c(x) AS (SELECT 1 UNION ALL SELECT x + 1 FROM c WHERE x < 2000)
         INSERT INTO slow_rows SELECT x FROM c;
         CREATE TRIGGER slow_insert AFTER INSERT ON held_out
         WHEN (SELECT count(*) FROM runs) = 2
         BEGIN SELECT count(*) FROM slow_rows a, slow_rows b; END;",
    );
    let mut child = workdir.spawn(&args);
    let conn_ro = |file: &Path| {
        rusqlite::Connection::open_with_flags(file, rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
    };
    wait_until("the second run to start writing its rows", LIMIT, || {
        if let Ok(Some(status)) = child.try_wait() {
            panic!("geofold ended ({status}) before it was killed");
        }
        let running = conn_ro(&results)
            .and_then(|conn| {
                conn.query_row(
                    "SELECT count(*) FROM runs WHERE status = 'running'",
                    [],
                    |row| row.get::<_, i64>(0),
                )
            })
            .unwrap_or(0);
        running == 1 && journal(&results).exists()
    });
    // Let it write a few rows, then kill it.
    std::thread::sleep(Duration::from_millis(300));
    kill_9(&mut child);
    let hot = std::fs::metadata(journal(&results))
        .map(|m| m.len())
        .unwrap_or(0);
    assert!(hot > 0, "the killed write left a hot journal");

    let third = ok_json(&workdir.run(&args));
    assert!(!journal(&results).exists(), "the journal was rolled back");
    assert_eq!(
        gpkg_status(&results),
        ["failed|1", "succeeded|2"],
        "the killed run is marked failed, the others succeeded"
    );
    assert_eq!(
        gdal_sql(
            &results,
            "SELECT count(*) FROM runs WHERE status = 'failed' AND error_message LIKE '%is gone%'"
        ),
        ["1"]
    );
    let first_run = crate::common::run_id(&first, 0);
    assert_eq!(
        gdal_sql(
            &results,
            &format!("SELECT count(*) FROM held_out WHERE run_id = '{first_run}'")
        ),
        ["47"],
        "the earlier run is intact"
    );
    assert_eq!(
        gdal_sql(
            &results,
            "SELECT count(*) FROM held_out h JOIN runs r ON r.run_id = h.run_id WHERE r.status = 'failed'"
        ),
        ["0"],
        "no rows of the killed run"
    );
    assert_eq!(
        gdal_sql(&results, "SELECT DISTINCT run_id FROM units"),
        [crate::common::run_id(&third, 0)]
    );
    sqlite_edit(&results, "DROP TRIGGER slow_insert; DROP TABLE slow_rows;");
    gdal_validates(&results);
    assert_eq!(listing(workdir.root()), ["results.gpkg", "source.gpkg"]);
}

#[test]
fn a_killed_first_run_leaves_no_results_file_and_its_temporary_file_is_removed() {
    let workdir = Workdir::new();
    gdal_lattice_gpkg(workdir.root(), "source.gpkg");
    let mut args = lattice_args("source.gpkg");
    args.extend(["--results-gpkg", "fresh.gpkg"].map(String::from));
    // Many repetitions keep the new file under its temporary name for a while.
    let mut slow = args.clone();
    slow.extend(["--repeats", "1000"].map(String::from));
    let mut child = workdir.spawn(&slow);
    let pid = child.id();
    let temp = format!(".fresh.gpkg.tmp-{pid}");
    wait_until("the new file under its temporary name", LIMIT, || {
        if let Ok(Some(status)) = child.try_wait() {
            panic!("geofold ended ({status}) before it was killed");
        }
        workdir.path(&temp).exists()
    });
    kill_9(&mut child);
    assert!(
        !workdir.path("fresh.gpkg").exists(),
        "no file under the real name"
    );
    assert!(
        full_listing(workdir.root())
            .iter()
            .any(|name| name.starts_with(&temp)),
        "the killed run's temporary file is there"
    );
    // The next run into the same file removes it and succeeds.
    let output = workdir.run(&args);
    assert_eq!(code(&output), 0, "{}", stderr(&output));
    assert!(
        !full_listing(workdir.root())
            .iter()
            .any(|name| name.contains(".tmp-")),
        "temporary files of the killed run are removed: {:?}",
        full_listing(workdir.root())
    );
    assert_eq!(listing(workdir.root()), ["fresh.gpkg", "source.gpkg"]);
    gdal_validates(&workdir.path("fresh.gpkg"));
}

#[test]
fn a_failed_first_run_into_a_new_results_file_leaves_no_file() {
    let workdir = Workdir::new();
    gdal_lattice_gpkg(workdir.root(), "source.gpkg");
    // A constant feature: every fold's design is rank-deficient (65), found
    // after the results file was begun.
    sqlite_edit(&workdir.path("source.gpkg"), "UPDATE units SET x2 = 3;");
    let before = listing(workdir.root());
    let mut args = lattice_args("source.gpkg");
    args.extend(["--results-gpkg", "never.gpkg", "--also-random"].map(String::from));
    let output = workdir.run(&args);
    assert_contains(&crate::common::fails(&output, 65), &["cannot fit"]);
    assert!(!workdir.path("never.gpkg").exists());
    // Only the job lock file is new (it stays by design; see common::gdal::is_lock_file).
    assert_eq!(listing(workdir.root()), before);
    assert!(
        !full_listing(workdir.root())
            .iter()
            .any(|name| name.contains(".tmp-")),
        "{:?}",
        full_listing(workdir.root())
    );
}
