//! A storm of bad input interleaved with good: garbage, NaN, oversized payloads, timestamps in
//! the future or in epoch seconds, half-bad batches, and — after a loop is dropped from the
//! config while the broker keeps the daemon's old subscriptions — messages for a loop the daemon
//! no longer knows. Every valid sample is stored, every bad message is counted under its reason,
//! and the daemon keeps running without flooding its log.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{Message, PublishOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopRig, LoopTopics, TestConfig, TestLoop, Workspace, eventually, open_store,
    stored_keys, unique,
};
use crate::common::plant::{Rng, json_sample, recent_past_ms, seed};
use headroom::sample::Signal;
use headroom::store::Store;
use std::collections::{BTreeMap, BTreeSet};
use std::time::Duration;

const TAG: &str = "FIC-601";
const DROPPED: &str = "FIC-602";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bad_payloads_are_counted_by_reason_and_every_valid_sample_is_stored() {
    let seed = seed(0xbad_0601);
    let mut rng = Rng::new(seed);
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let ws = Workspace::new("malformed");
    let prefix = format!("plant/{}", unique("malformed"));
    let topics = LoopTopics::new(&prefix, TAG);
    let dropped_topics = LoopTopics::new(&prefix, DROPPED);
    let mut cfg = TestConfig::new(broker.port(), "malformed");
    cfg.max_payload_bytes = Some(1024);
    cfg.max_future_s = 120;
    // The PV arrives from redundant transmitters, one subtopic each, under a wildcard filter.
    let pv_filter = format!("{}/+", topics.pv);
    cfg.loops.push(TestLoop {
        pv_filter: Some(pv_filter.clone()),
        ..TestLoop::new(TAG, topics.clone())
    });
    cfg.loops
        .push(TestLoop::new(DROPPED, dropped_topics.clone()));
    let config = ws.write_config(&cfg);
    let db = ws.db_path();
    let mut daemon = DaemonProcess::start_subscribed(&config).await;

    let t0 = recent_past_ms(3600);
    let pv_a = format!("{}/tt-a", topics.pv);
    let pv_b = format!("{}/tt-b", topics.pv);
    let mut valid: Vec<Message> = Vec::new();
    let mut valid_keys: BTreeSet<(String, Signal, i64)> = BTreeSet::new();
    for k in 0..1_000i64 {
        let t = t0 + 2_000 * k;
        for (topic, signal) in [
            (topics.sp.clone(), Signal::Sp),
            (topics.op.clone(), Signal::Op),
            (
                if k % 2 == 0 {
                    pv_a.clone()
                } else {
                    pv_b.clone()
                },
                Signal::Pv,
            ),
        ] {
            valid.push((topic, json_sample(50.0 + (k % 7) as f64, t)));
            valid_keys.insert((TAG.into(), signal, t));
        }
        // Every tenth step the transmitter also sends a batch of intermediate PV readings.
        if k % 10 == 0 {
            let batch: Vec<serde_json::Value> = (1..=3)
                .map(|j| serde_json::json!({ "value": 50.0 + j as f64, "time": t + 500 * j }))
                .collect();
            valid.push((pv_a.clone(), serde_json::to_vec(&batch).unwrap()));
            for j in 1..=3 {
                valid_keys.insert((TAG.into(), Signal::Pv, t + 500 * j));
            }
        }
    }

    let future = jiff::Timestamp::now().as_millisecond() + 86_400_000;
    let mut bad: Vec<(Message, &str)> = Vec::new();
    let mut add = |n: usize, reason: &'static str, make: &mut dyn FnMut(usize) -> Message| {
        for i in 0..n {
            bad.push((make(i), reason));
        }
    };
    let mut garbage_rng = Rng::new(seed ^ 0xfeed);
    add(600, "malformed_payload", &mut |i| {
        let len = 1 + garbage_rng.below(200);
        let bytes: Vec<u8> = (0..len).map(|_| garbage_rng.next_u64() as u8).collect();
        (topic_for(&topics, &pv_a, i), bytes)
    });
    add(300, "malformed_payload", &mut |i| {
        let p = [
            "{\"val\": 1}",
            "\"64.5\"",
            "{\"value\": \"high\"}",
            "64.5",
            "[1, 2]",
            "",
        ][i % 6];
        (topic_for(&topics, &pv_b, i), p.as_bytes().to_vec())
    });
    // A batch with one bad element is refused whole, and counted once.
    add(100, "malformed_payload", &mut |i| {
        let p = format!(
            r#"[{{"value": 1, "time": {}}}, {{"value": "x"}}]"#,
            t0 + i as i64
        );
        (pv_a.clone(), p.into_bytes())
    });
    add(400, "not_finite", &mut |i| {
        let p = [
            r#"{"value": NaN, "time": 1796000000000}"#,
            r#"{"value": null}"#,
            r#"{"value": "Infinity"}"#,
            r#"{"value": -Infinity}"#,
        ][i % 4];
        (topic_for(&topics, &pv_a, i), p.as_bytes().to_vec())
    });
    add(300, "oversized_payload", &mut |i| {
        let mut p = json_sample(1.0, t0);
        p.resize(2_000, b' ');
        (topic_for(&topics, &pv_b, i), p)
    });
    add(500, "future_timestamp", &mut |i| {
        (
            topic_for(&topics, &pv_a, i),
            json_sample(1.0, future + i as i64),
        )
    });
    // Epoch seconds where milliseconds belong.
    add(300, "bad_timestamp", &mut |i| {
        (
            topic_for(&topics, &pv_b, i),
            json_sample(1.0, t0 / 1000 + i as i64),
        )
    });
    let mut expected: BTreeMap<&str, u64> = BTreeMap::new();
    for (_, reason) in &bad {
        *expected.entry(*reason).or_default() += 1;
    }
    let bad_total = bad.len() as u64;

    // Interleave: each bad message goes in at a random place among the valid ones.
    let mut storm: Vec<Message> = valid.clone();
    for (m, _) in bad {
        let at = rng.below(storm.len() + 1);
        storm.insert(at, m);
    }
    publish_all(
        broker.port(),
        &storm,
        PublishOptions::new(unique("gateway")),
    )
    .await;

    eventually(
        "every valid sample stored and every bad message counted",
        Duration::from_secs(90),
        async || {
            let stored = stored_keys(&db, &[TAG]).await?;
            let counted: u64 = rejections(&db).await?.values().sum();
            if stored.len() == valid_keys.len() && counted == bad_total {
                Ok(())
            } else {
                Err(format!(
                    "{} of {} samples stored, {counted} of {bad_total} rejections counted",
                    stored.len(),
                    valid_keys.len()
                ))
            }
        },
    )
    .await;
    assert!(stored_keys(&db, &[TAG]).await.unwrap() == valid_keys);
    assert_eq!(rejections(&db).await.unwrap(), expected);
    assert!(daemon.is_running(), "the storm stopped the daemon");
    let log = daemon.log();
    let lines = log.lines().filter(|l| l.contains("rejected input")).count();
    assert!(
        lines < 50,
        "{lines} log lines for {bad_total} rejections: the log is not rate-limited"
    );
    assert!(daemon.sigterm().await.success());

    // The second loop leaves the config. The broker still holds the daemon's session with that
    // loop's subscriptions, so its messages keep arriving: each is an unknown topic, counted.
    cfg.loops.retain(|l| l.tag == TAG);
    let config = ws.write_config(&cfg);
    let mut daemon = DaemonProcess::start(&config);
    daemon
        .wait_for_log("connected to the MQTT broker", Duration::from_secs(30))
        .await;
    let t1 = t0 + 2_000 * 1_000;
    let mut late: Vec<Message> = Vec::new();
    for k in 0..100i64 {
        for topic in dropped_topics.all() {
            late.push((topic.to_string(), json_sample(1.0, t1 + 2_000 * k)));
        }
        late.push((topics.sp.clone(), json_sample(55.0, t1 + 2_000 * k)));
    }
    publish_all(broker.port(), &late, PublishOptions::new(unique("gateway"))).await;
    *expected.entry("unknown_topic").or_default() += 300;
    eventually(
        "the unknown topics counted",
        Duration::from_secs(60),
        async || {
            let now = rejections(&db).await?;
            let sp = stored_keys(&db, &[TAG]).await?.len();
            if now == expected && sp == valid_keys.len() + 100 {
                Ok(())
            } else {
                Err(format!("{now:?}, {sp} samples"))
            }
        },
    )
    .await;
    assert!(daemon.sigterm().await.success());
    let store = open_store(&db).await;
    assert!(
        store
            .samples(DROPPED, Signal::Sp, i64::MIN, i64::MAX)
            .await
            .unwrap()
            .is_empty(),
        "nothing of the dropped loop is stored"
    );
    store.close().await;
}

