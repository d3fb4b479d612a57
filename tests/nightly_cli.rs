//! Nightly operations seen from outside (issue "nightly operations",
//! points 10 and 12): each exit code and the worst-outcome rule of job
//! files, JSON log lines and progress bars only on a terminal, completions
//! and man pages.
//!
//! References: sysexits(3) for 64, 65, 66, 69 and 78; PostgreSQL's advisory
//! locks and pg_locks (a session holding the job's lock); script(1) for a
//! pseudo-terminal; bash for the completion script. The data are an invented
//! lattice.

mod common;
mod nightly_support;

use std::io::Write as _;
use std::process::{Command, Stdio};

use common::{code, db_uri, json, psql, Workdir};
use nightly_support::{fnv1a64, job_report, run_plots, stderr, stdout, Case};
use serde_json::Value;

#[test]
fn each_exit_code_is_distinct_and_the_worst_job_decides() {
    let case = Case::new("codes", 10);
    // 64 EX_USAGE: a gate against the score's direction.
    assert_eq!(
        code(&run_plots(
            &case,
            &["--scheme", "random", "--gate", "rmse>=1"]
        )),
        64
    );
    // 69 EX_UNAVAILABLE: nothing listens on port 1 of the loopback.
    let output = case.run(&[
        "run",
        "--db",
        "postgresql://postgres@127.0.0.1:1/x",
        "--table",
        &case.table(),
        "--target",
        "yield",
        "--features",
        "wetness",
        "--scheme",
        "random",
    ]);
    assert_eq!(code(&output), 69);
    // 2 busy: another session holds the job's advisory lock (key: FNV-1a of "geofold job SCHEMA JOB").
    let key = fnv1a64(&format!("geofold job {} plots", case.results)) as i64;
    assert_eq!(
        code(&run_plots(&case, &["--scheme", "random"])),
        0,
        "creates the schema"
    );
    let mut holder = Command::new("psql")
        .args([&db_uri(), "-X", "-q", "-A", "-t"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    let mut input = holder.stdin.take().unwrap();
    writeln!(input, "SELECT pg_advisory_lock({key});").unwrap();
    let mut waited = 0;
    // pg_locks shows a bigint key as classid (high half), objid (low half), objsubid 1
    // (PostgreSQL documentation, "pg_locks").
    while psql(&format!(
        "SELECT count(*) FROM pg_locks WHERE locktype = 'advisory' AND granted \
        AND objsubid = 1 AND ((classid::int8 << 32) | objid::int8) = {key}"
    )) != "1"
    {
        std::thread::sleep(std::time::Duration::from_millis(50));
        waited += 1;
        assert!(waited < 200, "psql took the lock");
    }
    let busy = run_plots(&case, &["--scheme", "random"]);
    assert_eq!(code(&busy), 2);
    assert_eq!(json(&busy)["error"]["kind"], "busy");
    drop(input);
    holder.wait().unwrap();
    // 65 EX_DATAERR: a NULL feature under --strict.
    case.query("UPDATE {s}.plots SET wetness = NULL WHERE id = 3 RETURNING id");
    assert_eq!(
        code(&run_plots(&case, &["--scheme", "random", "--strict"])),
        65
    );
    // 78 EX_CONFIG: an unknown key, named with its line.
    let file = case.job_file(
        "bad.toml",
        &format!("{}colour = \"red\"\n", case.job("plots", &db_uri(), "")),
    );
    let checked = case.run(&["config-check", file.to_str().unwrap()]);
    assert_eq!(code(&checked), 78);
    assert!(
        stdout(&checked).contains("bad.toml:8: job plots, key colour: unknown key"),
        "{}",
        stdout(&checked)
    );
    assert_eq!(
        code(&case.run(&["run", "--config", file.to_str().unwrap()])),
        78
    );
    // Several jobs: a missing table (66) outranks a breached gate (1), and both ran.
    let text = case
        .job("gone", &db_uri(), "scheme = \"random\"")
        .replace(&case.table(), &format!("{}.nothing", case.source))
        + &case.job(
            "plots",
            &db_uri(),
            "scheme = \"random\"\ngate = \"rmse<=0.000001\"",
        );
    let file = case.job_file("two.toml", &text);
    let both = case.run(&["run", "--config", file.to_str().unwrap(), "--json"]);
    assert_eq!(code(&both), 66);
    let document = json(&both);
    assert_eq!(job_report(&document, "gone")["exit_code"], 66);
    assert_eq!(job_report(&document, "plots")["exit_code"], 1);
    // The table in --help lists every code.
    let help = stdout(&case.run(&["run", "--help"]));
    for line in [
        "  0   ok",
        "  1   results written, and a drift gate",
        "  2   busy",
        "  64  usage",
        "  65  bad input",
        "  69  the database server is unreachable",
        "  75  temporary failure",
        "  78  bad connection string",
    ] {
        assert!(help.contains(line), "{line}");
    }
}

#[test]
fn logs_are_json_lines_and_progress_bars_appear_only_on_a_terminal() {
    let case = Case::new("logs", 10);
    let output = run_plots(&case, &["--scheme", "random", "--log-format", "json", "-v"]);
    assert_eq!(code(&output), 0);
    let lines: Vec<Value> = stderr(&output)
        .lines()
        .map(|line| serde_json::from_str(line).unwrap_or_else(|e| panic!("not JSON ({e}): {line}")))
        .collect();
    assert!(
        lines
            .iter()
            .any(|l| l["message"] == "read units" && l["job"] == "plots"),
        "{lines:?}"
    );
    assert!(lines
        .iter()
        .all(|l| l["level"].is_string() && l["timestamp"].is_string()));
    let failed = case.run(&[
        "run",
        "--log-format",
        "json",
        "--db",
        "postgresql://postgres@127.0.0.1:1/x",
        "--table",
        "a.b",
        "--target",
        "y",
        "--features",
        "x",
        "--scheme",
        "random",
    ]);
    let last: Value = serde_json::from_str(stderr(&failed).lines().last().unwrap()).unwrap();
    assert_eq!(
        (last["level"].as_str(), last["exit_code"].as_i64()),
        (Some("ERROR"), Some(69))
    );
    // Off a terminal (stderr is a pipe here): no bar, no escape codes.
    let plain = stderr(&run_plots(&case, &["--scheme", "random"]));
    assert!(
        !plain.contains('\r') && !plain.contains('\u{1b}'),
        "{plain:?}"
    );
    // On a terminal (script(1) gives the command a pseudo-terminal): the phases with counts.
    let command =
        format!(
        "'{}' run --db '{}' --table {} --target yield --features wetness,slope --scheme random \
         --results-schema {} --job plots",
        env!("CARGO_BIN_EXE_geofold"), db_uri(), case.table(), case.results
    );
    let tty = Command::new("script")
        .args(["-qec", &command, "/dev/null"])
        .env("NO_COLOR", "1")
        .env_remove("CI")
        .env("GEOFOLD_CONNECT_RETRY", "0")
        .output()
        .unwrap();
    let screen = String::from_utf8_lossy(&tty.stdout);
    assert!(
        screen.contains("reading") && screen.contains("100 rows"),
        "{screen}"
    );
    assert!(
        screen.contains("fitting") && screen.contains("5/5 folds"),
        "{screen}"
    );
    assert!(screen.contains("writing"), "{screen}");
}

#[test]
fn completions_and_man_pages_come_from_the_command_definition() {
    let workdir = Workdir::new();
    let mut command = workdir.geofold();
    command.args(["completions", "bash"]);
    let script = common::run(command);
    assert_eq!(code(&script), 0);
    let text = stdout(&script);
    assert!(text.contains("config-check") && text.contains("--skip-unchanged"));
    let mut bash = Command::new("bash")
        .arg("-n")
        .stdin(Stdio::piped())
        .spawn()
        .unwrap();
    bash.stdin
        .take()
        .unwrap()
        .write_all(text.as_bytes())
        .unwrap();
    assert!(
        bash.wait().unwrap().success(),
        "bash -n accepts the completion script"
    );
    let mut command = workdir.geofold();
    command.args(["man"]);
    let page = stdout(&common::run(command));
    assert!(
        page.starts_with(".ie") || page.starts_with(".TH"),
        "{}",
        &page[..40.min(page.len())]
    );
    assert!(page.contains("EXIT STATUS") && page.contains("drift gate"));
    let mut command = workdir.geofold();
    command.args(["man", "--out-dir", "."]);
    assert_eq!(code(&common::run(command)), 0);
    for name in [
        "geofold.1",
        "geofold-run.1",
        "geofold-prune.1",
        "geofold-config-check.1",
    ] {
        assert!(workdir.path(name).exists(), "{name}");
    }
}
