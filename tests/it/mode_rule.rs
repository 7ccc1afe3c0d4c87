//! One rule for "automatic": the same mode signal, taken live (MQTT payloads decoded by the
//! loop's topic map, aligned and tracked as the daemon does) and offline (a CSV export analysed
//! with the options `analyze --config F --loop TAG` uses), gives the same automatic/manual
//! reading at every sample and the same episode windows.
//!
//! The controller publishes an enumeration (0 manual, 1 auto, 2 cascade, 3 tracking) and now and
//! then a word; the loop's `auto_values` are `["1", "2", "Cas"]`. Tracking (3) is a non-zero
//! number that is not automatic: a loader that counted any non-zero number as automatic would
//! keep the first window open through it and fail here.

use std::io::Write;
use std::path::Path;

use clap::Parser;
use headroom::analysis;
use headroom::analysis::live::{Aligner, LiveEvent, LoopTracker, Row};
use headroom::analysis::segment::WindowEnd;
use headroom::cli::{Cli, Command};
use headroom::config::Config;
use headroom::csvload;
use headroom::mqtt::{TopicMap, decode};

const TAG: &str = "TIC-101";
/// 2025-11-24T16:00:00Z, in epoch seconds: the first sample's time.
const T0_S: i64 = 1_764_000_000;
const PERIOD_S: i64 = 1;
const SAMPLES: i64 = 1_200;

/// The config: one loop whose four signals arrive as JSON with their own time, and whose
/// mode's automatic values are the controller's auto and cascade numbers and the word Cas.
fn config_text() -> String {
    let mut text = format!(
        "[mqtt]\nurl = \"mqtt://localhost:1883\"\nclient_id = \"mode-rule\"\n\
         alert_topic = \"plant/alerts\"\n\n[loops.{TAG}]\nexpected_period_s = 1.0\n\
         op_min = 0.0\nop_max = 100.0\n[loops.{TAG}.spec]\nsettle_within_s = 60\n"
    );
    for signal in ["sp", "pv", "op", "mode"] {
        text += &format!(
            "[loops.{TAG}.{signal}]\ntopic = \"plant/{TAG}/{signal}\"\nformat = \"json\"\n\
             time_field = \"time\"\n"
        );
    }
    text + "auto_values = [\"1\", \"2\", \"Cas\"]\n"
}

/// The mode the controller reports from `from_s` (seconds after the first sample) on, as it
/// writes it: a JSON value for the live payload and the same text for the CSV cell.
const MODES: [(i64, &str, &str); 9] = [
    (0, "1", "1"),
    (250, "3", "3"),
    (300, "2", "2"),
    (450, "\"MAN\"", "MAN"),
    (500, "\"CAS\"", "CAS"),
    (650, "3", "3"),
    (690, "\"cas\"", "cas"),
    (800, "0", "0"),
    (850, "1", "1"),
];

/// The setpoint from `from_s` on.
const SETPOINTS: [(i64, f64); 5] = [
    (0, 50.0),
    (100, 60.0),
    (400, 55.0),
    (600, 65.0),
    (1000, 60.0),
];

/// One sample time's values: SP, PV, OP and the mode as JSON and as CSV text.
struct Tick {
    time_s: i64,
    sp: f64,
    pv: f64,
    op: f64,
    mode_json: &'static str,
    mode_text: &'static str,
}

/// The loop's record: the PV follows the SP with a first-order lag, the OP leads it.
fn ticks() -> Vec<Tick> {
    let in_force = |s: i64| MODES.iter().rev().find(|m| m.0 <= s).copied().unwrap();
    let sp_at = |s: i64| SETPOINTS.iter().rev().find(|p| p.0 <= s).unwrap().1;
    let mut pv = sp_at(0);
    (0..SAMPLES)
        .map(|i| {
            let s = i * PERIOD_S;
            let sp = sp_at(s);
            pv += (sp - pv) * PERIOD_S as f64 / 20.0;
            // Rounded as an export would write them, so both paths read the very same numbers.
            let pv_written = (pv * 1e4).round() / 1e4;
            let op = ((40.0 + 3.0 * (sp - pv)).clamp(0.0, 100.0) * 1e3).round() / 1e3;
            let (_, mode_json, mode_text) = in_force(s);
            Tick {
                time_s: T0_S + s,
                sp,
                pv: pv_written,
                op,
                mode_json,
                mode_text,
            }
        })
        .collect()
}