/// Spreads bad messages over the loop's sp, op and a pv subtopic.
fn topic_for(topics: &LoopTopics, pv: &str, i: usize) -> String {
    match i % 3 {
        0 => topics.sp.clone(),
        1 => topics.op.clone(),
        _ => pv.to_string(),
    }
}

/// Rejection counts by reason, summed over sources.
async fn rejections(db: &std::path::Path) -> Result<BTreeMap<&'static str, u64>, String> {
    let store = Store::open_read_only(db).await.map_err(|e| e.to_string())?;
    let rows = store.rejections().await.map_err(|e| e.to_string());
    store.close().await;
    let mut by_reason = BTreeMap::new();
    for r in rows? {
        let reason = headroom::mqtt::Rejection::REASONS
            .into_iter()
            .find(|x| *x == r.reason)
            .ok_or_else(|| format!("unknown reason {}", r.reason))?;
        *by_reason.entry(reason).or_default() += r.count;
    }
    Ok(by_reason)
}

/// MQTT 3.1.1 cannot tell the broker how large a packet the client accepts, so the broker
/// delivers whatever a publisher sent. A message larger than the MQTT client is set to read must
/// still end as a counted rejection: if reading it broke the connection, the broker would
/// redeliver it on every reconnect and nothing behind it would ever arrive.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_message_bigger_than_any_limit_is_counted_and_does_not_block_the_stream() {
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let rig = LoopRig::new(broker.port(), "huge-payload", TAG);
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    let t0 = recent_past_ms(600);
    let mut msgs: Vec<Message> = Vec::new();
    for k in 0..20i64 {
        if k == 10 {
            // 700 KiB: over the 64 KiB max_payload_bytes and over what the client reads.
            let mut huge = json_sample(1.0, t0 - 1);
            huge.resize(700 * 1024, b' ');
            msgs.push((rig.topics.pv.clone(), huge));
        }
        for t in rig.topics.all() {
            msgs.push((t.to_string(), json_sample(50.0, t0 + 1_000 * k)));
        }
    }
    publish_all(broker.port(), &msgs, PublishOptions::new(unique("gateway"))).await;
    eventually(
        "the samples behind the huge message stored, and it counted",
        Duration::from_secs(30),
        async || {
            let stored = stored_keys(&rig.db, &[TAG]).await?.len();
            let counted = rejections(&rig.db).await?;
            if stored == 60 && counted.get("oversized_payload") == Some(&1) {
                Ok(())
            } else {
                Err(format!(
                    "{stored} of 60 stored, rejections {counted:?}; log:\n{}",
                    crate::common::daemon::tail(&daemon.log(), 6)
                ))
            }
        },
    )
    .await;
    assert!(daemon.sigterm().await.success());
}
