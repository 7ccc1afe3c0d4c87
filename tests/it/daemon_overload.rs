//! Overload: four publishers push 20,000 messages each as fast as the broker takes them, far
//! faster than the daemon commits. The broker is set up as check-config asks
//! (`max_queued_messages 0`, no limit; `max_inflight_messages 1000`), so the backlog waits at the
//! broker and the daemon works through it at its own pace: nothing is lost.
//!
//! With Mosquitto's defaults (`max_queued_messages 1000`, `max_inflight_messages 20`) the same
//! run loses most of the data: the broker acknowledges every publish, queues at most 1,000
//! messages for a subscriber that lags and silently drops the rest (about 70 % of QoS 1
//! messages in the stack measurements, STACK-NOTES §5). Nothing tells the daemon that those
//! messages ever existed, which is why the broker settings are a documented requirement.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{Message, PublishOptions, publish};
use crate::common::daemon::{
    DaemonProcess, LoopTopics, SampleKey, TestConfig, TestLoop, Workspace, sample_count,
    stored_keys, unique, wait_for_samples,
};
use crate::common::plant::{json_sample, recent_past_ms};
use headroom::sample::Signal;
use std::collections::BTreeSet;
use std::time::Duration;

const PUBLISHERS: usize = 4;
const PER_PUBLISHER: usize = 20_000;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn publishers_outrunning_the_writer_lose_nothing() {
    let broker = Mosquitto::start(BrokerOptions {
        max_queued_messages: Some(0),
        ..BrokerOptions::default()
    })
    .await;
    let ws = Workspace::new("overload");
    let prefix = format!("plant/{}", unique("overload"));
    let mut cfg = TestConfig::new(broker.port(), "overload");
    let tags: Vec<String> = (1..=PUBLISHERS).map(|i| format!("FIC-70{i}")).collect();
    for tag in &tags {
        cfg.loops
            .push(TestLoop::new(tag, LoopTopics::new(&prefix, tag)));
    }
    let config = ws.write_config(&cfg);
    let db = ws.db_path();
    let mut daemon = DaemonProcess::start_subscribed(&config).await;

    // Each publisher is one loop's gateway: sp, pv, op in turn, a second apart per signal.
    let t0 = recent_past_ms(12 * 3600);
    let mut expected: BTreeSet<SampleKey> = BTreeSet::new();
    let mut streams: Vec<Vec<Message>> = Vec::new();
    for tag in &tags {
        let topics = LoopTopics::new(&prefix, tag);
        let mut msgs = Vec::with_capacity(PER_PUBLISHER);
        for k in 0..PER_PUBLISHER {
            let signal = [Signal::Sp, Signal::Pv, Signal::Op][k % 3];
            let t = t0 + 1_000 * (k / 3) as i64;
            msgs.push((
                topics.of(signal).to_string(),
                json_sample(40.0 + (k % 11) as f64, t),
            ));
            expected.insert((tag.clone(), signal, t));
        }
        streams.push(msgs);
    }
    assert_eq!(expected.len(), PUBLISHERS * PER_PUBLISHER);

    let port = broker.port();
    let tasks: Vec<_> = streams
        .into_iter()
        .map(|msgs| {
            tokio::spawn(async move {
                let p = publish(
                    port,
                    &msgs,
                    PublishOptions {
                        deadline: Duration::from_secs(150),
                        ..PublishOptions::new(unique("gateway"))
                    },
                )
                .await;
                (p.acked_count(), msgs.len())
            })
        })
        .collect();
    for t in tasks {
        let (acked, sent) = t.await.expect("a publisher task");
        assert_eq!(acked, sent, "the broker acknowledged every publish");
    }
    // How far behind the daemon was when the last publisher finished (for the curious; the
    // backlog depends on the machine).
    eprintln!(
        "when publishing ended, {} of {} samples were stored",
        sample_count(&db).await.unwrap_or(0),
        expected.len()
    );

    wait_for_samples(&db, expected.len(), Duration::from_secs(150)).await;
    assert!(daemon.sigterm().await.success());
    let tag_refs: Vec<&str> = tags.iter().map(String::as_str).collect();
    let stored = stored_keys(&db, &tag_refs).await.expect("read the store");
    assert!(
        stored == expected,
        "the stored samples are not the published ones"
    );
}
