//! The writer task in-process: a temporary SQLite store, no broker, messages fed through its
//! ingest channel and acknowledgements read from its outbound channel.

use super::*;
use rumqttc::{Publish, QoS};

const TAG: &str = "TIC-7";

/// A QoS 1 message with packet id `pkid`, standing for the MQTT message `samples` came from.
fn message(pkid: u16) -> Publish {
    let mut p = Publish::new("plant/TIC-7/pv", QoS::AtLeastOnce, "x");
    p.pkid = pkid;
    p
}

/// `n` PV samples, one per second from `first_s`.
fn pv(first_s: i64, n: usize) -> Vec<Sample> {
    (0..n as i64)
        .map(|i| Sample {
            loop_tag: Arc::from(TAG),
            signal: Signal::Pv,
            ts_ms: (first_s + i) * 1000,
            value: i as f64,
        })
        .collect()
}

fn samples_msg(samples: Vec<Sample>, pkid: u16) -> Ingest {
    Ingest::Samples {
        samples,
        ack: Some(message(pkid)),
    }
}

/// A writer on `store` with no loops, and the receiving end of its outbound channel.
fn writer(store: Store, outbound_capacity: usize) -> (Writer, mpsc::Receiver<Outbound>) {
    let (tx, rx) = mpsc::channel(outbound_capacity);
    let settings = WriterSettings {
        alert_topic: None,
        status_topic: None,
        raw_retention_ms: None,
    };
    let w = Writer::new(store, HashMap::new(), tx, settings, Arc::default());
    (w, rx)
}

async fn temp_store() -> (tempfile::TempDir, Store) {
    let dir = tempfile::tempdir().unwrap();
    let store = Store::open(&dir.path().join("store.db")).await.unwrap();
    (dir, store)
}

async fn stored(store: &Store) -> Vec<(i64, f64)> {
    store
        .samples(TAG, Signal::Pv, i64::MIN, i64::MAX)
        .await
        .unwrap()
}

/// Every message queued before the writer starts, then the channel closed.
fn queued(msgs: Vec<Ingest>) -> mpsc::Receiver<Ingest> {
    let (tx, rx) = mpsc::channel(msgs.len().max(1));
    for m in msgs {
        tx.try_send(m).unwrap();
    }
    rx
}

