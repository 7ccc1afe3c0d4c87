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
