//! A loop added to the config between two runs. The broker kept the daemon's session (and with
//! it the old run's subscriptions), so the reconnect resumes that session; the new loop's topics
//! must still be subscribed, or its data would silently never arrive.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopTopics, TestConfig, TestLoop, Workspace, eventually, stored_keys, tail,
    unique,
};
use crate::common::plant::{json_sample, recent_past_ms};
use std::time::Duration;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_loop_added_while_the_session_persists_gets_its_data() {
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let ws = Workspace::new("config-change");
    let prefix = format!("plant/{}", unique("config-change"));
    let old = LoopTopics::new(&prefix, "TIC-801");
    let new = LoopTopics::new(&prefix, "TIC-802");
    let mut cfg = TestConfig::new(broker.port(), "config-change");
    cfg.loops.push(TestLoop::new("TIC-801", old.clone()));
    let config = ws.write_config(&cfg);
    let mut daemon = DaemonProcess::start_subscribed(&config).await;
    assert!(daemon.sigterm().await.success());

    cfg.loops.push(TestLoop::new("TIC-802", new.clone()));
    let config = ws.write_config(&cfg);
    let mut daemon = DaemonProcess::start(&config);
    daemon
        .wait_for_log("connected to the MQTT broker", Duration::from_secs(30))
        .await;
    assert!(
        daemon.log().contains("session_present=true"),
        "this test needs the broker to resume the session:\n{}",
        daemon.log()
    );
    let t0 = recent_past_ms(600);
    let msgs: Vec<_> = (0..10i64)
        .flat_map(|k| {
            new.all()
                .map(|t| (t.to_string(), json_sample(60.0, t0 + 1_000 * k)))
        })
        .collect();
    publish_all(broker.port(), &msgs, PublishOptions::new(unique("gateway"))).await;
    eventually(
        "the new loop's samples in the store",
        Duration::from_secs(30),
        async || {
            let n = stored_keys(&ws.db_path(), &["TIC-802"]).await?.len();
            if n == msgs.len() {
                Ok(())
            } else {
                Err(format!(
                    "{n} of {} stored; log:\n{}",
                    msgs.len(),
                    tail(&daemon.log(), 8)
                ))
            }
        },
    )
    .await;
    assert!(daemon.sigterm().await.success());
}
