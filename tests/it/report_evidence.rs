//! The weekly summary as evidence a reviewer can check: each loop's worst misses with commands
//! that, run, bring back that very change; the settings hash, schema and product version on the
//! summary and on `episodes --json`; the caution once at the top and once beside each action;
//! quiet weeks in one line; counts rather than bare shares; and no `NaN` or `inf` even for a loop
//! with an unreachable change and no model.

use super::report::{
    HOUR_MS, W48_MS, check_html, episode, fixture, loop_json, model, simulated_change, unescaped,
    week_report, write_all,
};
use crate::common::run_headroom_text;
use headroom::analysis::Verdict;
use headroom::analysis::sim::{PiController, Process};
use headroom::store::Store;
use serde_json::Value;

/// The W48 summary in one format; HTML with its escapes undone.
fn read(dir: &std::path::Path, ext: &str) -> String {
    let text = std::fs::read_to_string(dir.join(format!("loop-health-2026-W48.{ext}"))).unwrap();
    if ext == "html" {
        unescaped(&text)
    } else {
        text
    }
}

/// Runs a command line as the summary prints it (words without quotes: the test's paths have
/// no spaces), `headroom` itself left out.
fn run_printed(command: &str, extra: &[&str]) -> (i32, String, String) {
    let words: Vec<&str> = command.split_whitespace().collect();
    assert_eq!(words[0], "headroom", "{command}");
    run_headroom_text(&[&words[1..], extra].concat())
}

