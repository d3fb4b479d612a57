//! Faults and concurrency against the real PostgreSQL (issue "nightly
//! operations", points 5 and 6).
//!
//! A small TCP relay of the test's own (`nightly_support::proxy`, loopback only) sits
//! between geofold and the server. It reads the PostgreSQL wire protocol's
//! message framing (PostgreSQL documentation, "Frontend/Backend Protocol",
//! "Message Formats": a type byte and a 4-byte length, the startup message
//! without a type byte) to act at exact points: the first CopyData the server
//! sends (the source read is a COPY … TO STDOUT), the first CopyData the
//! client sends (the results are loaded with COPY … FROM STDIN), and the
//! Query `COMMIT` after a COPY on the same connection (just before commit).
//! There it cuts every connection and refuses new ones for a while, or holds
//! the data back until told to go on.
//!
//! What is checked after each cut comes from PostgreSQL itself: the rows in
//! the results tables (psql, straight to the server), and the `runs` table's
//! status. Exit codes are sysexits(3): 75 EX_TEMPFAIL for a lost connection;
//! 2 is geofold's documented busy code.

mod common;
mod nightly_support;

use std::thread;
use std::time::{Duration, Instant};

use common::{code, db_uri, json};
use nightly_support::proxy::{Action, Point, Proxy};
use nightly_support::{stderr, Case};

/// The run ids of the results schema with their status, oldest first.
fn runs(case: &Case) -> Vec<(String, String, Option<String>)> {
    if case.query("SELECT to_regclass('{r}.runs') IS NULL") == "t" {
        return Vec::new();
    }
    case.query(
        "SELECT run_id, status, coalesce(error_message, '') FROM {r}.runs ORDER BY started_at",
    )
    .lines()
    .map(|line| {
        let mut parts = line.splitn(3, '|');
        let id = parts.next().unwrap_or_default().to_string();
        let status = parts.next().unwrap_or_default().to_string();
        let message = parts.next().filter(|m| !m.is_empty()).map(str::to_string);
        (id, status, message)
    })
    .collect()
}

/// Cuts the connection at `point`, with the server back after `down_for`
/// and geofold retrying connections for `retry` seconds; returns the case
/// and the cut run's output.
fn cut_at(
    label: &str,
    point: Point,
    down_for: Duration,
    retry: &str,
) -> (Case, std::process::Output) {
    let case = Case::new(label, 16);
    let proxy = Proxy::start();
    proxy.arm(point, Action::Cut(down_for));
    let mut command = case.run_command(&proxy.uri(), "plots", &["--block-size", "4000"]);
    command.env("GEOFOLD_CONNECT_RETRY", retry);
    let output = common::run(command);
    assert!(proxy.fired(), "the proxy saw the {point:?} point");
    (case, output)
}

/// After a cut: exit 75, no result rows, and no run left `running` (the cut
/// run recorded as failed when it had begun).
fn check_cut(case: &Case, output: &std::process::Output, recorded: bool) {
    assert_eq!(
        code(output),
        75,
        "a lost connection is a temporary failure (EX_TEMPFAIL)"
    );
    assert_eq!(case.all_result_rows(), 0, "no partial result rows");
    let before = runs(case);
    assert!(
        before.iter().all(|(_, status, _)| status != "running"),
        "no run left running: {before:?}"
    );
    if recorded {
        assert_eq!(before.len(), 1, "{before:?}");
        assert_eq!(before[0].1, "failed");
        assert!(
            before[0].2.as_deref().is_some_and(|m| !m.is_empty()),
            "{before:?}"
        );
    } else {
        assert!(before.is_empty(), "{before:?}");
    }
}

/// The next run, straight to the server, works and leaves exactly its own
/// rows; the runs table then holds the cut run (failed, when it had begun)
/// and the new one.
fn check_next_run(case: &Case, recorded: bool) {
    let next =
        common::run(case.run_command(&db_uri(), "plots", &["--block-size", "4000", "--json"]));
    assert_eq!(code(&next), 0);
    let run_id = json(&next)["runs"][0]["run_id"]
        .as_str()
        .unwrap()
        .to_string();
    assert_eq!(
        case.rows_of_run(&run_id),
        case.all_result_rows(),
        "only the new run has rows"
    );
    assert_eq!(
        case.query(&format!(
            "SELECT count(*) FROM {{r}}.held_out WHERE run_id = '{run_id}'"
        )),
        "256"
    );
    assert_eq!(
        case.statuses(),
        if recorded {
            "failed|1\nsucceeded|1"
        } else {
            "succeeded|1"
        }
    );
}

#[test]
fn a_connection_cut_while_reading_leaves_nothing_and_the_next_run_works() {
    let (case, output) = cut_at("cut_read", Point::Read, Duration::from_millis(500), "10");
    assert!(stderr(&output).contains("reading"), "{}", stderr(&output));
    // The read comes before any run is recorded (pipeline step 4).
    check_cut(&case, &output, false);
    check_next_run(&case, false);
}

#[test]
fn a_connection_cut_during_the_copy_of_results_rolls_back_and_marks_the_run_failed() {
    // The server is back after 1.5 s; geofold retries its connection for up to 20 s and
    // marks the run failed as soon as it gets through.
    let (case, output) = cut_at("cut_copy", Point::CopyIn, Duration::from_millis(1500), "20");
    check_cut(&case, &output, true);
    check_next_run(&case, true);
}

#[test]
fn a_connection_cut_just_before_commit_rolls_back_and_marks_the_run_failed() {
    let (case, output) = cut_at(
        "cut_commit",
        Point::Commit,
        Duration::from_millis(1500),
        "20",
    );
    check_cut(&case, &output, true);
}

