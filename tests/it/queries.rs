//! The store query commands as users meet them: `loops`, `episodes`, `alerts` (and `--ack`),
//! `export`, on a store filled through the store's own API.

use crate::common::run_headroom_text as run;
use crate::common::sim::{series, store_samples};
use headroom::analysis::sim::{LoopSim, LoopSimConfig};
use headroom::analysis::{AnalysisOptions, LoopSetup, OpRange, Spec, analyze_loop};
use headroom::store::{AlertInput, Store};

/// A store with two hours of one simulated loop, its episodes and one alert.
async fn filled_store(path: &std::path::Path) -> (Store, i64) {
    let store = Store::open(path).await.unwrap();
    let mut sim = LoopSim::new(LoopSimConfig {
        step_s: 0.5,
        noise_sd: 0.0,
        ..LoopSimConfig::jacketed_vessel(100.0, 1)
    });
    let rows = sim.run(&[(600.0, 55.0), (4200.0, 52.0)], 7200.0, 5.0);
    let origin = jiff::Timestamp::now().as_millisecond() - 3 * 3_600_000;
    let samples = store_samples("TIC-9", &rows, |r| origin + (r.time_s * 1000.0) as i64);
    store.insert_samples(&samples).await.unwrap();
    let series = series(&rows, origin as f64 / 1000.0);
    let report = analyze_loop(
        &series,
        &LoopSetup {
            units: headroom::analysis::Units::default(),
            controller: None,
            actuator: None,
            tag: "TIC-9".into(),
            op: OpRange {
                min: 0.0,
                max: 100.0,
            },
            spec: Spec {
                settle_band_pct: 2.0,
                settle_band: None,
                settle_within_s: 900.0,
                max_overshoot_pct: None,
                hold_band: None,
                recover_within_s: None,
            },
            options: AnalysisOptions::default(),
        },
    );
    assert_eq!(report.episodes.len(), 2);
    for e in &report.episodes {
        let start = (e.start_s * 1000.0) as i64;
        store
            .upsert_episode("TIC-9", e, start, (e.end_s * 1000.0) as i64, true, start)
            .await
            .unwrap();
    }
    if let Some(m) = &report.model {
        store.insert_model("TIC-9", m, origin).await.unwrap();
    }
    let alert = store
        .raise_alert(AlertInput {
            loop_tag: "TIC-9".into(),
            kind: "stale_tag".into(),
            message: "TIC-9: no pv sample".into(),
            evidence: serde_json::json!({"pv": {"last_sample": null}}),
            seen_ms: origin,
            since_ms: None,
            change_start_ms: None,
        })
        .await
        .unwrap();
    (store, alert.id)
}

#[tokio::test]
async fn query_commands_show_and_acknowledge_what_the_store_holds() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("q.db");
    let (store, alert_id) = filled_store(&db).await;
    store.close().await;
    let db_s = db.to_str().unwrap();

    let (code, out, err) = run(&["loops", "--db", db_s]);
    assert_eq!(code, 0, "{err}");
    assert!(
        out.contains("TIC-9") && out.contains("alerts not acknowledged: 1"),
        "{out}"
    );
    assert!(
        out.contains("model:        gain 0.7") || out.contains("model:        gain 0.8"),
        "{out}"
    );

    let (code, out, err) = run(&["episodes", "--db", db_s, "--loop", "TIC-9", "--json"]);
    assert_eq!(code, 0, "{err}");
    let eps: serde_json::Value = serde_json::from_str(&out).unwrap();
    let eps = eps.as_array().unwrap();
    assert_eq!(eps.len(), 2);
    assert_eq!(eps[0]["loop"], "TIC-9");
    assert_eq!(eps[0]["sp_to"], 55.0);
    assert!(eps[0]["start_time"].as_str().unwrap().ends_with('Z'));
    for k in [
        "settling_time_s",
        "overshoot_pct",
        "rise_time_s",
        "verdict",
        "min_settling_time_s",
    ] {
        assert!(eps[0].get(k).is_some(), "{k} missing");
    }
    // --since drops the first change (3 h ago + 600 s) but keeps the second (+4200 s).
    let (_, out, _) = run(&["episodes", "--db", db_s, "--since", "2h", "--json"]);
    let later: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(later.as_array().unwrap().len(), 1, "{out}");
    assert_eq!(later[0]["sp_to"], 52.0);

    let (code, out, _) = run(&["alerts", "--db", db_s, "--open", "--json"]);
    assert_eq!(code, 0);
    let open: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(open.as_array().unwrap().len(), 1);
    assert_eq!(open[0]["kind"], "stale_tag");

    let id = alert_id.to_string();
    let (code, out, err) = run(&["alerts", "--db", db_s, "--ack", &id]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("acknowledged"), "{out}");
    let (_, out, _) = run(&["alerts", "--db", db_s, "--open", "--json"]);
    assert_eq!(
        serde_json::from_str::<serde_json::Value>(&out).unwrap(),
        serde_json::json!([])
    );
    // Acknowledged alerts are listed with --all only.
    let (_, out, _) = run(&["alerts", "--db", db_s, "--json"]);
    assert_eq!(
        serde_json::from_str::<serde_json::Value>(&out).unwrap(),
        serde_json::json!([])
    );
    let (_, out, _) = run(&["alerts", "--db", db_s, "--all", "--json"]);
    let all: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(all[0]["state"], "acknowledged");
    // Acknowledging it again says there is no such open alert.
    let (code, _, err) = run(&["alerts", "--db", db_s, "--ack", &id]);
    assert_eq!(code, 2, "{err}");

    // The export reads back as the same loop: analyze finds the same two changes.
    let (code, csv, err) = run(&["export", "--db", db_s, "--loop", "TIC-9"]);
    assert_eq!(code, 0, "{err}");
    let file = dir.path().join("tic9.csv");
    std::fs::write(&file, csv).unwrap();
    let (code, out, err) = run(&[
        "analyze",
        file.to_str().unwrap(),
        "--settle-within-s",
        "900",
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["episodes"].as_array().unwrap().len(), 2);
    assert_eq!(
        v["episodes"][0]["settling_time_s"],
        eps[0]["settling_time_s"]
    );
}

#[test]
fn a_store_that_does_not_exist_is_named_in_the_error() {
    let (code, _, err) = run(&["loops", "--db", "/nonexistent/dir/h.db"]);
    assert_eq!(code, 2);
    assert!(err.contains("/nonexistent/dir/h.db"), "{err}");
}
