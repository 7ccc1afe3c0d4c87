//! Numeric flags of every command, refused at the command line: a negative, NaN, infinite or
//! out-of-range value exits with code 2 and a message naming the flag as the user typed it,
//! before anything runs.

use crate::common::run_headroom_text;

/// Runs `headroom` and returns (exit code, stderr).
fn headroom(args: &[&str]) -> (Option<i32>, String) {
    let (code, _, err) = run_headroom_text(args);
    (Some(code), err)
}

/// Asserts that `args` exit 2 with `flag` named in the message.
fn refused(args: &[&str], flag: &str) {
    let (code, err) = headroom(args);
    assert_eq!(code, Some(2), "{args:?} should be refused: {err}");
    assert!(
        err.contains(flag),
        "{args:?}: the message should name {flag}: {err}"
    );
}

/// A small, valid CSV export of one loop: two minutes, one setpoint change.
fn small_csv(dir: &std::path::Path) -> String {
    let path = dir.join("tic.csv");
    let mut text = String::from("time,sp,pv,op\n");
    for t in 0..120 {
        let sp = if t < 30 { 50.0 } else { 55.0 };
        text.push_str(&format!("{t},{sp},50.0,40.0\n"));
    }
    std::fs::write(&path, text).unwrap();
    path.to_str().unwrap().to_owned()
}

#[test]
fn analyze_refuses_numbers_the_core_cannot_use_naming_the_flag() {
    let dir = tempfile::tempdir().unwrap();
    let csv = small_csv(dir.path());
    let spec = ["--settle-within-s", "600"];
    let cases: [(&[&str], &str); 9] = [
        (&["--max-gap-s=-5"], "--max-gap-s"),
        (&["--hold-band", "0"], "--hold-band"),
        (&["--recover-within-s=nan"], "--recover-within-s"),
        (&["--sp-deadband=-1"], "--sp-deadband"),
        (&["--settle-band-pct", "0"], "--settle-band-pct"),
        (&["--settle-band-pct", "100"], "--settle-band-pct"),
        (&["--max-overshoot-pct=-3"], "--max-overshoot-pct"),
        (&["--op-min", "50", "--op-max", "50"], "--op-min"),
        (&["--op-max=inf"], "--op-max"),
    ];
    for (flags, flag) in cases {
        let args = [&["analyze", csv.as_str()][..], &spec, flags].concat();
        refused(&args, flag);
        let (_, err) = headroom(&args);
        let key = flag.trim_start_matches("--").replace('-', "_");
        assert!(
            !err.contains(&key),
            "{flags:?}: named by its config key: {err}"
        );
    }
    refused(
        &["analyze", &csv, "--settle-within-s=nan"],
        "--settle-within-s",
    );
    refused(
        &["analyze", &csv, "--settle-within-s=-60"],
        "--settle-within-s",
    );
}

#[test]
fn analyze_still_takes_a_zero_deadband_and_a_negative_op_range() {
    let dir = tempfile::tempdir().unwrap();
    let csv = small_csv(dir.path());
    let (code, err) = headroom(&[
        "analyze",
        &csv,
        "--settle-within-s",
        "600",
        "--sp-deadband",
        "0",
        "--op-min",
        "-100",
        "--op-max",
        "100",
    ]);
    assert_eq!(code, Some(0), "{err}");
}

#[test]
fn demo_refuses_a_speed_or_duration_it_cannot_run_before_creating_anything() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("demo");
    let out = out.to_str().unwrap();
    for (flags, flag) in [
        (&["--speed=nan"][..], "--speed"),
        (&["--speed=-5"], "--speed"),
        (&["--speed=inf"], "--speed"),
        (&["--speed", "0"], "--speed"),
        (&["--duration=-1d"], "--duration"),
        (&["--duration", "30m"], "--duration"),
        (&["--duration", "nand"], "--duration"),
        (&["--mqtt-port=-1"], "--mqtt-port"),
        (&["--modbus-port", "70000"], "--modbus-port"),
    ] {
        refused(&[&["demo", "--out", out][..], flags].concat(), flag);
    }
    assert!(
        !std::path::Path::new(out).exists(),
        "a refused demo created its folder"
    );
}

#[test]
fn store_queries_refuse_negative_ages_and_alert_ids() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("none.db");
    let db = db.to_str().unwrap();
    refused(&["episodes", "--db", db, "--since=-5m"], "--since");
    refused(&["episodes", "--db", db, "--since=nanh"], "--since");
    refused(&["episodes", "--db", db, "--since=infd"], "--since");
    refused(
        &["export", "--db", db, "--loop", "TIC-1", "--from=-1h"],
        "--from",
    );
    refused(
        &["export", "--db", db, "--loop", "TIC-1", "--to", "soon"],
        "--to",
    );
    refused(&["alerts", "--db", db, "--ack=-3"], "--ack");
    refused(&["alerts", "--db", db, "--ack", "0"], "--ack");
}

#[test]
fn report_bench_and_run_refuse_values_outside_their_lists() {
    refused(&["report", "--db", "x.db", "--format", "pdf"], "--format");
    refused(&["bench", "--episodes", "0"], "--episodes");
    refused(&["bench", "--repeat=-1"], "--repeat");
    refused(&["bench", "--only", "everything"], "--only");
    refused(
        &["run", "--config", "x.toml", "--log-format", "xml"],
        "--log-format",
    );
}

#[test]
fn a_csv_file_that_cannot_be_opened_is_exit_code_2_naming_it() {
    let (code, err) = headroom(&["analyze", "/nonexistent/tic.csv", "--settle-within-s", "60"]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("cannot open /nonexistent/tic.csv"), "{err}");
}
