//! The daemon is killed (SIGKILL, no chance to clean up) at random points, several times, and
//! started again each time, while a publisher keeps publishing. Because the daemon acknowledges
//! a message only after its samples are committed, the broker redelivers whatever a killed
//! daemon had not committed; because the store's key is (loop, signal, time), a redelivered
//! sample cannot be stored twice. In the end the store holds exactly the published samples and
//! SQLite finds the file sound.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, spawn_publish};
use crate::common::daemon::{
    DaemonProcess, LoopRig, open_store, sample_count, stored_keys, unique, wait_for_samples,
};
use crate::common::plant::{Rng, messages, recent_past_ms, seed, vessel};
use std::collections::BTreeSet;
use std::time::Duration;

const TAG: &str = "PIC-301";
const KILLS: usize = 5;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigkill_at_random_points_loses_and_duplicates_nothing() {
    let seed = seed(0x5eed_0301);
    let mut rng = Rng::new(seed);

    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let rig = LoopRig::new(broker.port(), "sigkill", TAG);

    // The first run creates the session, so the broker queues messages for the daemon while it
    // is dead; later runs resume it.
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    // 12,003 messages at 1,500 a second: about eight seconds of publishing, during which the
    // daemon is killed five times.
    let samples = vessel(100.0, 9).run(&[(900.0, 62.0), (4000.0, 48.0)], 8000.0, 2.0);
    let (msgs, keys) = messages(TAG, &rig.topics, recent_past_ms(4 * 3600), &samples);
    let publisher = spawn_publish(
        broker.port(),
        msgs.clone(),
        PublishOptions {
            per_second: Some(1_500.0),
            ..PublishOptions::new(unique("gateway"))
        },
    );

    let mut stored_at_kill = Vec::new();
    for _ in 0..KILLS {
        // Anywhere from the store being opened to well into the stream.
        let after = Duration::from_secs_f64(rng.range_f64(0.05, 1.5));
        tokio::time::sleep(after).await;
        daemon.sigkill().await;
        stored_at_kill.push(sample_count(&rig.db).await.unwrap_or(0));
        daemon = DaemonProcess::start(&rig.config);
    }
    eprintln!(
        "samples stored at each kill: {stored_at_kill:?} of {}",
        keys.len()
    );
    assert!(
        stored_at_kill
            .iter()
            .any(|&n| n > 0 && (n as usize) < keys.len()),
        "no kill fell in the middle of the stream: {stored_at_kill:?}"
    );

    let published = publisher.await.expect("the publisher task");
    assert_eq!(
        published.acked_count(),
        msgs.len(),
        "the broker acknowledged everything"
    );
    let expected: BTreeSet<_> = keys.iter().cloned().collect();
    assert_eq!(
        expected.len(),
        keys.len(),
        "published (topic, time) pairs are distinct"
    );

    wait_for_samples(&rig.db, expected.len(), Duration::from_secs(120)).await;
    let status = daemon.sigterm().await;
    assert!(status.success(), "the last daemon exited with {status}");

    let stored = stored_keys(&rig.db, &[TAG]).await.expect("read the store");
    assert_eq!(
        stored.len(),
        expected.len(),
        "stored samples vs distinct published (topic, time) pairs"
    );
    assert!(
        stored == expected,
        "the stored samples are not the published ones"
    );
    let store = open_store(&rig.db).await;
    let integrity = store.integrity_check().await.expect("integrity check");
    assert_eq!(integrity, "ok");
    assert_eq!(store.sample_count().await.unwrap() as usize, expected.len());
    store.close().await;
}
