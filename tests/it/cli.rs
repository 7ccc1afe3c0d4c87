//! The `headroom analyze` command as users meet it: table, JSON contract, flags and exit codes.

use crate::common::{run_headroom, run_headroom_ok};
use headroom::analysis::sim::{LoopSim, LoopSimConfig};
use std::io::Write;

/// Writes a CSV of a simulated heating loop (K 0.8, τ 300 s, θ 30 s) with three setpoint steps.
fn loop_csv(dir: &std::path::Path, rfc3339: bool) -> std::path::PathBuf {
    let mut sim = LoopSim::new(LoopSimConfig::jacketed_vessel(100.0, 5));
    let samples = sim.run(
        &[(600.0, 55.0), (4200.0, 52.0), (7800.0, 57.0)],
        11_400.0,
        2.0,
    );
    let path = dir.join("tic.csv");
    let mut f = std::fs::File::create(&path).unwrap();
    writeln!(f, "time,sp,pv,op").unwrap();
    let origin = jiff::Timestamp::from_second(1_795_000_000).unwrap();
    for s in samples {
        let t = if rfc3339 {
            origin
                .checked_add(jiff::SignedDuration::from_secs_f64(s.time_s))
                .unwrap()
                .to_string()
        } else {
            format!("{}", s.time_s)
        };
        writeln!(f, "{t},{},{:.4},{:.3}", s.sp, s.pv, s.op).unwrap();
    }
    path
}

#[test]
fn analyze_json_has_the_contract_fields() {
    let dir = tempfile::tempdir().unwrap();
    let csv = loop_csv(dir.path(), false);
    let out = run_headroom_ok(&[
        "analyze",
        csv.to_str().unwrap(),
        "--json",
        "--settle-within-s",
        "600",
        "--max-overshoot-pct",
        "15",
    ]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["loop"], "tic");
    for k in ["gain", "time_constant_s", "dead_time_s", "fit_r2"] {
        assert!(
            v["model"][k].is_number(),
            "model.{k} missing: {}",
            v["model"]
        );
    }
    let eps = v["episodes"].as_array().unwrap();
    assert_eq!(eps.len(), 3);
    for k in [
        "start_s",
        "sp_from",
        "sp_to",
        "settling_time_s",
        "overshoot_pct",
        "rise_time_s",
        "saturation_duty",
        "min_settling_time_s",
        "required_op_limit",
        "verdict",
        "confidence",
        "min_settling_time_range_s",
        "start_pv",
    ] {
        assert!(eps[0].get(k).is_some(), "episode field {k} missing");
    }
    assert_eq!(eps[0]["start_s"], 600.0);
    assert_eq!(eps[0]["sp_to"], 55.0);
    assert_eq!(eps[0]["verdict"], "met");
    assert_eq!(eps[0]["confidence"], "clear");
    assert!(eps[0]["start_pv"].is_number());
    assert_eq!(v["model"]["family"], "first_order");
    assert_eq!(v["schema_version"], 3);
    assert_eq!(v["version"], env!("CARGO_PKG_VERSION"));
    assert!(v["data"]["quality"]["findings"].is_array());
    assert!(
        v["recommendation"]["caution"]
            .as_str()
            .unwrap()
            .contains("qualified engineers")
    );
}

#[test]
fn analyze_prints_a_table_with_verdicts_model_and_caution() {
    let dir = tempfile::tempdir().unwrap();
    let csv = loop_csv(dir.path(), true);
    let out = run_headroom_ok(&["analyze", csv.to_str().unwrap(), "--settle-within-s", "600"]);
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("50 → 55"), "{text}");
    // RFC 3339 input shows absolute start times.
    assert!(text.contains("2026-11-18T11:16:40Z"), "{text}");
    assert!(text.contains("Process model"), "{text}");
    assert!(text.contains("Recommendation: no change"), "{text}");
    assert!(text.contains("qualified engineers"), "{text}");
}

#[test]
fn analyze_takes_limits_and_spec_from_a_config_loop() {
    let dir = tempfile::tempdir().unwrap();
    let csv = loop_csv(dir.path(), false);
    let cfg = dir.path().join("plant.toml");
    std::fs::write(
        &cfg,
        "[loops.TIC-7]\nop_min = 0\nop_max = 100\n[loops.TIC-7.spec]\nsettle_within_s = 100\n",
    )
    .unwrap();
    let out = run_headroom_ok(&[
        "analyze",
        csv.to_str().unwrap(),
        "--json",
        "--config",
        cfg.to_str().unwrap(),
        "--loop",
        "TIC-7",
    ]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["loop"], "TIC-7");
    assert_eq!(v["spec"]["settle_within_s"], 100.0);
    // 100 s is faster than this process can go (θ = 30 s, τ = 300 s with full headroom): missed.
    assert_ne!(v["episodes"][0]["verdict"], "met");
}

#[test]
fn a_missing_column_is_exit_code_2_with_a_message_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("bad.csv");
    std::fs::write(&csv, "time,sp,pv\n0,1,1\n1,1,1\n2,1,1\n").unwrap();
    let out = run_headroom(&["analyze", csv.to_str().unwrap(), "--settle-within-s", "60"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("op"), "{err}");
}

#[test]
fn a_bad_timestamp_is_exit_code_2_naming_row_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("bad.csv");
    std::fs::write(
        &csv,
        "time,sp,pv,op\n0,1,1,5\n1,1,1,5\nlater,1,1,5\n3,1,1,5\n",
    )
    .unwrap();
    let out = run_headroom(&["analyze", csv.to_str().unwrap(), "--settle-within-s", "60"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("row 4") && err.contains("time"), "{err}");
}

#[test]
fn without_a_spec_time_analyze_says_what_to_give() {
    let dir = tempfile::tempdir().unwrap();
    let csv = loop_csv(dir.path(), false);
    let out = run_headroom(&["analyze", csv.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--settle-within-s"));
}

#[test]
fn renamed_columns_are_read() {
    let dir = tempfile::tempdir().unwrap();
    let csv = loop_csv(dir.path(), false);
    let text = std::fs::read_to_string(&csv).unwrap().replacen(
        "time,sp,pv,op",
        "Timestamp,TIC-7.SP,TIC-7.PV,TIC-7.OP",
        1,
    );
    std::fs::write(&csv, text).unwrap();
    let out = run_headroom_ok(&[
        "analyze",
        csv.to_str().unwrap(),
        "--settle-within-s",
        "600",
        "--time-col",
        "Timestamp",
        "--sp-col",
        "TIC-7.SP",
        "--pv-col",
        "TIC-7.PV",
        "--op-col",
        "TIC-7.OP",
        "--json",
    ]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["episodes"].as_array().unwrap().len(), 3);
}
