//! The daemon reading loops over Modbus TCP from simulated devices: a loop served only over
//! Modbus is stored and scored exactly as `analyze` scores its export, with read function codes
//! only; a device that stalls leaves one gap and one stale alert per signal and is polled again
//! when it answers, while another device goes on unaffected; exception answers are logged naming
//! the request and the signals; and a loop may take its setpoint over MQTT and its PV and OP
//! over Modbus.
//!
//! The simulated loops run on accelerated time (see `modbus::simloop`), so the daemon, stamping
//! samples with the wall clock, sees a plant 120 times as fast: TIC-305's 2800 s time constant
//! looks like 23 s, and its setpoint moves every 15 s.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::daemon::{
    DaemonProcess, Workspace, assert_live_matches_offline, episode_line, eventually,
    final_episodes, open_store, tail, unique,
};
use headroom::modbus::registers::{DataType, Order, decode};
use headroom::modbus::sim::device::{Fault, RegisterMap, SimDevice};
use headroom::modbus::sim::served_loop::{LoopLayout, ServedLoop};
use headroom::sample::Signal;
use serde_json::Value;
use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::path::Path;
use std::sync::Arc;
use std::time::Duration;
use tokio_modbus::ExceptionCode;

/// Simulated seconds per wall-clock second.
const SPEED: f64 = 120.0;
/// The simulation's tick, wall time.
const TICK: Duration = Duration::from_millis(20);

/// A served TIC-305 (or a copy at other registers, with another noise seed).
fn tic(first_register: u16, seed: u64) -> ServedLoop {
    let mut l = ServedLoop::wrenmoor_tic_305(SPEED);
    l.layout = LoopLayout {
        first_register,
        auto_coil: first_register / 10,
    };
    l.config.seed = seed;
    l
}

async fn device() -> Arc<SimDevice> {
    Arc::new(
        SimDevice::start(0, RegisterMap::new(200))
            .await
            .expect("start a simulated device"),
    )
}

/// The config lines of a device polled every 0.1 s.
fn device_toml(name: &str, dev: &SimDevice) -> String {
    format!(
        "[modbus.{name}]\naddress = \"{}\"\npoll_period_s = 0.1\ntimeout_s = 0.3\n\n",
        dev.addr()
    )
}

/// A loop section whose signals are read from `device` (the SP from MQTT when `sp_topic`).
fn loop_toml(tag: &str, device: &str, l: &ServedLoop, sp_topic: Option<&str>) -> String {
    let r = |a: u16| {
        format!(
            "{{ device = \"{device}\", table = \"holding_registers\", address = {a}, data_type = \"f32\" }}"
        )
    };
    let mut t = String::new();
    // In the daemon's (wall-clock) seconds: 1680 simulated seconds (28 min) to settle, 0.1 s
    // samples; the setpoint moves every 15 s.
    let _ = writeln!(
        t,
        "[loops.{tag}]\nop_min = 0\nop_max = 100\nexpected_period_s = 0.1"
    );
    let _ = writeln!(
        t,
        "spec = {{ settle_within_s = 14.0, max_overshoot_pct = 10 }}"
    );
    match sp_topic {
        Some(topic) => {
            let _ = writeln!(t, "sp = {{ topic = \"{topic}\", format = \"json\" }}");
        }
        None => {
            let _ = writeln!(t, "sp = {}", r(l.layout.sp()));
        }
    }
    let _ = writeln!(t, "pv = {}", r(l.layout.pv()));
    let _ = writeln!(t, "op = {}", r(l.layout.op()));
    if sp_topic.is_none() {
        let _ = writeln!(
            t,
            "mode = {{ device = \"{device}\", table = \"coils\", address = {} }}",
            l.layout.auto_coil
        );
    }
    t.push('\n');
    t
}

fn write_config(ws: &Workspace, body: &str) -> std::path::PathBuf {
    let path = ws.config_path();
    std::fs::write(&path, format!("[store]\npath = \"store.db\"\n\n{body}")).expect("config");
    path
}

