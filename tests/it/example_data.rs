//! The example export shipped in config/: a day of loop TIC-101 at the Wrenmoor pilot plant (an
//! invented plant). The file is made by the simulator; this test keeps it in step with the
//! generator (set HEADROOM_REGENERATE=1 to rewrite it) and checks that it shows what it is there
//! to show: a loop whose misses are partly tuning and partly the steam valve.

use crate::common::headroom_bin;
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process};
use std::fmt::Write;
use std::path::PathBuf;

const FILE: &str = "config/example-tic-101.csv";

/// Reactor R-1 jacket temperature: steam valve TV-101 (0–100 %) heats a 150 L water-filled jacket.
/// Invented numbers chosen to look like a small jacketed vessel: about 0.55 °C per % of valve,
/// a 10-minute time constant and 40 s of dead time; the controller is tuned on the slow side.
fn generate() -> String {
    let mut sim = LoopSim::new(LoopSimConfig {
        process: Process {
            gain: 0.55,
            time_constant_s: 600.0,
            second_time_constant_s: 0.0,
            dead_time_s: 40.0,
            bias: 20.0,
        },
        controller: PiController {
            gain: 3.0,
            integral_time_s: 600.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        step_s: 1.0,
        noise_sd: 0.03,
        seed: 101,
        initial_sp: 50.0,
    });
    let schedule = [
        (1800.0, 55.0),
        (9000.0, 60.0),
        (16200.0, 52.0),
        (23400.0, 70.0),
        (30600.0, 62.0),
        (37800.0, 50.0),
        (45000.0, 58.0),
        (52200.0, 76.0),
        (59400.0, 60.0),
        (66600.0, 65.0),
        (73800.0, 50.0),
        (81000.0, 56.0),
    ];
    let samples = sim.run(&schedule, 86_400.0, 10.0);
    let origin: jiff::Timestamp = "2026-11-23T00:00:00Z".parse().unwrap();
    let mut out = String::from("time,sp,pv,op\n");
    for s in samples {
        let t = origin
            .checked_add(jiff::SignedDuration::from_secs(s.time_s.round() as i64))
            .unwrap();
        writeln!(out, "{t},{},{:.3},{:.2}", s.sp, s.pv, s.op).unwrap();
    }
    out
}

fn path() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(FILE)
}

#[test]
fn the_example_export_is_what_the_generator_makes() {
    let want = generate();
    if std::env::var_os("HEADROOM_REGENERATE").is_some() {
        std::fs::write(path(), &want).unwrap();
    }
    let have = std::fs::read_to_string(path()).expect("config/example-tic-101.csv is missing");
    assert!(
        have == want,
        "{FILE} is out of date: run with HEADROOM_REGENERATE=1"
    );
}