#[test]
fn a_run_whose_server_stays_away_is_marked_failed_by_the_next_run() {
    // No retry, and the server away for 3 s: geofold cannot mark its run failed, so the
    // run stays `running` until the next run of the store sees that its job lock is free.
    let (case, output) = cut_at("cut_away", Point::CopyIn, Duration::from_secs(3), "0");
    assert_eq!(code(&output), 75);
    assert_eq!(case.all_result_rows(), 0, "no partial result rows");
    assert_eq!(case.statuses(), "running|1");
    check_next_run(&case, true);
    let failed = runs(&case).remove(0);
    assert!(
        failed.2.unwrap().contains("is gone"),
        "marked by the next run's sweep"
    );
}

/// `geofold run` of the lattice as job `job` (a spawned child).
fn spawn_run(case: &Case, db: &str, job: &str, extra: &[&str]) -> std::process::Child {
    let mut command = case.run_command(db, job, &[&["--block-size", "4000"], extra].concat());
    command
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped());
    command.spawn().expect("geofold starts")
}

fn wait_until(what: &str, limit: Duration, done: impl Fn() -> bool) {
    let started = Instant::now();
    while !done() {
        assert!(started.elapsed() < limit, "timed out waiting for {what}");
        thread::sleep(Duration::from_millis(20));
    }
}

#[test]
fn two_runs_of_one_job_started_together_one_runs_and_one_is_busy() {
    let case = Case::new("together", 16);
    // Prepare the results schema first, so both runs below only race for the job.
    assert_eq!(
        code(&common::run(case.run_command(
            &db_uri(),
            "other",
            &["--block-size", "4000"]
        ))),
        0
    );
    let proxy = Proxy::start();
    proxy.arm(Point::Read, Action::Pause);
    // Run A reaches its read (it holds the job's lock from step 3) and is held there.
    let first = spawn_run(&case, &proxy.uri(), "plots", &[]);
    wait_until("run A to hold the job", Duration::from_secs(30), || {
        proxy.fired()
    });

    // Run B of the same job exits at once: busy, nothing done.
    let started = Instant::now();
    let busy =
        common::run(case.run_command(&db_uri(), "plots", &["--block-size", "4000", "--json"]));
    assert_eq!(code(&busy), 2);
    assert!(
        started.elapsed() < Duration::from_secs(10),
        "busy is at once"
    );
    let document = json(&busy);
    assert_eq!(document["error"]["kind"], "busy");
    assert!(
        stderr(&busy).contains("server process"),
        "names the holder: {}",
        stderr(&busy)
    );

    // A different job runs in parallel with A.
    let other = common::run(case.run_command(&db_uri(), "other", &["--scheme", "random"]));
    assert_eq!(code(&other), 0, "another job is not blocked");

    // Run C of the same job waits (--wait) for A, then runs.
    let waiting = spawn_run(&case, &db_uri(), "plots", &["--wait", "60"]);
    thread::sleep(Duration::from_millis(1500));
    assert_eq!(
        case.query("SELECT count(*) FROM {r}.runs WHERE job = 'plots'"),
        "0",
        "C has not begun"
    );
    proxy.release();
    let first = first.wait_with_output().unwrap();
    let waiting = waiting.wait_with_output().unwrap();
    assert_eq!(code(&first), 0, "{}", stderr(&first));
    assert_eq!(code(&waiting), 0, "{}", stderr(&waiting));
    assert_eq!(
        case.query("SELECT status, count(*) FROM {r}.runs WHERE job = 'plots' GROUP BY status"),
        "succeeded|2"
    );
}

#[test]
fn a_second_run_of_a_geopackage_job_is_busy_while_the_job_lock_is_held() {
    // The GeoPackage job lock is a POSIX record lock (fcntl(2) F_SETLK, F_WRLCK) on one byte
    // of the side file .<name>.geofold-lock, at FNV-1a-64(job) mod 2^30: taken here by the
    // test process, it must keep geofold out exactly as another geofold would.
    use std::os::unix::io::AsRawFd;
    let workdir = common::Workdir::new();
    let demo = crate::common::run({
        let mut c = workdir.geofold();
        c.args(["demo", "--out", "basin.gpkg"]);
        c
    });
    assert_eq!(code(&demo), 0);
    let lock_file = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(false)
        .open(workdir.path(".basin.gpkg.geofold-lock"))
        .unwrap();
    let offset = (nightly_support::fnv1a64("nightly") % (1 << 30)) as i64;
    let set = |kind: i32| {
        // SAFETY: a zeroed flock is valid; the fields used are set; the descriptor is open.
        let mut region: libc::flock = unsafe { std::mem::zeroed() };
        region.l_type = kind as _;
        region.l_whence = libc::SEEK_SET as _;
        region.l_start = offset as _;
        region.l_len = 1;
        // SAFETY: F_SETLK with a valid flock on an open descriptor.
        unsafe { libc::fcntl(lock_file.as_raw_fd(), libc::F_SETLK, &region) }
    };
    assert_eq!(set(libc::F_WRLCK), 0);
    let run = |extra: &[&str]| {
        let mut c = workdir.geofold();
        c.args([
            "run",
            "--gpkg",
            "basin.gpkg",
            "--layer",
            "subcatchments",
            "--target",
            "nitrate_mg_l",
            "--features",
            "farmland_share,rainfall_mm",
            "--block-size",
            "4000",
            "--job",
            "nightly",
        ]);
        c.args(extra);
        crate::common::run(c)
    };
    let busy = run(&[]);
    assert_eq!(code(&busy), 2);
    assert!(stderr(&busy).contains("busy"), "{}", stderr(&busy));
    assert_eq!(set(libc::F_UNLCK), 0);
    assert_eq!(code(&run(&[])), 0);
}