#[tokio::test]
async fn each_worst_miss_comes_with_commands_that_bring_that_change_back() {
    let f = fixture().await;
    let out = write_all(&f);
    let json: Value = serde_json::from_str(&read(&out, "json")).unwrap();
    let (md, html) = (read(&out, "md"), read(&out, "html"));

    // TIC-101's three tuning-limited misses (spec 900 s), worst first: 1400, 1310, 1250 s.
    let worst = loop_json(&json, "TIC-101")["worst_misses"]
        .as_array()
        .unwrap()
        .clone();
    let starts: Vec<&str> = worst.iter().map(|m| m["start"].as_str().unwrap()).collect();
    assert_eq!(
        starts,
        [
            "2026-11-25T08:00:00+00:00",
            "2026-11-23T08:00:00+00:00",
            "2026-11-24T08:00:00+00:00"
        ]
    );
    let missed_by = worst[0]["missed_by"].as_str().unwrap();
    assert_eq!(missed_by, "settled in 23.3 min against the spec's 15.0 min");
    let record = worst[0]["record_command"].as_str().unwrap();
    for (name, text) in [("md", &md), ("html", &html)] {
        assert!(text.contains(record), "{name} lacks {record}");
        assert!(text.contains(missed_by), "{name} lacks {missed_by}");
    }

    // Run, the record command lists exactly that change.
    let (code, listed, err) = run_printed(record, &["--json"]);
    assert_eq!(code, 0, "{record}: {err}");
    let listed: Value = serde_json::from_str(&listed).unwrap();
    let listed = listed.as_array().unwrap();
    assert_eq!(listed.len(), 1, "{record}: {listed:#?}");
    assert_eq!(listed[0]["loop"], "TIC-101");
    assert_eq!(listed[0]["start_time"], "2026-11-25T08:00:00Z");
    assert_eq!(listed[0]["settling_time_s"], 1400.0);

    // The export and analyze commands bring back its raw data and analyse the same change.
    let [export, analyze] = [0, 1].map(|i| worst[0]["data_commands"][i].as_str().unwrap());
    let (export_cmd, file) = export.split_once(" > ").unwrap();
    let (code, csv, err) = run_printed(export_cmd, &[]);
    assert_eq!(code, 0, "{export}: {err}");
    assert!(csv.lines().count() > 100, "{csv}");
    let path = f.dir.path().join(file);
    std::fs::write(&path, csv).unwrap();
    let analyze = analyze.replacen(file, path.to_str().unwrap(), 1);
    assert!(analyze.contains("--config"), "{analyze}");
    let (code, result, err) = run_printed(&analyze, &["--json"]);
    assert_eq!(code, 0, "{analyze}: {err}");
    let result: Value = serde_json::from_str(&result).unwrap();
    let changes: Vec<(f64, f64)> = result["episodes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| (e["sp_from"].as_f64().unwrap(), e["sp_to"].as_f64().unwrap()))
        .collect();
    assert_eq!(changes, [(60.0, 65.0)], "{analyze}");
}

#[tokio::test]
async fn the_summary_and_episodes_json_carry_versions_and_the_settings_hash() {
    let f = fixture().await;
    let out = write_all(&f);
    let json: Value = serde_json::from_str(&read(&out, "json")).unwrap();
    let (md, html) = (read(&out, "md"), read(&out, "html"));
    let all = json["settings_hash"].as_str().unwrap();
    assert!(all.starts_with("sha256:") && all.len() == 71, "{all}");
    let h101 = loop_json(&json, "TIC-101")["settings_hash"]
        .as_str()
        .unwrap();
    let h102 = loop_json(&json, "TIC-102")["settings_hash"]
        .as_str()
        .unwrap();
    assert_ne!(h101, h102);
    assert_ne!(h101, all);
    for (name, text) in [("md", &md), ("html", &html)] {
        let footer = format!(
            "schema_version {} · headroom {}",
            headroom::summary_format::SCHEMA_VERSION,
            env!("CARGO_PKG_VERSION")
        );
        assert!(text.contains(&footer), "{name} lacks {footer}");
        assert!(text.contains(all), "{name} lacks the settings hash");
    }
    // The same settings give the same hash in another run.
    let (code, again, err) = week_report(&f.config, &f.db, "2026-W48", "json");
    assert_eq!(code, 0, "{err}");
    let again: Value = serde_json::from_str(&again).unwrap();
    assert_eq!(again["settings_hash"], all);

    // `episodes --json` with the configuration: each change carries its loop's hash, the same
    // the summary gives that loop; another spec gives another hash; without one it is null.
    let episodes = |config: &std::path::Path| {
        let (code, out, err) = run_headroom_text(&[
            "episodes",
            "--config",
            config.to_str().unwrap(),
            "--loop",
            "TIC-101",
            "--json",
        ]);
        assert_eq!(code, 0, "{err}");
        serde_json::from_str::<Value>(&out).unwrap()
    };
    let listed = episodes(&f.config);
    assert_eq!(listed.as_array().unwrap().len(), 7, "{listed:#}");
    for e in listed.as_array().unwrap() {
        assert_eq!(
            e["schema_version"],
            headroom::summary_format::SCHEMA_VERSION
        );
        assert_eq!(e["version"], env!("CARGO_PKG_VERSION"));
        assert_eq!(e["settings_hash"], h101);
    }
    let changed = f.dir.path().join("changed.toml");
    let text = std::fs::read_to_string(&f.config).unwrap();
    std::fs::write(
        &changed,
        text.replacen("settle_within_s = 900", "settle_within_s = 901", 1),
    )
    .unwrap();
    let other = episodes(&changed);
    assert_ne!(other[0]["settings_hash"], h101);
    let (_, bare, _) = run_headroom_text(&["episodes", "--db", f.db.to_str().unwrap(), "--json"]);
    let bare: Value = serde_json::from_str(&bare).unwrap();
    assert_eq!(bare[0]["settings_hash"], Value::Null);
    assert_eq!(
        bare[0]["schema_version"],
        headroom::summary_format::SCHEMA_VERSION
    );
    // `alerts --json` with the configuration: each alert carries its loop's hash too.
    let (code, out, err) = run_headroom_text(&[
        "alerts",
        "--config",
        f.config.to_str().unwrap(),
        "--all",
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let alerts: Value = serde_json::from_str(&out).unwrap();
    let alerts = alerts.as_array().unwrap();
    assert!(!alerts.is_empty(), "the seeded store has alerts");
    for a in alerts {
        let want = loop_json(&json, a["loop_tag"].as_str().unwrap())["settings_hash"].clone();
        assert_eq!(a["settings_hash"], want, "{a}");
        assert_eq!(
            a["schema_version"],
            headroom::summary_format::SCHEMA_VERSION
        );
    }
}

#[tokio::test]
async fn the_summary_reads_in_counts_words_and_one_caution_per_action() {
    let f = fixture().await;
    let out = write_all(&f);
    let (md, html) = (read(&out, "md"), read(&out, "html"));
    let caution = "qualified engineers";
    // Once at the top, once beside each of the two actions (TIC-102 upgrade, TIC-101 retune);
    // not beside the loops that need none.
    assert_eq!(html.matches(caution).count(), 3, "html");
    assert_eq!(md.matches(caution).count(), 3, "md");

    // Headline counts out of their whole: 2 of the 4 loops need action; 1 of the 7 judged
    // changes met the spec.
    assert!(
        html.contains(r#"<span class="big">2 of 4</span><span>loops need action</span>"#),
        "html tiles"
    );
    assert!(md.contains("- **2 of 4** loops need action"), "{md}");
    assert!(
        md.contains("- **1 of 7** judged changes met the spec"),
        "{md}"
    );

    // TIC-101's trend: W41–W45 and W47 had no changes, each run told in one line.
    for text in [&md, &html] {
        assert!(text.contains("no setpoint changes from 2026-W41 to 2026-W45 (5 weeks)"));
        assert!(text.contains("no setpoint changes in 2026-W47"));
    }
    assert!(!md.contains("| 2026-W42 |"), "{md}");

    // Words, not the symbols or status colours of an alarm display; alert kinds as labelled.
    for (name, text) in [("md", &md), ("html", &html)] {
        for symbol in ["▲", "◆", "↻", "✓", "✕"] {
            assert!(!text.contains(symbol), "{name} shows {symbol}");
        }
        assert!(
            !text.contains("tuning limited"),
            "{name}: the kind's stored spelling"
        );
        assert!(text.contains("tuning-limited"), "{name}");
    }
    assert!(
        !html.contains("#a33333") && !html.contains("--actuator:"),
        "red"
    );
}

const CONFIG: &str = r#"
[loops.TIC-401]
description = "R-4 jacket, no model yet"
pv_unit = "°C"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 600 }

[loops.TIC-402]
description = "R-4 outlet"
pv_unit = "°C"
op_min = 0
op_max = 100
expected_period_s = 10
spec = { settle_within_s = 600 }
"#;

/// Tokens `NaN`, `inf`, `infinity` anywhere in `text` (as whole words).
fn not_a_number_words(text: &str) -> Vec<&str> {
    text.split(|c: char| !c.is_ascii_alphanumeric())
        .filter(|w| ["nan", "inf", "infinity"].contains(&w.to_ascii_lowercase().as_str()))
        .collect()
}

#[tokio::test]
async fn an_unreachable_change_without_a_model_reads_without_nan_or_inf() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("headroom.db");
    let config = dir.path().join("headroom.toml");
    std::fs::write(&config, CONFIG).unwrap();
    let store = Store::open(&db).await.unwrap();
    let at = W48_MS + 2 * 86_400_000 + 8 * HOUR_MS;
    // +20 °C from OP 72 with 28 % of headroom on a gain of 0.5 °C/%: the reach is 14 °C.
    let mut e = episode(Verdict::Unreachable, 50.0, 70.0, 72.0, 28.0, None, 0.0, 0.9);
    e.reach = Some(14.0);
    e.start_pv = Some(50.0);
    for tag in ["TIC-401", "TIC-402"] {
        store
            .upsert_episode(tag, &e, at, at + 3_000_000, true, at)
            .await
            .unwrap();
    }
    store
        .insert_model("TIC-402", &model(0.5, 300.0, 30.0), W48_MS - 86_400_000)
        .await
        .unwrap();
    simulated_change(
        &store,
        "TIC-402",
        at,
        Process {
            gain: 0.5,
            time_constant_s: 300.0,
            second_time_constant_s: 0.0,
            dead_time_s: 30.0,
            bias: 50.0 - 0.5 * 72.0,
        },
        PiController {
            gain: 4.0,
            integral_time_s: 300.0,
            op_min: 0.0,
            op_max: 100.0,
        },
        50.0,
        70.0,
    )
    .await;
    store.close().await;

    let mut texts = Vec::new();
    for format in ["json", "md", "html"] {
        let (code, out, err) = week_report(&config, &db, "2026-W48", format);
        assert_eq!(code, 0, "{err}");
        assert!(not_a_number_words(&out).is_empty(), "{format}: {out}");
        texts.push(out);
    }
    let [json, md, html] = [&texts[0], &texts[1], &texts[2]];
    let json: Value = serde_json::from_str(json).unwrap();
    let listed = &loop_json(&json, "TIC-401")["unreachable"];
    assert_eq!(listed.as_array().unwrap().len(), 1, "{listed}");
    let short =
        "with the OP held at its limit the PV moves at most 14.0 °C, and 20.0 °C were needed";
    for (name, text) in [("md", md), ("html", html)] {
        assert!(text.contains("Unreachable changes"), "{name}");
        assert!(text.contains(short), "{name}");
        assert!(
            text.contains("never settled in its 50.0 min window"),
            "{name}"
        );
    }
    // The plot of TIC-402's change draws the OP held at its limit levelling off 14 °C above
    // the start, and says there is no t*.
    check_html(html);
    assert!(
        html.contains("levels off at 64.0 °C, short of the SP (unreachable, no t*)"),
        "the plot's legend"
    );
    assert!(
        html.contains("no t*: unreachable with today's OP limit"),
        "caption"
    );
}