/// `headroom analyze` of the example with the example config's loop TIC-101, as JSON.
fn analyze_example() -> serde_json::Value {
    let out = std::process::Command::new(headroom_bin())
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args([
            "analyze",
            FILE,
            "--config",
            "config/headroom.toml",
            "--loop",
            "TIC-101",
            "--json",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

#[test]
fn the_example_shows_both_tuning_and_actuator_limits() {
    let v = analyze_example();
    let count = |k: &str| v["counts"][k].as_u64().unwrap();
    assert_eq!(v["episodes"].as_array().unwrap().len(), 12);
    assert!(count("tuning_limited") >= 2, "{}", v["counts"]);
    assert!(
        count("actuator_limited") + count("unreachable") >= 2,
        "{}",
        v["counts"]
    );
    // The 58 → 76 °C change asks for more than the valve can give from its operating point.
    let big = v["episodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|e| e["sp_to"] == 76.0)
        .unwrap();
    assert_eq!(big["verdict"], "unreachable");
}

/// The advice for the example's tuning-limited changes, in the controller's own form and units
/// (config/headroom.toml describes TIC-101's controller as series form, proportional band,
/// minutes, PV range 0–150 °C, and today's settings as PB 22.2 %, Ti 10 min: the simulator's
/// Kc 3.0 %/°C, Ti 600 s written that way).
#[test]
fn the_example_advice_is_typed_in_the_controllers_own_form_and_units() {
    let v = analyze_example();
    let r = &v["recommendation"];
    assert_eq!(r["action"], "retune", "{r}");
    let rt = &r["retune"];
    let num = |x: &serde_json::Value| x.as_f64().unwrap();
    // Canonical: ideal form, Kc signed like the process gain (positive: steam heats).
    let kc = num(&rt["ideal"]["gain"]);
    let ti = num(&rt["ideal"]["integral_time_s"]);
    assert!(kc > 0.0 && ti > 0.0, "{rt}");
    assert_eq!(rt["action"], "reverse");
    // Written as the controller takes it: PB = 100 / Kc[%/%] (common practice), Kc[%/%] =
    // Kc · PV span / OP span; Ti in minutes. A PI is the same in the series and ideal forms
    // (Åström & Hägglund 2006, ch. 3).
    let w = &rt["settings"];
    assert_eq!(w["convention"]["form"], "series");
    assert_eq!(w["convention"]["gain"], "proportional_band");
    let pb = num(&w["gain"]);
    assert!((pb - 100.0 / (kc * 150.0 / 100.0)).abs() < 1e-9 * pb, "{w}");
    assert!((num(&w["integral"]) - ti / 60.0).abs() < 1e-9 * ti, "{w}");
    assert_eq!(w["action"], "reverse");
    // Today's settings read back to the simulator's Kc 3.0 %/°C, Ti 600 s.
    let today = &rt["current"];
    assert!((num(&today["ideal"]["gain"]) - 3.0).abs() < 0.01, "{today}");
    assert!(
        (num(&today["ideal"]["integral_time_s"]) - 600.0).abs() < 1e-6,
        "{today}"
    );
    // Verified on the model: meets the spec with Ms ≤ 2, and faster than today's settings do
    // on the same model.
    let verified = &rt["verified"];
    assert_eq!(verified["meets_spec"], true, "{verified}");
    assert!(num(&verified["max_sensitivity"]) <= 2.0, "{verified}");
    let suggested_s = num(&verified["settling_time_s"]);
    let today_s = num(&today["verified"]["settling_time_s"]);
    assert!(suggested_s <= 900.0 && suggested_s < today_s, "{rt}");
    // Today's settings on the model predict what the plant did: the typical change's observed
    // settling time, within 25 %.
    let observed: Vec<f64> = v["episodes"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|e| e["verdict"] == "tuning_limited")
        .filter(|e| (num(&e["sp_to"]) - num(&e["sp_from"])).abs() <= 8.0)
        .filter_map(|e| e["settling_time_s"].as_f64())
        .collect();
    assert!(!observed.is_empty(), "{v}");
    let mean = observed.iter().sum::<f64>() / observed.len() as f64;
    assert!(
        (today_s - mean).abs() <= 0.25 * mean,
        "model {today_s} s, plant {mean} s"
    );
    assert!(v["settings_hash"].as_str().is_some_and(|h| !h.is_empty()));
}

/// The controller described by flags: another form and units, and an action that contradicts
/// the identified process is called out; a malformed range is refused naming its flag.
#[test]
fn flags_describe_the_controller_and_a_wrong_action_is_called_out() {
    let root = env!("CARGO_MANIFEST_DIR");
    let run = |extra: &[&str]| {
        let mut args = vec![
            "analyze",
            FILE,
            "--settle-within-s",
            "600",
            "--pv-unit",
            "°C",
        ];
        args.extend_from_slice(extra);
        std::process::Command::new(headroom_bin())
            .current_dir(root)
            .args(&args)
            .output()
            .unwrap()
    };
    let out = run(&[
        "--form",
        "parallel",
        "--gain-unit",
        "percent_per_percent",
        "--integral-unit",
        "repeats_per_minute",
        "--pv-range",
        "0,150",
        "--current-gain",
        "4.5",
        "--current-integral",
        "0.1",
        "--current-action",
        "direct",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    let text = text.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(
        text.contains("Suggested settings: parallel form, reverse action: Kp"),
        "{text}"
    );
    assert!(
        text.contains("Today's settings: parallel form, direct action: Kp 4.50 %/%"),
        "{text}"
    );
    assert!(text.contains("described as direct acting"), "{text}");
    let refused = run(&["--pv-range", "0"]);
    assert_eq!(refused.status.code(), Some(2));
    let err = String::from_utf8_lossy(&refused.stderr);
    assert!(err.contains("--pv-range"), "{err}");
}
