//! Graceful shutdown: SIGTERM right after a burst, while the daemon is still working through
//! it. The daemon must commit what it has received, acknowledge exactly what it committed,
//! disconnect and exit 0. What it had not committed stays with the broker, under its session:
//! a client that resumes that session receives it.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, Spy, SpyOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopRig, LoopTopics, SampleKey, eventually, stored_keys, unique,
};
use crate::common::plant::{messages, recent_past_ms, vessel};
use headroom::sample::Signal;
use std::collections::BTreeSet;
use std::time::Duration;

const TAG: &str = "LIC-401";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_after_a_burst_commits_and_acknowledges_exactly_what_arrived() {
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let rig = LoopRig::new(broker.port(), "shutdown", TAG);
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    // A burst of 15,003 messages, as fast as the broker takes them.
    let samples = vessel(100.0, 3).run(&[(1000.0, 58.0)], 10_000.0, 2.0);
    let (msgs, keys) = messages(TAG, &rig.topics, recent_past_ms(4 * 3600), &samples);
    publish_all(broker.port(), &msgs, PublishOptions::new(unique("gateway"))).await;
    let status = daemon.sigterm().await;
    assert_eq!(status.code(), Some(0), "the daemon's exit after SIGTERM");

    let stored = stored_keys(&rig.db, &[TAG]).await.expect("read the store");
    eprintln!(
        "{} of {} samples were committed before the daemon stopped",
        stored.len(),
        keys.len()
    );

    // Resume the daemon's session: the broker hands over everything the daemon did not
    // acknowledge. Together with the store that must be the whole burst...
    let spy = Spy::start(
        broker.port(),
        SpyOptions {
            client_id: rig.cfg.client_id.clone(),
            filters: Vec::new(),
            clean_session: false,
        },
    )
    .await;
    let burst: BTreeSet<SampleKey> = keys.iter().cloned().collect();
    let redelivered = eventually(
        "the store and the redelivered messages to cover the burst",
        Duration::from_secs(60),
        async || {
            let redelivered: BTreeSet<SampleKey> = spy
                .received()
                .iter()
                .map(|m| key_of(&rig.topics, &m.topic, &m.payload))
                .collect();
            let covered = burst
                .iter()
                .filter(|k| stored.contains(*k) || redelivered.contains(*k))
                .count();
            if covered == burst.len() {
                Ok(redelivered)
            } else {
                Err(format!(
                    "{} stored + {} redelivered cover {covered} of {}",
                    stored.len(),
                    redelivered.len(),
                    burst.len()
                ))
            }
        },
    )
    .await;
    // ...and nothing committed comes back: the daemon acknowledged all it had committed
    // before it disconnected.
    let both: Vec<&SampleKey> = stored.intersection(&redelivered).collect();
    assert!(
        both.is_empty(),
        "{} committed samples were not acknowledged, e.g. {:?}",
        both.len(),
        both.first()
    );
    assert!(stored.is_subset(&burst));
}

/// The store key a gateway message becomes.
fn key_of(topics: &LoopTopics, topic: &str, payload: &[u8]) -> SampleKey {
    let signal = [Signal::Sp, Signal::Pv, Signal::Op]
        .into_iter()
        .find(|s| topics.of(*s) == topic)
        .unwrap_or_else(|| panic!("a message on an unexpected topic {topic}"));
    let v: serde_json::Value = serde_json::from_slice(payload).expect("JSON sample");
    let time = v["time"].as_i64().expect("a time in ms");
    (TAG.to_string(), signal, time)
}
