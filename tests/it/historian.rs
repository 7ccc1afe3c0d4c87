//! `headroom analyze` on exports written the way plant historians and spreadsheets write them.
//! The files in tests/data/historian are one invented loop written five ways (see make.py
//! there): each way must analyse as the same loop as the plain RFC 3339 reference, and each
//! way read without the option it needs must stop with exit code 2 naming that option.

use crate::common::{run_headroom, run_headroom_ok};
use serde_json::Value;

fn data(name: &str) -> String {
    format!("{}/tests/data/historian/{name}", env!("CARGO_MANIFEST_DIR"))
}

/// `analyze FILE --json` with the spec and `extra` flags.
fn analyze_json(name: &str, extra: &[&str]) -> Value {
    let file = data(name);
    let mut args = vec!["analyze", &file, "--json", "--settle-within-s", "900"];
    args.extend_from_slice(extra);
    serde_json::from_slice(&run_headroom_ok(&args).stdout).unwrap()
}

/// `analyze FILE` (the table) with the spec and `extra` flags.
/// The text output of `analyze FILE` with `extra` flags, its lines joined (the text wraps at
/// the terminal's width).
fn analyze_text(name: &str, extra: &[&str]) -> String {
    let file = data(name);
    let mut args = vec!["analyze", &file, "--settle-within-s", "900"];
    args.extend_from_slice(extra);
    let text = String::from_utf8(run_headroom_ok(&args).stdout).unwrap();
    text.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// The exit code and error text of `analyze FILE` with `extra` flags.
fn analyze_fails(name: &str, extra: &[&str]) -> (Option<i32>, String) {
    let file = data(name);
    let mut args = vec!["analyze", &file, "--settle-within-s", "900"];
    args.extend_from_slice(extra);
    let out = run_headroom(&args);
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// The analysis of the reference export, written in UTC with decimal points.
fn reference() -> Value {
    analyze_json("reference.csv", &[])
}

/// The same model, episodes and data summary as the reference.
fn assert_same_loop(v: &Value, reference: &Value) {
    assert_eq!(v["model"], reference["model"]);
    assert_eq!(v["episodes"], reference["episodes"]);
    assert_eq!(v["data"], reference["data"]);
    assert_eq!(v["input"]["rows_kept"], 451);
    assert_eq!(v["episodes"].as_array().map(Vec::len), Some(2));
}

const RENAMED: [&str; 8] = [
    "--time-col",
    "Timestamp",
    "--sp-col",
    "TIC-310.SP",
    "--pv-col",
    "TIC-310.PV",
    "--op-col",
    "TIC-310.OP",
];

#[test]
fn local_times_across_the_autumn_repeat_analyse_as_the_same_loop_as_utc() {
    let mut flags = RENAMED.to_vec();
    flags.extend(["--time-zone", "Europe/Berlin"]);
    let v = analyze_json("local-berlin.csv", &flags);
    assert_same_loop(&v, &reference());
    let time = &v["input"]["time"];
    assert_eq!(time["format"], "local");
    assert_eq!(time["zone"], "Europe/Berlin");
    // The hour 02:00–03:00 on 2026-10-25, sampled every 20 s, happens twice.
    assert_eq!(time["repeated_local_times"]["rows"], 360);
    assert_eq!(time["second_occurrences"]["rows"], 180);
    assert_eq!(v["input"]["time_origin"], "2026-10-24T23:50:00Z");
    let text = analyze_text("local-berlin.csv", &flags);
    assert!(
        text.contains("180 of them were read as the second occurrence"),
        "{text}"
    );
}

#[test]
fn local_times_without_a_zone_or_with_an_unknown_one_are_exit_2_naming_the_flag() {
    let (code, err) = analyze_fails("local-berlin.csv", &RENAMED);
    assert_eq!(code, Some(2));
    assert!(
        err.contains("row 2") && err.contains("--time-zone"),
        "{err}"
    );
    let mut flags = RENAMED.to_vec();
    flags.extend(["--time-zone", "Europe/Atlantis"]);
    let (code, err) = analyze_fails("local-berlin.csv", &flags);
    assert_eq!(code, Some(2));
    assert!(err.starts_with("error: --time-zone: "), "{err}");
}

#[test]
fn day_first_dates_analyse_as_the_same_loop_with_a_time_format() {
    let flags = [
        "--time-format",
        "%d/%m/%Y %H:%M:%S",
        "--time-zone",
        "Europe/Berlin",
    ];
    let v = analyze_json("day-first.csv", &flags);
    assert_same_loop(&v, &reference());
    assert_eq!(v["input"]["time"]["format"], "pattern");
    assert_eq!(v["input"]["time"]["pattern"], "%d/%m/%Y %H:%M:%S");
}

#[test]
fn day_first_dates_without_a_time_format_or_with_a_bad_one_are_exit_2_naming_the_flag() {
    let (code, err) = analyze_fails("day-first.csv", &["--time-zone", "Europe/Berlin"]);
    assert_eq!(code, Some(2));
    assert!(
        err.contains("row 2") && err.contains("--time-format"),
        "{err}"
    );
    for bad in ["%d/%m %H:%M", "%d/%m/%Y %I:%M:%S"] {
        let (code, err) = analyze_fails("day-first.csv", &["--time-format", bad]);
        assert_eq!(code, Some(2), "{bad}");
        assert!(err.starts_with("error: --time-format: "), "{err}");
    }
    // A pattern that reads, but not this file's times: the row and the flag are named.
    let flags = ["--time-format", "%m/%d/%Y %H:%M:%S", "--time-zone", "UTC"];
    let (code, err) = analyze_fails("day-first.csv", &flags);
    assert_eq!(code, Some(2));
    assert!(
        err.contains("row 2") && err.contains("--time-format"),
        "{err}"
    );
}

/// Whether two numbers agree to about eight significant figures: the epoch-millisecond file
/// keeps its times on the epoch origin, so sums over times round differently in the last bits.
fn close(a: &Value, b: &Value) -> bool {
    let (a, b) = (a.as_f64().unwrap(), b.as_f64().unwrap());
    (a - b).abs() <= 1e-8 * a.abs().max(b.abs()).max(1.0)
}

#[test]
fn epoch_milliseconds_are_recognised_and_analyse_as_the_same_loop() {
    let v = analyze_json("epoch-ms.csv", &[]);
    let reference = reference();
    // 20 s apart over 2.5 h, not 20,000 s apart over 104 days.
    assert_eq!(v["data"]["median_sample_s"], 20.0);
    assert_eq!(v["data"]["duration_s"], 9000.0);
    assert!(
        v["input"]["time"]["milliseconds_detected"]
            .as_bool()
            .unwrap()
    );
    let origin = "2026-10-24T23:50:00Z"
        .parse::<jiff::Timestamp>()
        .unwrap()
        .as_second() as f64;
    for (e, r) in v["episodes"]
        .as_array()
        .unwrap()
        .iter()
        .zip(reference["episodes"].as_array().unwrap())
    {
        assert_eq!(e["start_s"].as_f64().unwrap() - origin, r["start_s"]);
        for key in [
            "verdict",
            "confidence",
            "sp_to",
            "samples",
            "settling_time_s",
        ] {
            assert_eq!(e[key], r[key], "{key}");
        }
        for key in ["overshoot_pct", "min_settling_time_s", "required_op_limit"] {
            assert!(close(&e[key], &r[key]), "{key}: {} vs {}", e[key], r[key]);
        }
    }
    for key in ["gain", "time_constant_s", "dead_time_s"] {
        let (m, r) = (&v["model"][key], &reference["model"][key]);
        assert!(close(m, r), "{key}: {m} vs {r}");
    }
    let text = analyze_text("epoch-ms.csv", &[]);
    assert!(text.contains("read as milliseconds"), "{text}");
}

#[test]
fn a_time_unit_that_is_not_s_or_ms_is_exit_2_naming_the_flag() {
    let (code, err) = analyze_fails("epoch-ms.csv", &["--time-unit", "us"]);
    assert_eq!(code, Some(2));
    assert!(err.contains("--time-unit"), "{err}");
    // Given as seconds, the same numbers are what the user said: 20,000 s apart.
    let v = analyze_json("epoch-ms.csv", &["--time-unit", "s"]);
    assert_eq!(v["data"]["median_sample_s"], 20_000.0);
}

#[test]
fn decimal_commas_in_a_semicolon_file_analyse_as_the_same_loop_exactly() {
    let v = analyze_json("decimal-comma.csv", &[]);
    assert_same_loop(&v, &reference());
    assert_eq!(v["input"]["delimiter"], ";");
    assert_eq!(v["input"]["decimal_commas"]["rows"], 451);
    let text = analyze_text("decimal-comma.csv", &[]);
    assert!(text.contains("read decimal commas"), "{text}");
}
