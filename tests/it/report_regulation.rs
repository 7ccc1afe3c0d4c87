//! The summary's regulation section on a store holding a week of two loops of the invented
//! Larkholt still: a reboiler heater that a cold feed overwhelms (an actuator-limited load
//! disturbance) and a reflux flow loop tuned too hard, which cycles. The JSON carries the
//! figures, the HTML and Markdown show the section, and the HTML plots the largest disturbance.
//! The figures are checked against the simulation they came from (brute force over its samples
//! and a noise-free run of the same loop) and against `analyze --json` on the exported week.

use super::report::{W48_MS, check_html, loop_json, model, unescaped};
use crate::common::run_headroom_text;
use crate::common::sim::store_samples;
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, Process, SimSample};
use headroom::store::Store;
use serde_json::Value;
use std::path::Path;

const CONFIG: &str = r#"
[loops.TIC-410]
description = "Still S-4 reboiler temperature, electric heater H-410"
pv_unit = "°C"
op_min = 0
op_max = 100
expected_period_s = 2
spec = { settle_within_s = 900, recover_within_s = 600 }

[loops.FIC-420]
description = "Reflux flow, valve FV-420"
pv_unit = "kg/h"
op_min = 0
op_max = 100
expected_period_s = 2
spec = { settle_within_s = 120 }
"#;

/// Tuesday 2026-11-24 06:00 UTC, where both loops' data start.
const START_MS: i64 = W48_MS + 30 * 3_600_000;
const HOUR_S: f64 = 3_600.0;

