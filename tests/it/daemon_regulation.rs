//! Regulation live, end to end against a real Mosquitto: a held setpoint meets a load beyond
//! what the valve can counter, then a cycling spell; the daemon raises an
//! `actuator_limited_disturbance` alert (on the alert topic while it lasts and once it is over,
//! one alert for the one disturbance) and an `oscillation` alert that returns once the cycling
//! stops, and `headroom alerts` lists them in the product's words.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, Spy, SpyOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopRig, TestConfig, TestLoop, eventually, headroom, open_store, unique,
    wait_for_samples,
};
use crate::common::plant::{messages, recent_past_ms};
use headroom::analysis::sim::{LoopSim, LoopSimConfig, PiController, SimSample};
use serde_json::Value;
use std::time::Duration;

const TAG: &str = "TIC-120";

/// Runs `sim` at a held SP of 50 °C until `to_s`, with `load(t)` added to the PV, a sample
/// every 2 s; the samples' times continue from `offset_s`.
fn held(sim: &mut LoopSim, to_s: f64, offset_s: f64, load: impl Fn(f64) -> f64) -> Vec<SimSample> {
    let every = (2.0 / sim.config().step_s).round() as u64;
    let mut out = Vec::new();
    let mut k = 0u64;
    while sim.time_s() < to_s {
        sim.disturbance = load(sim.time_s());
        if k.is_multiple_of(every) {
            out.push(SimSample {
                time_s: sim.time_s() + offset_s,
                sp: 50.0,
                pv: sim.pv(),
                op: sim.op(),
            });
        }
        sim.advance(50.0);
        k += 1;
    }
    out
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_load_beyond_the_valve_and_a_cycling_spell_raise_their_alerts_live() {
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let rig = LoopRig::with(TestConfig::new(broker.port(), "regulation"), TAG, |l| {
        TestLoop {
            op_max: 60.0,
            settle_within_s: 600.0,
            ..l
        }
    });
    let spy = Spy::start(
        broker.port(),
        SpyOptions {
            client_id: unique("spy"),
            filters: vec![rig.cfg.alert_topic.clone()],
            clean_session: true,
        },
    )
    .await;
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    // The jacketed vessel (K 0.8 °C/%, τ 300 s, θ 30 s, ambient 20 °C) held at 50 °C on a
    // 0–60 % valve: from 1000 s to 3000 s a −25 °C load needs 68.75 % to hold, so the valve
    // sits at 60 % and the PV at about 43 °C. Then the gain is raised to about the ultimate
    // gain (Kc 20 %/°C) and the loop cycles for an hour; then calm again for an hour.
    let mut calm = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 21));
    let mut samples = held(&mut calm, 4000.0, 0.0, |t| {
        if (1000.0..3000.0).contains(&t) {
            -25.0
        } else {
            0.0
        }
    });
    let mut cycling = LoopSimConfig::jacketed_vessel(60.0, 22);
    cycling.controller = PiController {
        gain: 20.0,
        integral_time_s: 240.0,
        op_min: 0.0,
        op_max: 60.0,
    };
    let next = samples.last().unwrap().time_s + 2.0;
    samples.extend(held(&mut LoopSim::new(cycling), 3600.0, next, |t| {
        if t > 100.0 { -1.0 } else { 0.0 }
    }));
    let next = samples.last().unwrap().time_s + 2.0;
    let mut after = LoopSim::new(LoopSimConfig::jacketed_vessel(60.0, 23));
    samples.extend(held(&mut after, 3600.0, next, |_| 0.0));

    let t0_ms = recent_past_ms(4 * 3600);
    let (msgs, keys) = messages(TAG, &rig.topics, t0_ms, &samples);
    publish_all(broker.port(), &msgs, PublishOptions::new(unique("gateway"))).await;
    wait_for_samples(&rig.db, keys.len(), Duration::from_secs(120)).await;
    let published: Vec<Value> = eventually(
        "the disturbance over and the oscillation returned on the alert topic",
        Duration::from_secs(60),
        async || {
            let alerts: Vec<Value> = spy
                .received()
                .into_iter()
                .map(|m| serde_json::from_slice(&m.payload).expect("an alert is JSON"))
                .collect();
            let over = alerts.iter().any(|a| {
                a["kind"] == "actuator_limited_disturbance" && a["evidence"]["ongoing"] == false
            });
            let returned = alerts
                .iter()
                .any(|a| a["kind"] == "oscillation" && a["state"] == "returned");
            if over && returned {
                Ok(alerts)
            } else {
                Err(format!("alerts so far: {alerts:#?}"))
            }
        },
    )
    .await;
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");

    // One alert for the one disturbance, raised while it lasted, with the numbers behind it.
    let disturbance: Vec<&Value> = published
        .iter()
        .filter(|a| a["kind"] == "actuator_limited_disturbance")
        .collect();
    let ids: std::collections::BTreeSet<String> =
        disturbance.iter().map(|a| a["id"].to_string()).collect();
    assert_eq!(ids.len(), 1, "{disturbance:#?}");
    assert_eq!(
        disturbance[0]["evidence"]["ongoing"], true,
        "{disturbance:#?}"
    );
    let last = disturbance.last().unwrap();
    let start_ms = t0_ms + 1_000_000;
    let change_start = last["change_start"].as_str().unwrap();
    let at: jiff::Timestamp = change_start.parse().unwrap();
    assert!(
        (at.as_millisecond() - start_ms).abs() <= 120_000,
        "starts with the load: {change_start}"
    );
    let peak = last["evidence"]["peak_deviation"].as_f64().unwrap();
    // The load steps the PV by −25 °C at once; the valve then wins back what 60 % allows.
    assert!((-27.0..-23.0).contains(&peak), "{last:#?}");
    assert!(last["evidence"]["op_at_limit_frac"].as_f64().unwrap() > 0.5);
    assert!(
        last["message"].as_str().unwrap().contains("from SP"),
        "{last:#?}"
    );

    // The oscillation: raised once with its period near the vessel's ultimate period
    // (about 2 min), returned after the calm hour.
    let osc: Vec<&Value> = published
        .iter()
        .filter(|a| a["kind"] == "oscillation")
        .collect();
    let period = osc[0]["evidence"]["period_s"].as_f64().unwrap();
    assert!((80.0..200.0).contains(&period), "{osc:#?}");
    let osc_ids: std::collections::BTreeSet<String> =
        osc.iter().map(|a| a["id"].to_string()).collect();
    assert_eq!(osc_ids.len(), 1, "{osc:#?}");

    // The store and `headroom alerts` agree, in the product's words.
    let store = open_store(&rig.db).await;
    let stored = store.alerts(false).await.expect("read alerts");
    store.close().await;
    let kinds: Vec<&str> = stored.iter().map(|a| a.kind.as_str()).collect();
    assert!(kinds.contains(&"actuator_limited_disturbance"), "{kinds:?}");
    assert!(kinds.contains(&"oscillation"), "{kinds:?}");
    let listing = headroom(["alerts", "--db", rig.db.to_str().unwrap()]).await;
    assert!(
        listing.contains("actuator-limited disturbance"),
        "{listing}"
    );
    assert!(listing.contains("oscillation"), "{listing}");
}