/// The live path: each value published as a JSON payload on its topic, decoded through the
/// config's topic map, aligned into rows and tracked; returns the rows and the final episodes.
fn live(config: &Config, ticks: &[Tick]) -> (Vec<Row>, Vec<analysis::EpisodeResult>) {
    let map = TopicMap::new(config.mqtt_routes());
    let limits = config
        .mqtt
        .as_ref()
        .expect("the config has [mqtt]")
        .limits();
    let setup = config.loops[TAG]
        .setup(TAG)
        .expect("the loop's setup is valid");
    let mut aligner = Aligner::new(true, 5.0 * PERIOD_S as f64);
    let mut tracker = LoopTracker::new(setup);
    let mut all_rows = Vec::new();
    let mut finals = Vec::new();
    for tick in ticks {
        let ms = tick.time_s * 1000;
        let messages = [
            ("sp", tick.sp.to_string()),
            ("pv", tick.pv.to_string()),
            ("op", tick.op.to_string()),
            ("mode", tick.mode_json.to_owned()),
        ];
        for (signal, value) in messages {
            let topic = format!("plant/{TAG}/{signal}");
            let payload = format!(r#"{{"value": {value}, "time": {ms}}}"#);
            let samples = decode(&topic, payload.as_bytes(), ms, &map, &limits)
                .unwrap_or_else(|e| panic!("{topic} {payload}: {e}"));
            for s in samples {
                aligner.push(s.signal, s.ts_ms as f64 / 1000.0, s.value);
            }
        }
        let mut rows = Vec::new();
        aligner.drain(&mut rows);
        tracker.extend(&rows);
        all_rows.extend(rows);
        finals.extend(tracker.evaluate().into_iter().filter_map(|e| match e {
            LiveEvent::Final(r) => Some(r),
            _ => None,
        }));
    }
    (all_rows, finals)
}

/// The offline path: the same values as a CSV export, read with the options that
/// `analyze FILE --config F --loop TAG --mode-col mode` resolves, then analysed.
fn offline(config_path: &Path, ticks: &[Tick]) -> (analysis::Series, Vec<analysis::EpisodeResult>) {
    let mut csv = String::from("time,sp,pv,op,mode\n");
    for t in ticks {
        csv.push_str(&format!(
            "{},{},{},{},{}\n",
            t.time_s, t.sp, t.pv, t.op, t.mode_text
        ));
    }
    let cli = Cli::try_parse_from([
        "headroom",
        "analyze",
        "export.csv",
        "--config",
        config_path.to_str().unwrap(),
        "--loop",
        TAG,
        "--mode-col",
        "mode",
    ])
    .expect("the command line parses");
    let Command::Analyze(args) = cli.command else {
        panic!("not the analyze command");
    };
    let (setup, options) = args.setup().expect("the setup resolves");
    let loaded = csvload::load_csv(csv.as_bytes(), &options).expect("the export loads");
    let report = analysis::analyze_loop(&loaded.series, &setup);
    (loaded.series, report.episodes)
}

/// An episode's window: start, end and why it ended.
fn window(e: &analysis::EpisodeResult) -> (f64, f64, WindowEnd) {
    (e.start_s, e.end_s, e.window_end)
}

#[test]
fn one_mode_signal_gives_the_same_windows_live_and_offline() {
    let dir = tempfile::tempdir().unwrap();
    let config_path = dir.path().join("headroom.toml");
    std::fs::File::create(&config_path)
        .and_then(|mut f| f.write_all(config_text().as_bytes()))
        .unwrap();
    let config = Config::load(&config_path).expect("the config is valid");
    let ticks = ticks();

    let (rows, live_finals) = live(&config, &ticks);
    let (series, offline_episodes) = offline(&config_path, &ticks);

    // The same reading of automatic at every sample the live path released.
    let times = series.time_s();
    assert!(rows.len() > ticks.len() - 10, "{} rows", rows.len());
    for r in &rows {
        let i = times.partition_point(|&t| t < r.time_s);
        assert_eq!(times.get(i), Some(&r.time_s));
        assert_eq!(series.is_auto(i), r.auto, "at {} s", r.time_s - T0_S as f64);
    }
    // Tracking (3) and MAN are manual, CAS in any case is automatic.
    let auto_at = |s: i64| series.is_auto(s as usize);
    assert!(auto_at(100) && auto_at(320) && auto_at(520) && auto_at(700) && auto_at(900));
    assert!(!auto_at(260) && !auto_at(460) && !auto_at(660) && !auto_at(820));

    // The same windows, ended for the same reasons; the live side reports a window once it has
    // closed, so the offline episode still open at the end of the data has no live twin.
    let offline_closed: Vec<_> = offline_episodes
        .iter()
        .filter(|e| e.window_end != WindowEnd::EndOfData)
        .map(window)
        .collect();
    let live_closed: Vec<_> = live_finals.iter().map(window).collect();
    assert_eq!(live_closed, offline_closed);
    // The window opened by the change at 100 s ends where the controller starts tracking.
    let first = offline_closed.first().expect("a closed window");
    assert_eq!(
        (first.0, first.2),
        ((T0_S + 100) as f64, WindowEnd::ManualMode)
    );
    assert!(first.1 < (T0_S + 250) as f64, "{first:?}");
    assert!(offline_closed.len() >= 3, "{offline_closed:?}");
}