/// The heater: K 0.5 °C/%, τ 300 s, θ 20 s, holding 50 °C at 60 % with a PI of Kc 7.5 %/°C,
/// Ti 300 s (SIMC with τc = 3θ). At 1 h a feed 3 °C colder, which the heater counters; from 3 h
/// to 4 h one 27 °C colder, which needs 114 % of heat: the heater at full power holds only
/// 43 °C.
fn heater(noise_sd: f64) -> LoopSim {
    LoopSim::new(LoopSimConfig {
        process: Process {
            gain: 0.5,
            time_constant_s: 300.0,
            second_time_constant_s: 0.0,
            dead_time_s: 20.0,
            bias: 50.0 - 0.5 * 60.0,
        },
        controller: PiController {
            gain: 7.5,
            integral_time_s: 300.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        step_s: 1.0,
        noise_sd,
        seed: 41,
        initial_sp: 50.0,
    })
}

/// The reflux flow: K 1 (kg/h)/%, τ 30 s, θ 10 s at 50 kg/h from 50 %, with a PI of Kc 8 %
/// per kg/h, well above the loop's ultimate gain: it cycles between the valve's limits.
fn reflux(noise_sd: f64) -> LoopSim {
    LoopSim::new(LoopSimConfig {
        process: Process {
            gain: 1.0,
            time_constant_s: 30.0,
            second_time_constant_s: 0.0,
            dead_time_s: 10.0,
            bias: 0.0,
        },
        controller: PiController {
            gain: 8.0,
            integral_time_s: 30.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        step_s: 1.0,
        noise_sd,
        seed: 42,
        initial_sp: 50.0,
    })
}

/// Runs a loop for eight hours at a 2 s record, with the load disturbance (PV units) changed
/// at the given hours; each stretch's first record repeats the one before and is left out.
fn run(mut sim: LoopSim, loads: &[(f64, f64)]) -> Vec<SimSample> {
    let mut out: Vec<SimSample> = Vec::new();
    let mut at = 0.0;
    for &(until_h, load) in loads.iter().chain(&[(8.0, f64::NAN)]) {
        let part = sim.run(&[], until_h * HOUR_S - at, 2.0);
        out.extend(part.into_iter().skip(usize::from(!out.is_empty())));
        at = until_h * HOUR_S;
        if !load.is_nan() {
            sim.disturbance = load;
        }
    }
    out
}

/// The heater's loads: none for an hour, −3 °C to 3 h, −27 °C to 4 h, −3 °C after.
const HEATER_LOADS: [(f64, f64); 3] = [(1.0, -3.0), (3.0, -27.0), (4.0, -3.0)];

/// The store and the configuration in a temporary folder; returns the heater's samples.
async fn seeded(dir: &Path) -> Vec<SimSample> {
    std::fs::write(dir.join("still.toml"), CONFIG).unwrap();
    let store = Store::open(&dir.join("still.db")).await.unwrap();
    let heater_rows = run(heater(0.02), &HEATER_LOADS);
    let at = |r: &SimSample| START_MS + (r.time_s * 1000.0) as i64;
    store
        .insert_samples(&store_samples("TIC-410", &heater_rows, at))
        .await
        .unwrap();
    let reflux_rows = run(reflux(0.02), &[]);
    store
        .insert_samples(&store_samples("FIC-420", &reflux_rows, at))
        .await
        .unwrap();
    // The models the daemon identified before the week (the dead time of the Harris index).
    store
        .insert_model("TIC-410", &model(0.5, 300.0, 20.0), W48_MS - 86_400_000)
        .await
        .unwrap();
    store
        .insert_model("FIC-420", &model(1.0, 30.0, 10.0), W48_MS - 86_400_000)
        .await
        .unwrap();
    store.close().await;
    heater_rows
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

/// The noise-free limit cycle of the reflux loop, kicked off by a short setpoint bump: its
/// mean period (between upward crossings of the SP) and half its peak-to-peak swing, over the
/// last six of eight hours.
fn reflux_cycle() -> (f64, f64) {
    let rows = reflux(0.0).run(&[(0.0, 52.0), (30.0, 50.0)], 8.0 * HOUR_S, 1.0);
    let late: Vec<&SimSample> = rows.iter().filter(|r| r.time_s >= 2.0 * HOUR_S).collect();
    let ups: Vec<f64> = late
        .windows(2)
        .filter(|w| w[0].pv < 50.0 && w[1].pv >= 50.0)
        .map(|w| w[1].time_s)
        .collect();
    let period = (ups[ups.len() - 1] - ups[0]) / (ups.len() - 1) as f64;
    let (lo, hi) = late
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |m, r| {
            (m.0.min(r.pv), m.1.max(r.pv))
        });
    (period, (hi - lo) / 2.0)
}

#[tokio::test]
async fn the_summary_shows_each_loops_regulation_with_its_largest_disturbance_plotted() {
    let dir = tempfile::tempdir().unwrap();
    let heater_rows = seeded(dir.path()).await;
    let (config, db, out) = (
        dir.path().join("still.toml"),
        dir.path().join("still.db"),
        dir.path().join("out"),
    );
    let (code, stdout, stderr) = run_headroom_text(&[
        "report",
        "--config",
        config.to_str().unwrap(),
        "--db",
        db.to_str().unwrap(),
        "--week",
        "2026-W48",
        "--time-zone",
        "Europe/Berlin",
        "--format",
        "html,md,json",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{stdout}\n{stderr}");
    let read = |ext: &str| std::fs::read_to_string(out.join(format!("loop-health-2026-W48.{ext}")));
    let json: Value = serde_json::from_str(&read("json").unwrap()).unwrap();
    let (md, html) = (read("md").unwrap(), read("html").unwrap());

    // The heater: eight hours held (a 2 s record), the overwhelming load listed first.
    let tic = &loop_json(&json, "TIC-410")["regulation"];
    assert!((num(&tic["hold_hours"]) - 8.0).abs() < 0.01, "{tic}");
    assert_eq!(tic["dead_time_s"], 20.0, "the stored model's");
    assert_eq!(tic["recover_within_s"], 600.0);
    let counts = &tic["disturbance_counts"];
    assert_eq!(counts["actuator_limited"], 1, "{counts}");
    assert!(counts["recovered"].as_u64().unwrap() >= 1, "{counts}");
    assert_eq!(counts["missed_spec"], 1, "{counts}");
    let worst = &tic["largest_disturbances"][0];
    assert_eq!(worst["verdict"], "actuator_limited", "{worst}");
    assert_eq!(worst["verdict_words"], "actuator-limited");
    assert_eq!(worst["missed_spec"], "actuator_limited");
    // It left the band with the first record after the load came at 3 h (09:00 UTC), in the
    // summary's zone.
    assert_eq!(worst["start"], "2026-11-24T10:00:02+01:00", "{worst}");
    // Its peak is the lowest PV − SP of the samples from 3 h to its end (brute force).
    let (from_s, to_s) = (num(&worst["start_s"]), num(&worst["end_s"]));
    let t0_s = START_MS as f64 / 1000.0;
    let lowest = heater_rows
        .iter()
        .filter(|r| (from_s..=to_s).contains(&(t0_s + r.time_s)))
        .map(|r| r.pv - r.sp)
        .fold(f64::INFINITY, f64::min);
    assert!(
        (num(&worst["peak_deviation"]) - lowest).abs() < 1e-9,
        "{worst}: {lowest}"
    );
    assert!(num(&worst["op_at_limit_frac"]) > 0.5, "{worst}");
    let eta = num(&tic["min_variance_index"]);
    assert!(eta > 0.0 && eta <= 1.0, "{eta}");
    assert!(!tic["oscillation"]["detected"].as_bool().unwrap());
    let trend = tic["trend"].as_array().unwrap();
    assert_eq!(trend.len(), 8);
    assert!(trend[..7].iter().all(|w| w["analysed"] == false));
    assert_eq!(trend[7]["label"], "2026-W48");
    assert_eq!(trend[7]["actuator_limited"], 1);
    assert_eq!(trend[7]["op_travel_per_h"], tic["op_travel_per_h"]);

    // The reflux loop cycles at the period and swing of its noise-free limit cycle, driven by
    // its tuning.
    let fic = &loop_json(&json, "FIC-420")["regulation"];
    let o = &fic["oscillation"];
    assert_eq!(o["detected"], true, "{o}");
    let (period, swing) = reflux_cycle();
    assert!(
        (num(&o["period_s"]) / period - 1.0).abs() < 0.05,
        "{o}: {period}"
    );
    assert!(
        (num(&o["amplitude"]) / swing - 1.0).abs() < 0.1,
        "{o}: {swing}"
    );
    assert_eq!(o["likely_cause"], "tuning", "{o}");
    // The evidence states why: the period against the dead time, or (when the cycle is wide
    // enough to swing the OP between both limits) the OP's swing itself.
    let evidence = o["evidence"].as_str().unwrap();
    assert!(
        evidence.contains("dead times") || evidence.contains("between both its limits"),
        "{o}"
    );
    assert_eq!(
        fic["disturbance_counts"]["total"], 0,
        "cycles are not loads"
    );
    assert!(num(&fic["trend"][7]["oscillation_period_s"]) > 0.0);

    // The same core on the exported week through `analyze` gives the same figures (those that
    // do not hang on the dead time: `analyze` has no stored model).
    for (tag, section) in [("TIC-410", tic), ("FIC-420", fic)] {
        let analyzed = analyze_export(dir.path(), tag);
        let r = &analyzed["regulation"];
        for key in [
            "hold_hours",
            "pv_sd",
            "hold_band",
            "time_at_limit_frac",
            "op_travel_per_h",
            "op_reversals_per_h",
        ] {
            let (a, b) = (num(&section[key]), num(&r[key]));
            assert!(
                (a - b).abs() <= 1e-9 * a.abs().max(1.0),
                "{tag} {key}: {a} vs {b}"
            );
        }
        // The same period, up to the rounding of times counted from another origin.
        let period = |v: &Value| v["oscillation"]["period_s"].as_f64();
        match (period(section), period(r)) {
            (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-9 * a, "{tag}: {a} vs {b}"),
            (a, b) => assert_eq!(a, b, "{tag}"),
        }
        // `analyze` counts time from the file's first sample, the summary from the epoch.
        let ours = section["disturbances"].as_array().unwrap();
        let theirs = r["disturbances"].as_array().unwrap();
        assert_eq!(ours.len(), theirs.len(), "{tag}");
        for (a, b) in ours.iter().zip(theirs) {
            let mut shifted = a.clone();
            for key in ["start_s", "end_s"] {
                shifted[key] = (num(&a[key]) - t0_s).into();
            }
            assert_eq!(&shifted, b, "{tag}");
        }
    }

    // The HTML: the section, the words of the core, and one plot (the heater's disturbance;
    // the reflux loop's cycles are no disturbances, and no loop had a setpoint change).
    assert_eq!(check_html(&html), 1);
    let html = unescaped(&html);
    for expected in [
        "Regulation between setpoint changes",
        "The largest load disturbance:</strong> 2026-11-24T10:00:02+01:00",
        "hold band around the SP",
        "OP at a limit (shaded)",
        "Oscillation: period",
        "likely cause the tuning",
        "slower than the spec allows: actuator-limited",
        "Minimum-variance (Harris) index",
    ] {
        assert!(html.contains(expected), "the HTML lacks {expected:?}");
    }
    for expected in [
        "**Regulation between setpoint changes**",
        "(the HTML summary plots the first)",
        "1. 2026-11-24T10:00:02+01:00: ",
        "| week | held | PV sd (hold band) |",
        "| 2026-W48 | 8.0 h |",
        "Oscillation: period",
    ] {
        assert!(
            md.contains(expected),
            "the Markdown lacks {expected:?}\n{md}"
        );
    }
}

/// `headroom export` of the loop's week, then `headroom analyze --json` of it with the
/// configuration.
fn analyze_export(dir: &Path, tag: &str) -> Value {
    let (db, config) = (dir.join("still.db"), dir.join("still.toml"));
    let (code, csv, err) = run_headroom_text(&[
        "export",
        "--db",
        db.to_str().unwrap(),
        "--loop",
        tag,
        "--from",
        "2026-11-23T00:00:00Z",
        "--to",
        "2026-11-30T00:00:00Z",
    ]);
    assert_eq!(code, 0, "{err}");
    let file = dir.join(format!("{tag}.csv"));
    std::fs::write(&file, csv).unwrap();
    let (code, out, err) = run_headroom_text(&[
        "analyze",
        file.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--loop",
        tag,
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    serde_json::from_str(&out).unwrap()
}

#[tokio::test]
async fn without_a_configuration_or_samples_the_section_says_why_it_is_missing() {
    let dir = tempfile::tempdir().unwrap();
    seeded(dir.path()).await;
    let (config, db) = (dir.path().join("still.toml"), dir.path().join("still.db"));
    let json = |args: &[&str]| -> Value {
        let (code, out, err) = run_headroom_text(
            &[
                &["report", "--db", db.to_str().unwrap(), "--format", "json"],
                args,
            ]
            .concat(),
        );
        assert_eq!(code, 0, "{err}");
        serde_json::from_str(&out).unwrap()
    };
    // No configuration: no spec or OP range to analyse with.
    let bare = json(&["--week", "2026-W48"]);
    let tic = loop_json(&bare, "TIC-410");
    assert_eq!(tic["regulation"], Value::Null);
    assert!(
        tic["regulation_missing"]
            .as_str()
            .unwrap()
            .contains("spec and OP range are not known"),
        "{tic}"
    );
    // A week before the data: configured, but nothing stored.
    let early = json(&["--config", config.to_str().unwrap(), "--week", "2026-W47"]);
    let tic = loop_json(&early, "TIC-410");
    assert_eq!(tic["regulation"], Value::Null);
    assert!(
        tic["regulation_missing"]
            .as_str()
            .unwrap()
            .contains("no samples"),
        "{tic}"
    );
}