fn acks(rx: &mut mpsc::Receiver<Outbound>) -> Vec<u16> {
    let mut out = Vec::new();
    while let Ok(o) = rx.try_recv() {
        if let Outbound::Ack(p) = o {
            out.push(p.pkid);
        }
    }
    out
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn many_samples_go_in_few_transactions_of_at_most_the_batch_size() {
    let (_dir, store) = temp_store().await;
    let (w, mut out) = writer(store.clone(), 64);
    // 20 messages of 700 samples, then one message larger than a batch.
    let mut msgs: Vec<Ingest> = (0..20)
        .map(|i| samples_msg(pv(i * 700, 700), i as u16 + 1))
        .collect();
    msgs.push(samples_msg(pv(100_000, 12_000), 99));
    let counters = w.run(queued(msgs)).await.unwrap();

    assert_eq!(counters.samples_committed, 26_000);
    assert_eq!(stored(&store).await.len(), 26_000);
    assert!(
        counters.largest_commit <= MAX_BATCH,
        "a transaction held {} samples",
        counters.largest_commit
    );
    // 14,000 samples in batches of 5,000 or more (each split at 5,000), then 12,000 more: the
    // fewest possible is 6 transactions; one per message would be 21.
    assert!(
        (6..=8).contains(&counters.commits),
        "{} transactions",
        counters.commits
    );
    let mut acked = acks(&mut out);
    acked.sort_unstable();
    let mut expected: Vec<u16> = (1..=20).collect();
    expected.push(99);
    assert_eq!(acked, expected, "every message acknowledged once");
    assert_eq!(counters.messages_acknowledged, 21);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_same_samples_twice_are_stored_once() {
    let (_dir, store) = temp_store().await;
    let (w, mut out) = writer(store.clone(), 64);
    let first = w
        .run(queued(vec![
            samples_msg(pv(0, 300), 1),
            samples_msg(pv(0, 300), 2),
        ]))
        .await
        .unwrap();
    assert_eq!((first.samples_committed, first.duplicates), (300, 300));

    // A redelivery after a restart: a new writer on the same store.
    let (w, mut out2) = writer(store.clone(), 64);
    let again = w
        .run(queued(vec![samples_msg(pv(100, 300), 3)]))
        .await
        .unwrap();
    assert_eq!((again.samples_committed, again.duplicates), (100, 200));

    let rows = stored(&store).await;
    assert_eq!(rows.len(), 400);
    assert!(rows.windows(2).all(|w| w[0].0 < w[1].0), "one row per time");
    // Duplicates are acknowledged too, or the broker would redeliver them forever.
    assert_eq!(acks(&mut out), vec![1, 2]);
    assert_eq!(acks(&mut out2), vec![3]);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_message_is_acknowledged_only_once_its_samples_are_committed() {
    let (_dir, store) = temp_store().await;
    // Room for one acknowledgement: the writer waits for each to be taken.
    let (w, mut out) = writer(store.clone(), 1);
    let (tx, rx) = mpsc::channel(8);
    let task = tokio::spawn(w.run(rx));
    for pkid in 1..=5u16 {
        let first_s = i64::from(pkid) * 1_000;
        tx.send(samples_msg(pv(first_s, 50), pkid)).await.unwrap();
        let Some(Outbound::Ack(p)) = out.recv().await else {
            panic!("expected an acknowledgement");
        };
        assert_eq!(p.pkid, pkid);
        // At the moment the acknowledgement arrives, the message's samples are in the store.
        let rows = store
            .samples(TAG, Signal::Pv, first_s * 1000, (first_s + 49) * 1000)
            .await
            .unwrap();
        assert_eq!(rows.len(), 50, "message {pkid}");
    }
    drop(tx);
    let counters = task.await.unwrap().unwrap();
    assert_eq!(counters.messages_acknowledged, 5);
    assert!(out.recv().await.is_none());
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_failed_commit_acknowledges_nothing() {
    let (dir, store) = temp_store().await;
    store.close().await;
    let read_only = Store::open_read_only(&dir.path().join("store.db"))
        .await
        .unwrap();
    let (w, mut out) = writer(read_only, 64);
    let result = w
        .run(queued(vec![
            samples_msg(pv(0, 10), 1),
            samples_msg(pv(10, 10), 2),
        ]))
        .await;
    assert!(
        matches!(result, Err(store::Error::ReadOnly { .. })),
        "{result:?}"
    );
    // The writer has ended: its outbound channel closes without a single acknowledgement.
    assert!(out.recv().await.is_none());
}

/// A writer on `store` watching `TAG` (PV only, due every second, stale after `stale_s`),
/// publishing alerts on `alerts`; and the receiving end of its outbound channel.
fn watching(store: Store, stale_s: u64) -> (Writer, mpsc::Receiver<Outbound>) {
    let (tx, rx) = mpsc::channel(64);
    let settings = WriterSettings {
        alert_topic: Some("alerts".into()),
        status_topic: None,
        raw_retention_ms: None,
    };
    let setup = LoopSetup::new(TAG, crate::analysis::Spec::within(120.0));
    let rt = LoopRuntime::new(setup, vec![Signal::Pv], 1.0, Duration::from_secs(stale_s));
    let loops = HashMap::from([(Arc::from(TAG), rt)]);
    (Writer::new(store, loops, tx, settings, Arc::default()), rx)
}

/// The alerts published so far, as JSON.
fn published(rx: &mut mpsc::Receiver<Outbound>) -> Vec<serde_json::Value> {
    let mut out = Vec::new();
    while let Ok(o) = rx.try_recv() {
        if let Outbound::Publish { payload, .. } = o {
            out.push(serde_json::from_slice(&payload).unwrap());
        }
    }
    out
}

/// Sets the plant's clock to `ms` of data time.
fn clock_at(w: &mut Writer, ms: i64) {
    w.clock.newest_ms = Some(ms);
    w.clock.at = Some(Instant::now());
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_provisional_and_a_final_miss_of_one_change_are_one_alert() {
    use crate::analysis::Verdict;
    use crate::store::testing::episode_result;
    let (_dir, store) = temp_store().await;
    let (mut w, mut out) = watching(store.clone(), 10);
    let tag: Arc<str> = Arc::from(TAG);
    let mut provisional = episode_result(Verdict::TuningLimited, None);
    provisional.end_s = 250.0;
    w.store_episode(&tag, &provisional, false, 0).await;
    let last = episode_result(Verdict::ActuatorLimited, Some(320.0));
    w.store_episode(&tag, &last, true, 0).await;

    let alerts = store.alerts(false).await.unwrap();
    assert_eq!(alerts.len(), 1, "{alerts:#?}");
    let a = &alerts[0];
    assert_eq!(a.kind, "actuator_limited");
    assert_eq!(
        (a.first_seen_ms, a.last_seen_ms, a.raised_ms),
        (100_000, 400_000, 250_000)
    );
    assert_eq!(a.evidence["final"], true);
    assert_eq!(w.counters.alerts_raised, 1);
    // Published twice: raised, then updated in place.
    let sent = published(&mut out);
    assert_eq!(sent.len(), 2, "{sent:#?}");
    assert!(
        sent.iter()
            .all(|p| p["id"] == a.id && p["state"] == "active")
    );
    assert_eq!(sent[1]["kind"], "actuator_limited");

    // The next change, a provisional miss that is met in the end: raised, then returned.
    let mut next = episode_result(Verdict::TuningLimited, None);
    (next.start_s, next.end_s) = (500.0, 650.0);
    w.store_episode(&tag, &next, false, 0).await;
    (next.verdict, next.settling_time_s, next.end_s) = (Verdict::Met, Some(110.0), 800.0);
    w.store_episode(&tag, &next, true, 0).await;
    let alerts = store.alerts(false).await.unwrap();
    let states: Vec<(i64, &str)> = alerts
        .iter()
        .map(|a| (a.first_seen_ms, a.state.as_str()))
        .collect();
    assert_eq!(states, [(500_000, "returned"), (100_000, "active")]);
    assert_eq!(alerts[0].returned_ms, Some(800_000));
    let sent = published(&mut out);
    assert_eq!(sent.len(), 2, "{sent:#?}");
    assert_eq!(sent[1]["state"], "returned");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_marginal_miss_raises_no_alert() {
    use crate::analysis::Verdict;
    use crate::analysis::confidence::Confidence;
    use crate::store::testing::episode_result;
    let (_dir, store) = temp_store().await;
    let (mut w, mut out) = watching(store.clone(), 10);
    let mut marginal = episode_result(Verdict::ActuatorLimited, None);
    marginal.confidence = Some(Confidence::Marginal);
    w.store_episode(&Arc::from(TAG), &marginal, true, 0).await;
    assert!(store.alerts(false).await.unwrap().is_empty());
    assert!(published(&mut out).is_empty());
    assert_eq!(w.counters.alerts_raised, 0);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_outage_alert_spans_the_silence_and_returns_when_data_flows() {
    let (_dir, store) = temp_store().await;
    let (mut w, mut out) = watching(store.clone(), 5);
    // PV every second up to 9 s; nothing stale while the clock stays within the limit.
    let _ = w.take_in(&pv(0, 10));
    clock_at(&mut w, 14_000);
    w.check_stale(true).await;
    assert!(store.alerts(false).await.unwrap().is_empty());

    // At 30 s the silence is past the limit: raised, its span starting at the last sample.
    clock_at(&mut w, 30_000);
    w.check_stale(false).await;
    let sent = published(&mut out);
    assert_eq!(sent.len(), 1, "{sent:#?}");
    assert_eq!(sent[0]["first_seen"], rfc3339(9_000));
    let raised = &store.alerts(false).await.unwrap()[0];
    assert_eq!(
        (raised.first_seen_ms, raised.raised_ms),
        (9_000, raised.last_seen_ms)
    );
    assert!(raised.raised_ms >= 30_000);

    // Still silent: the span grows, quietly.
    clock_at(&mut w, 600_000);
    w.check_stale(false).await;
    w.check_stale(true).await;
    assert!(published(&mut out).is_empty());
    let grown = &store.alerts(false).await.unwrap()[0];
    assert_eq!(grown.id, raised.id);
    assert!(grown.last_seen_ms >= 600_000, "{grown:#?}");

    // PV again from 700 s: returned, the span ending at the first sample after the silence.
    let _ = w.take_in(&pv(700, 3));
    clock_at(&mut w, 702_000);
    w.check_stale(false).await;
    let back = &store.alerts(false).await.unwrap()[0];
    assert_eq!(
        (
            back.id,
            back.state.as_str(),
            back.first_seen_ms,
            back.last_seen_ms,
            back.returned_ms
        ),
        (raised.id, "returned", 9_000, 700_000, Some(700_000))
    );
    let sent = published(&mut out);
    assert_eq!(sent.len(), 1, "{sent:#?}");
    assert_eq!(sent[0]["state"], "returned");
    assert_eq!(
        sent[0]["evidence"]["pv"]["first_sample_after"],
        rfc3339(700_000)
    );

    // Silent again: a new outage, a new alert.
    clock_at(&mut w, 800_000);
    w.check_stale(false).await;
    let all = store.alerts(false).await.unwrap();
    assert_eq!(all.len(), 2, "{all:#?}");
    assert_eq!(
        (all[0].state.as_str(), all[0].first_seen_ms),
        ("active", 702_000)
    );
    assert_eq!(w.counters.alerts_raised, 2);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_restarted_writer_ends_the_outage_it_finds_in_the_store() {
    let (_dir, store) = temp_store().await;
    let (mut w, _out) = watching(store.clone(), 5);
    let _ = w.take_in(&pv(0, 10));
    clock_at(&mut w, 30_000);
    w.check_stale(false).await;
    drop(w);

    // A new writer, as after a restart: it picks up the outage from the store. Its first data
    // come back at once, well within the stale limit of its own watch.
    let (mut w, mut out) = watching(store.clone(), 5);
    for a in store.ongoing_alerts("stale_tag").await.unwrap() {
        w.loops.get_mut(TAG).unwrap().resume_outage(&a);
    }
    let _ = w.take_in(&pv(40, 2));
    clock_at(&mut w, 41_000);
    w.check_stale(false).await;
    let all = store.alerts(false).await.unwrap();
    assert_eq!(all.len(), 1, "{all:#?}");
    assert_eq!(
        (
            all[0].state.as_str(),
            all[0].first_seen_ms,
            all[0].returned_ms
        ),
        ("returned", 9_000, Some(40_000))
    );
    assert_eq!(published(&mut out).len(), 1);
}
