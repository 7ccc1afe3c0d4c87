//! The broker restarts in the middle of a stream. With persistence on, Mosquitto keeps the
//! daemon's session and the messages queued for it; the daemon must reconnect on its own and
//! every message the broker acknowledged to the publisher — before the restart, while the
//! publisher retried, and after — must end up in the store.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, spawn_publish};
use crate::common::daemon::{
    DaemonProcess, LoopRig, eventually, sample_count, stored_keys, tail, unique,
};
use crate::common::plant::{messages, recent_past_ms, vessel};
use std::collections::BTreeSet;
use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Duration;

const TAG: &str = "TIC-201";

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_acknowledged_message_is_stored_across_a_broker_restart() {
    let mut broker = Mosquitto::start(BrokerOptions {
        persistence: true,
        ..BrokerOptions::default()
    })
    .await;
    let rig = LoopRig::new(broker.port(), "broker-restart", TAG);
    let mut daemon = DaemonProcess::start_subscribed(&rig.config).await;

    // 9,003 messages at 1,500 a second: the stream lasts about six seconds.
    let samples = vessel(100.0, 5).run(&[(600.0, 60.0), (3600.0, 45.0)], 6000.0, 2.0);
    let (msgs, keys) = messages(TAG, &rig.topics, recent_past_ms(3 * 3600), &samples);
    let progress = Arc::new(AtomicUsize::new(0));
    let options = PublishOptions {
        per_second: Some(1_500.0),
        progress: Some(progress.clone()),
        ..PublishOptions::new(unique("gateway"))
    };
    let publisher = spawn_publish(broker.port(), msgs.clone(), options);

    // Restart once a third is acknowledged and some of it stored, so that the restart falls
    // mid-stream for the publisher and for the daemon.
    let third = keys.len() / 3;
    eventually(
        "a third published, some stored",
        Duration::from_secs(60),
        async || {
            let acked = progress.load(Ordering::Relaxed);
            let stored = sample_count(&rig.db).await?;
            if acked >= third && stored > 0 {
                Ok(())
            } else {
                Err(format!("{acked} acknowledged, {stored} stored"))
            }
        },
    )
    .await;
    broker.stop_graceful().await;
    broker.restart().await;

    let published = publisher.await.expect("the publisher task");
    assert!(
        published.connections >= 2,
        "the publisher never lost its connection, so the restart was not mid-stream"
    );
    let acked: BTreeSet<_> = keys
        .iter()
        .zip(&published.acked)
        .filter(|(_, a)| **a)
        .map(|(k, _)| k.clone())
        .collect();
    assert_eq!(
        acked.len(),
        keys.len(),
        "the publisher got every message acknowledged in the end"
    );

    let stored = eventually(
        "every acknowledged sample in the store",
        Duration::from_secs(90),
        async || {
            let stored = stored_keys(&rig.db, &[TAG]).await?;
            if stored.is_superset(&acked) {
                Ok(stored)
            } else {
                Err(format!(
                    "{} of {} stored; daemon log:\n{}",
                    stored.intersection(&acked).count(),
                    acked.len(),
                    tail(&daemon.log(), 10)
                ))
            }
        },
    )
    .await;
    assert_eq!(
        stored.len(),
        acked.len(),
        "nothing but the published samples"
    );

    let log = daemon.log();
    let connects: Vec<&str> = log
        .lines()
        .filter(|l| l.contains("connected to the MQTT broker"))
        .collect();
    assert!(
        connects.len() >= 2,
        "the daemon did not reconnect after the restart:\n{log}"
    );
    assert!(
        connects[1..]
            .iter()
            .any(|l| l.contains("session_present=true")),
        "the broker's persistence did not keep the daemon's session: {connects:#?}"
    );
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");
}
