//! Broker credentials: a wrong password is refused by the broker, the daemon says so in terms a
//! person can act on, keeps retrying with backoff (never a busy loop), and never prints the
//! password; the right one, from a file or from the environment, gets samples stored.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{PublishOptions, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopTopics, PasswordFrom, TestConfig, TestLoop, Workspace, eventually, unique,
    wait_for_samples,
};
use crate::common::plant::{json_sample, recent_past_ms};
use std::time::Duration;

const TAG: &str = "TIC-501";
const USER: &str = "headroom";
const RIGHT: &str = "Right-Horse-Battery-8213";
const WRONG: &str = "Wrong-Staple-Pumpkin-4402";
const GATEWAY: (&str, &str) = ("gateway", "Gateway-Secret-7781");

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_refused_password_is_reported_and_retried_and_the_right_one_connects() {
    let broker = Mosquitto::start(BrokerOptions {
        users: Some(vec![
            (USER.into(), RIGHT.into()),
            (GATEWAY.0.into(), GATEWAY.1.into()),
        ]),
        ..BrokerOptions::default()
    })
    .await;
    let ws = Workspace::new("credentials");
    let topics = LoopTopics::new(&format!("plant/{}", unique("credentials")), TAG);
    let password_file = ws.path().join("mqtt-password");
    std::fs::write(&password_file, format!("{WRONG}\n")).unwrap();
    let mut cfg = TestConfig::new(broker.port(), "credentials");
    cfg.username = Some(USER.into());
    cfg.password = Some(PasswordFrom::File(password_file.clone()));
    cfg.loops.push(TestLoop::new(TAG, topics.clone()));
    let config = ws.write_config(&cfg);
    let db = ws.db_path();

    // Wrong password.
    let mut daemon = DaemonProcess::start(&config);
    daemon
        .wait_for_log("refused the credentials", Duration::from_secs(30))
        .await;
    // The broker logs each refused attempt with its time (whole seconds). Six attempts with
    // the daemon's backoff (0.2 s doubling) span more than 6 s; a client that retried at once
    // would make thousands in that time.
    const ATTEMPTS: usize = 6;
    let refused: Vec<i64> = eventually(
        "six refused attempts in the broker's log",
        Duration::from_secs(60),
        async || {
            let times = refused_attempts(&broker.log());
            if times.len() >= ATTEMPTS {
                Ok(times)
            } else {
                Err(format!("{} so far", times.len()))
            }
        },
    )
    .await;
    let first_six = &refused[..ATTEMPTS];
    assert!(
        first_six[ATTEMPTS - 1] - first_six[0] >= 4,
        "six attempts within {} s: no backoff ({refused:?})",
        first_six[ATTEMPTS - 1] - first_six[0]
    );
    assert!(
        daemon.is_running(),
        "a refused login must not stop the daemon"
    );
    let status = daemon.sigterm().await;
    assert!(status.success(), "stopping while refused: {status}");

    // The right password in the same file.
    std::fs::write(&password_file, format!("{RIGHT}\n")).unwrap();
    let mut daemon = DaemonProcess::start_subscribed(&config).await;
    publish_samples(broker.port(), &topics, 0, 20).await;
    wait_for_samples(&db, 60, Duration::from_secs(60)).await;
    assert!(daemon.sigterm().await.success());

    // The right password from an environment variable only the daemon sees.
    let var = format!("HEADROOM_TEST_PW_{}", std::process::id());
    cfg.password = Some(PasswordFrom::Env(var.clone()));
    let config = ws.write_config(&cfg);
    let mut daemon = DaemonProcess::start_with_env(&config, &[(&var, RIGHT)]);
    daemon
        .wait_for_log("connected to the MQTT broker", Duration::from_secs(30))
        .await;
    publish_samples(broker.port(), &topics, 20, 20).await;
    wait_for_samples(&db, 120, Duration::from_secs(60)).await;
    assert!(daemon.sigterm().await.success());

    let log = daemon.full_log();
    assert!(
        !log.contains(WRONG) && !log.contains(RIGHT),
        "a password appears in the daemon's log:\n{log}"
    );
}

/// Times (epoch seconds) of the connections the broker refused as not authorised.
fn refused_attempts(log: &str) -> Vec<i64> {
    log.lines()
        .filter(|l| l.contains("not authorised"))
        .filter_map(|l| l.split(':').next()?.trim().parse().ok())
        .collect()
}

/// Publishes samples `from..from + n` of the loop (sp, pv and op each), as the gateway user.
async fn publish_samples(port: u16, topics: &LoopTopics, from: i64, n: i64) {
    let t0 = recent_past_ms(600);
    let msgs: Vec<_> = (from..from + n)
        .flat_map(|k| {
            topics
                .all()
                .map(|t| (t.to_string(), json_sample(50.0 + k as f64, t0 + 1000 * k)))
        })
        .collect();
    publish_all(
        port,
        &msgs,
        PublishOptions {
            credentials: Some((GATEWAY.0.into(), GATEWAY.1.into())),
            ..PublishOptions::new(unique("gateway"))
        },
    )
    .await;
}