/// Waits for `n` final episodes of a loop.
async fn wait_for_finals(daemon: &DaemonProcess, db: &Path, tag: &str, n: usize) -> Vec<Value> {
    eventually(
        &format!("{n} final episodes of {tag}"),
        Duration::from_secs(150),
        async || {
            let f = final_episodes(db, tag).await?;
            if f.len() >= n {
                Ok(f)
            } else {
                Err(format!(
                    "{} final; log: {}",
                    f.len(),
                    tail(&daemon.log(), 5)
                ))
            }
        },
    )
    .await
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_modbus_loop_is_scored_as_offline_with_read_function_codes_only() {
    const TAG: &str = "TIC-305";
    let dev = device().await;
    let served = tic(100, 305);
    let sim = dev.serve_loop(served.clone(), TICK);
    let ws = Workspace::new("modbus-e2e");
    let config = write_config(
        &ws,
        &(device_toml("skid-b", &dev) + &loop_toml(TAG, "skid-b", &served, None)),
    );
    let db = ws.db_path();
    let mut daemon = DaemonProcess::start(&config);
    daemon
        .wait_for_log("polling Modbus device", Duration::from_secs(30))
        .await;

    // Four setpoint changes, each followed by a full 15 s window, are final after about 70 s.
    let finals = wait_for_finals(&daemon, &db, TAG, 4).await;
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");
    sim.abort();

    // Read-only: every request was a read of the coils (1) or the holding registers (3), and
    // the device saw many of each.
    let codes = dev.function_codes();
    let kinds: BTreeSet<u8> = codes.iter().copied().collect();
    assert_eq!(kinds, BTreeSet::from([1, 3]), "function codes received");
    assert!(codes.len() > 500, "only {} requests", codes.len());

    // The live verdicts equal the offline analysis of the store's own export.
    let live: Vec<&Value> = finals.iter().collect();
    assert_live_matches_offline(&ws, &db, &config, TAG, &live).await;
    // The well-tuned loop follows its 5 K moves within the spec.
    let moves: BTreeSet<(String, String)> = finals
        .iter()
        .map(|e| (e["sp_from"].to_string(), e["sp_to"].to_string()))
        .collect();
    assert!(moves.contains(&("60.0".into(), "65.0".into())), "{moves:?}");
    assert!(
        finals.iter().any(|e| e["verdict"] == "met"),
        "{:#?}",
        finals.iter().map(episode_line).collect::<Vec<_>>()
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_stalled_device_leaves_one_gap_and_one_stale_alert_and_spares_the_other() {
    let (stalling, steady) = (device().await, device().await);
    let (a, b) = (tic(100, 1), tic(100, 2));
    let sims = [
        stalling.serve_loop(a.clone(), TICK),
        steady.serve_loop(b.clone(), TICK),
    ];
    let ws = Workspace::new("modbus-faults");
    let config = write_config(
        &ws,
        &[
            device_toml("skid-a", &stalling),
            device_toml("skid-b", &steady),
            loop_toml("TIC-301", "skid-a", &a, None),
            loop_toml("TIC-302", "skid-b", &b, None),
        ]
        .concat(),
    );
    let db = ws.db_path();
    let mut daemon = DaemonProcess::start(&config);
    daemon
        .wait_for_log("polling Modbus device", Duration::from_secs(30))
        .await;
    tokio::time::sleep(Duration::from_secs(3)).await;

    // skid-a takes requests and never answers for 4 s (a stale limit is 10 × 0.1 s = 1 s).
    let stall_from = jiff::Timestamp::now().as_millisecond();
    stalling.set_fault(Fault::Stall);
    tokio::time::sleep(Duration::from_secs(4)).await;
    stalling.set_fault(Fault::None);
    let stall_to = jiff::Timestamp::now().as_millisecond();
    daemon
        .wait_for_log("reconnected to the Modbus device", Duration::from_secs(30))
        .await;
    tokio::time::sleep(Duration::from_secs(2)).await;

    // Then skid-b answers every request with "illegal data address" for a second.
    steady.set_fault(Fault::Exception(ExceptionCode::IllegalDataAddress));
    daemon
        .wait_for_log("exception 02", Duration::from_secs(10))
        .await;
    steady.set_fault(Fault::None);
    tokio::time::sleep(Duration::from_secs(2)).await;
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");
    for s in sims {
        s.abort();
    }
    let log = daemon.log();

    let store = open_store(&db).await;
    // One gap per signal of TIC-301, spanning the stall, and none of TIC-302 during it.
    let gaps = store.gaps(None, stall_from, stall_to).await.expect("gaps");
    let of_a: Vec<_> = gaps.iter().filter(|g| g.loop_tag == "TIC-301").collect();
    let mut signals: Vec<Signal> = of_a.iter().map(|g| g.signal).collect();
    signals.sort();
    assert_eq!(
        signals,
        [Signal::Sp, Signal::Pv, Signal::Op, Signal::Mode],
        "{gaps:#?}"
    );
    for g in &of_a {
        assert!(
            g.from_ms <= stall_from + 200 && g.to_ms >= stall_to - 200,
            "{g:?} does not span the stall {stall_from}..{stall_to}"
        );
    }
    assert!(
        !gaps
            .iter()
            .any(|g| g.loop_tag == "TIC-302" && g.to_ms < stall_to + 500),
        "the steady device had a gap during the stall: {gaps:#?}"
    );
    // TIC-302's samples went on at the poll rate throughout the stall.
    let pv = store
        .samples("TIC-302", Signal::Pv, stall_from, stall_to)
        .await
        .expect("samples");
    let longest = pv
        .windows(2)
        .map(|w| w[1].0 - w[0].0)
        .max()
        .unwrap_or(i64::MAX);
    assert!(
        pv.len() >= 30 && longest < 500,
        "{} samples, longest silence {longest} ms",
        pv.len()
    );
    // Polling resumed: TIC-301 has samples after the stall.
    let after = store
        .samples("TIC-301", Signal::Pv, stall_to, i64::MAX)
        .await
        .expect("samples");
    assert!(after.len() >= 10, "{} samples after the stall", after.len());

    // One stale alert for the stalled loop.
    let alerts = store.alerts(false).await.expect("alerts");
    let stale: Vec<_> = alerts
        .iter()
        .filter(|a| a.kind == "stale_tag" && a.loop_tag == "TIC-301")
        .collect();
    assert_eq!(stale.len(), 1, "{alerts:#?}");
    // Timeouts and exceptions are counted by device.
    let counts = store.rejections().await.expect("counters");
    let count = |reason: &str, source: &str| {
        counts
            .iter()
            .find(|r| r.reason == reason && r.source == source)
            .map_or(0, |r| r.count)
    };
    assert!(count("modbus_timeout", "skid-a") >= 1, "{counts:#?}");
    assert_eq!(count("modbus_timeout", "skid-b"), 0, "{counts:#?}");
    assert!(count("modbus_exception", "skid-b") >= 1, "{counts:#?}");
    store.close().await;

    // The exception is logged naming the request (the first of the plan: the coils) and the
    // signals it serves.
    let line = log
        .lines()
        .find(|l| l.contains("exception 02"))
        .expect("an exception line");
    assert!(
        line.contains("FC1 coils 10-10")
            && line.contains("Illegal data address")
            && line.contains("TIC-302 mode")
            && line.contains("skid-b"),
        "{line}"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_loop_may_take_its_setpoint_over_mqtt_and_pv_and_op_over_modbus() {
    const TAG: &str = "TIC-307";
    let broker = Mosquitto::start(BrokerOptions::default()).await;
    let dev = device().await;
    let served = tic(100, 307);
    let sim = dev.serve_loop(served.clone(), TICK);
    let sp_topic = format!("wrenmoor/{}/{TAG}/sp", unique("mixed"));
    let ws = Workspace::new("modbus-mixed");
    let mqtt = format!(
        "[mqtt]\nurl = \"mqtt://127.0.0.1:{}\"\nclient_id = \"{}\"\nalert_topic = \"{}\"\n\n",
        broker.port(),
        unique("headroom-mixed"),
        format_args!("headroom-test/{}/alerts", unique("mixed")),
    );
    let config = write_config(
        &ws,
        &[
            mqtt,
            device_toml("skid-b", &dev),
            loop_toml(TAG, "skid-b", &served, Some(&sp_topic)),
        ]
        .concat(),
    );
    let db = ws.db_path();
    let mut daemon = DaemonProcess::start(&config);
    daemon.wait_subscribed().await;

    // A gateway publishes the controller's setpoint every 0.1 s, stamped with the time read.
    let gateway = {
        let dev = Arc::clone(&dev);
        let mut opts = rumqttc::MqttOptions::new(unique("gateway"), "127.0.0.1", broker.port());
        opts.set_keep_alive(Duration::from_secs(5));
        let (client, mut events) = rumqttc::AsyncClient::new(opts, 100);
        tokio::spawn(async move { while events.poll().await.is_ok() {} });
        let topic = sp_topic.clone();
        tokio::spawn(async move {
            let mut tick = tokio::time::interval(Duration::from_millis(100));
            loop {
                tick.tick().await;
                let sp = dev.with_map(|m| {
                    decode(&m.holding_registers[100..102], DataType::F32, Order::Abcd)
                });
                let now = jiff::Timestamp::now().as_millisecond();
                let payload = serde_json::json!({ "value": sp, "time": now }).to_string();
                let _ = client
                    .publish(&topic, rumqttc::QoS::AtLeastOnce, false, payload)
                    .await;
            }
        })
    };

    let finals = wait_for_finals(&daemon, &db, TAG, 2).await;
    gateway.abort();
    let status = daemon.sigterm().await;
    assert!(status.success(), "the daemon exited with {status}");
    sim.abort();

    // The moves are the simulated controller's, seen through the MQTT setpoint.
    for e in &finals {
        let (from, to) = (e["sp_from"].as_f64(), e["sp_to"].as_f64());
        assert!(
            matches!(
                (from, to),
                (Some(60.0), Some(65.0)) | (Some(65.0), Some(60.0))
            ),
            "{e}"
        );
        assert!(e["verdict"].is_string(), "{e}");
    }
    let store = open_store(&db).await;
    for s in [Signal::Sp, Signal::Pv, Signal::Op] {
        let n = store
            .samples(TAG, s, i64::MIN, i64::MAX)
            .await
            .expect("samples")
            .len();
        assert!(n > 100, "{s}: {n} samples");
    }
    store.close().await;
}
