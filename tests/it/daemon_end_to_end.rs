//! The daemon end to end against a real Mosquitto: an hour of simulated loop data goes in over
//! MQTT; every sample comes out of the store, the live verdicts equal the offline analysis of
//! the store's own export, the missed setpoint change raises an alert in the store and on the
//! alert topic, and the daemon publishes nowhere but its own alert and status topics.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, Spy, SpyOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopRig, TestConfig, TestLoop, assert_live_matches_offline, episode_line,
    eventually, headroom, open_store, stored_keys, unique, wait_for_samples,
};
use crate::common::plant::{messages, recent_past_ms, vessel};
use serde_json::Value;
use std::collections::BTreeSet;
use std::time::Duration;

const TAG: &str = "TIC-101";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_hour_of_data_is_stored_scored_as_offline_and_alerted_only_on_its_own_topics() {
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let rig = LoopRig::with(TestConfig::new(broker.port(), "e2e"), TAG, |l| TestLoop {
        op_max: 60.0,
        settle_within_s: 900.0,
        max_overshoot_pct: Some(15.0),
        ..l
    });

    // The spy listens to everything before the daemon exists, so it sees all it publishes.
    let spy = Spy::start(
        broker.port(),
        SpyOptions {
            client_id: unique("spy"),
            filters: vec!["#".into()],
            clean_session: true,
        },
    )
    .await;
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    // An hour at one sample per 2 s. The vessel's PV tops out at 68 °C with the valve fully
    // open, so the step to 75 °C at 2300 s cannot be met: that is the miss. The other steps
    // settle within the 900 s spec.
    let schedule = [
        (300.0, 55.0),
        (1300.0, 47.0),
        (2300.0, 75.0),
        (3300.0, 52.0),
    ];
    let samples = vessel(60.0, 11).run(&schedule, 3600.0, 2.0);
    let t0_ms = recent_past_ms(2 * 3600);
    let (msgs, keys) = messages(TAG, &rig.topics, t0_ms, &samples);
    let published = publish_all(broker.port(), &msgs, PublishOptions::new(unique("gateway"))).await;
    wait_for_samples(&rig.db, keys.len(), Duration::from_secs(90)).await;
    let alert: Value = eventually(
        "the unreachable alert on the alert topic",
        Duration::from_secs(60),
        async || {
            let alerts: Vec<Value> = spy
                .received()
                .into_iter()
                .filter(|m| m.topic == rig.cfg.alert_topic)
                .map(|m| serde_json::from_slice(&m.payload).expect("an alert is JSON"))
                .collect();
            alerts
                .iter()
                .find(|a| a["kind"] == "unreachable")
                .cloned()
                .ok_or_else(|| format!("alerts so far: {alerts:#?}"))
        },
    )
    .await;
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");

    // Every sample, exactly the published ones.
    let stored = stored_keys(&rig.db, &[TAG]).await.expect("read the store");
    let expected: BTreeSet<_> = keys.iter().cloned().collect();
    assert_eq!(stored.len(), expected.len());
    assert!(
        stored == expected,
        "the stored keys differ from the published ones"
    );

    // The live verdicts equal the offline analysis of the store's own export, for every
    // episode the live tracker finalised (the last window is still open at the end of data).
    let live: Vec<Value> =
        serde_json::from_str(&headroom(["episodes", "--db", path(&rig.db), "--json"]).await)
            .expect("episodes --json is JSON");
    let finals: Vec<&Value> = live.iter().filter(|e| e["final"] == true).collect();
    let live_list: Vec<String> = live.iter().map(episode_line).collect();
    assert!(
        finals.len() >= 3,
        "the first three setpoint changes are final; live: {live_list:#?}"
    );
    assert_live_matches_offline(&rig.ws, &rig.db, &rig.config, TAG, &finals).await;
    let missed: Vec<&Value> = finals
        .iter()
        .copied()
        .filter(|e| e["sp_to"] == 75.0)
        .collect();
    assert_eq!(missed.len(), 1, "live: {live_list:#?}");
    let miss = missed[0];
    assert_eq!(
        miss["verdict"],
        "unreachable",
        "75 °C is beyond the 68 °C the open valve can reach: {}",
        episode_line(miss)
    );
    assert!(miss["settling_time_s"].is_null());

    // The miss is an alert in the store...
    let store = open_store(&rig.db).await;
    let alerts = store.alerts(false).await.expect("read alerts");
    store.close().await;
    assert!(
        alerts
            .iter()
            .any(|a| a.loop_tag == TAG && a.kind == "unreachable"),
        "no unreachable alert in {alerts:#?}"
    );
    assert!(
        !alerts
            .iter()
            .any(|a| a.kind == "tuning_limited" || a.kind == "actuator_limited"),
        "the steps that met their spec raised an alert: {alerts:#?}"
    );
    // ...and was published as JSON on the alert topic.
    assert_eq!(alert["loop"], TAG, "{alert}");
    assert_eq!(alert["evidence"]["sp_to"], 75.0, "{alert}");

    // Read-only toward the plant: on the loop's topics the spy saw exactly what the gateway
    // published (so nothing was written to the plant's topics, a setpoint least of all), and
    // everything else came from the daemon, on its alert and status topics only.
    assert_eq!(
        published.connections, 1,
        "the gateway reconnected, so it may have sent duplicates"
    );
    let gateway: BTreeSet<&str> = rig.topics.all().into_iter().collect();
    let received = eventually(
        "the spy to receive every gateway message",
        Duration::from_secs(60),
        async || {
            let received = spy.received();
            let n = received
                .iter()
                .filter(|m| gateway.contains(m.topic.as_str()))
                .count();
            if n >= msgs.len() {
                Ok(received)
            } else {
                Err(format!("{n} of {}", msgs.len()))
            }
        },
    )
    .await;
    let mut on_plant_topics: Vec<(&str, &[u8])> = received
        .iter()
        .filter(|m| gateway.contains(m.topic.as_str()))
        .map(|m| (m.topic.as_str(), m.payload.as_slice()))
        .collect();
    let mut sent: Vec<(&str, &[u8])> = msgs
        .iter()
        .map(|(t, p)| (t.as_str(), p.as_slice()))
        .collect();
    on_plant_topics.sort_unstable();
    sent.sort_unstable();
    assert!(
        on_plant_topics == sent,
        "the spy saw {} messages on the plant's topics, the gateway sent {}",
        on_plant_topics.len(),
        sent.len()
    );
    let daemon_topics: BTreeSet<&str> = received
        .iter()
        .map(|m| m.topic.as_str())
        .filter(|t| !gateway.contains(t))
        .collect();
    let own: BTreeSet<&str> = [rig.cfg.alert_topic.as_str(), rig.cfg.status_topic.as_str()].into();
    assert!(
        daemon_topics.is_subset(&own),
        "the daemon published outside its own topics: {daemon_topics:?}"
    );
}

fn path(p: &std::path::Path) -> &str {
    p.to_str().expect("UTF-8 temp path")
}
