//! Ingest figures for `headroom bench`, each beside the ceiling it is compared with, measured in
//! the same run against a Mosquitto broker that the bench starts on a free loopback port:
//! (a) the broker's QoS 1 delivery rate to a bare subscriber, (b) the store's idempotent insert
//! rate through the same driver, (c) end to end — published to the broker, committed in SQLite by
//! the daemon — for one-sample messages and for batched messages, and (d) the daemon's resident
//! memory with 1,000 loops × 3 tags at 1 Hz for 10 minutes of accelerated data.

use crate::config::Config;
use crate::daemon::Daemon;
use crate::sample::{Sample, Signal};
use crate::store::Store;
use anyhow::Context;
use rumqttc::{AsyncClient, Event, MqttOptions, Packet, QoS};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

/// End to end must reach this share of the lower ceiling.
const SHARE_TARGET: f64 = 0.8;
/// Resident-memory ceiling for the memory run.
const MEMORY_TARGET_MB: f64 = 100.0;

/// A Mosquitto broker for the bench, killed when dropped.
struct Broker {
    child: std::process::Child,
    port: u16,
    _dir: PathBuf,
}

impl Drop for Broker {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn free_port() -> anyhow::Result<u16> {
    Ok(std::net::TcpListener::bind("127.0.0.1:0")?
        .local_addr()?
        .port())
}

fn start_broker(dir: &Path) -> anyhow::Result<Broker> {
    let port = free_port()?;
    let conf = dir.join("mosquitto.conf");
    // No queue limit and a wide in-flight window: with Mosquitto's defaults a subscriber that
    // falls behind silently loses QoS 1 messages.
    std::fs::write(
        &conf,
        format!(
            "listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\n\
             max_queued_messages 0\nmax_inflight_messages 1000\nlog_dest none\n"
        ),
    )?;
    let child = std::process::Command::new("mosquitto")
        .arg("-c")
        .arg(&conf)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .context("cannot start mosquitto (install it: apt-get install -y mosquitto)")?;
    let deadline = Instant::now() + Duration::from_secs(10);
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        anyhow::ensure!(
            Instant::now() < deadline,
            "mosquitto did not start listening"
        );
        std::thread::sleep(Duration::from_millis(20));
    }
    Ok(Broker {
        child,
        port,
        _dir: dir.to_owned(),
    })
}

/// Publishes `messages` from `connections` connections at QoS 1 and waits for every PubAck.
async fn publish_all(
    port: u16,
    connections: usize,
    messages: Arc<Vec<(String, Vec<u8>)>>,
    tag: &str,
) -> anyhow::Result<()> {
    let mut tasks = Vec::new();
    for c in 0..connections {
        let messages = messages.clone();
        let id = format!("bench-pub-{tag}-{c}");
        tasks.push(tokio::spawn(async move {
            let mut o = MqttOptions::new(id, "127.0.0.1", port);
            o.set_keep_alive(Duration::from_secs(30));
            o.set_inflight(200);
            o.set_max_packet_size(1 << 20, 1 << 20);
            let (client, mut el) = AsyncClient::new(o, 1000);
            let mine: Vec<(String, Vec<u8>)> = messages
                .iter()
                .skip(c)
                .step_by(connections)
                .cloned()
                .collect();
            let want = mine.len() as u64;
            let sender = tokio::spawn(async move {
                for (t, p) in mine {
                    if client.publish(t, QoS::AtLeastOnce, false, p).await.is_err() {
                        break;
                    }
                }
                client
            });
            let mut acked = 0u64;
            while acked < want {
                match el.poll().await {
                    Ok(Event::Incoming(Packet::PubAck(_))) => acked += 1,
                    Ok(_) => {}
                    Err(e) => anyhow::bail!("publisher: {e}"),
                }
            }
            let client = sender.await?;
            let _ = client.disconnect().await;
            Ok::<_, anyhow::Error>(())
        }));
    }
    for t in tasks {
        t.await??;
    }
    Ok(())
}

/// (a) QoS 1 delivery to a bare subscriber: messages per second.
async fn broker_ceiling(port: u16, connections: usize, n: usize) -> anyhow::Result<f64> {
    let mut o = MqttOptions::new(format!("bench-sub-{connections}"), "127.0.0.1", port);
    o.set_keep_alive(Duration::from_secs(30));
    o.set_clean_session(true);
    o.set_max_packet_size(1 << 20, 1 << 20);
    let (client, mut el) = AsyncClient::new(o, 1000);
    client.subscribe("ceiling/#", QoS::AtLeastOnce).await?;
    loop {
        if let Event::Incoming(Packet::SubAck(_)) = el.poll().await? {
            break;
        }
    }
    let received = Arc::new(AtomicU64::new(0));
    let r2 = received.clone();
    let sub = tokio::spawn(async move {
        while r2.load(Ordering::Relaxed) < n as u64 {
            match el.poll().await {
                Ok(Event::Incoming(Packet::Publish(_))) => {
                    r2.fetch_add(1, Ordering::Relaxed);
                }
                Ok(_) => {}
                Err(_) => break,
            }
        }
    });
    let msgs: Vec<(String, Vec<u8>)> = (0..n)
        .map(|i| {
            (
                format!("ceiling/{}", i % 300),
                format!(
                    "{{\"value\": {}.5, \"time\": {}}}",
                    i % 97,
                    1_790_000_000_000i64 + i as i64
                )
                .into_bytes(),
            )
        })
        .collect();
    let t = Instant::now();
    publish_all(
        port,
        connections,
        Arc::new(msgs),
        &format!("ceiling{connections}"),
    )
    .await?;
    tokio::time::timeout(Duration::from_secs(120), sub).await??;
    anyhow::ensure!(
        received.load(Ordering::Relaxed) >= n as u64,
        "the subscriber lost messages"
    );
    Ok(n as f64 / t.elapsed().as_secs_f64())
}

/// (b) Idempotent inserts through the store: rows per second, 300 series in time order.
async fn store_ceiling(dir: &Path, n: usize) -> anyhow::Result<f64> {
    let store = Store::open(&dir.join("ceiling.db")).await?;
    let tags: Vec<Arc<str>> = (0..100)
        .map(|i| Arc::from(format!("TIC-{i}").as_str()))
        .collect();
    let samples: Vec<Sample> = (0..n)
        .map(|i| Sample {
            loop_tag: tags[(i / 3) % 100].clone(),
            signal: [Signal::Sp, Signal::Pv, Signal::Op][i % 3],
            ts_ms: 1_790_000_000_000 + (i / 300) as i64 * 1000,
            value: (i % 97) as f64,
        })
        .collect();
    let t = Instant::now();
    for chunk in samples.chunks(5_000) {
        store.insert_samples(chunk).await?;
    }
    let rate = n as f64 / t.elapsed().as_secs_f64();
    store.close().await;
    Ok(rate)
}

/// A config with `loops` loops of three JSON signals each, on `port`.
fn config_text(port: u16, db: &Path, loops: usize, client: &str) -> String {
    let mut s = format!(
        "[store]\npath = {:?}\n[mqtt]\nurl = \"mqtt://127.0.0.1:{port}\"\nclient_id = \"{client}\"\n\
         alert_topic = \"bench/alerts\"\nmax_future_s = 86400\nmax_payload_bytes = 1048576\n",
        db.display().to_string()
    );
    for i in 0..loops {
        s.push_str(&format!(
            "[loops.TIC-{i}]\nop_min = 0\nop_max = 100\nexpected_period_s = 1\n\
             [loops.TIC-{i}.spec]\nsettle_within_s = 600\n"
        ));
        for sig in ["sp", "pv", "op"] {
            s.push_str(&format!(
                "[loops.TIC-{i}.{sig}]\ntopic = \"bench/TIC-{i}/{sig}\"\nformat = \"json\"\n"
            ));
        }
    }
    s
}

/// Messages carrying `per_message` samples each (1 = a plain JSON object, more = an array),
/// `total` samples over 100 loops × 3 signals at 1 Hz.
fn loop_messages(total: usize, per_message: usize, loops: usize) -> Vec<(String, Vec<u8>)> {
    let base = jiff::Timestamp::now().as_millisecond() - 86_400_000;
    let series = loops * 3;
    let per_series = total.div_ceil(series);
    let mut out = Vec::new();
    for k in (0..per_series).step_by(per_message) {
        for s in 0..series {
            let (l, sig) = (s / 3, ["sp", "pv", "op"][s % 3]);
            let items: Vec<String> = (k..(k + per_message).min(per_series))
                .map(|j| {
                    let v = if sig == "sp" {
                        50.0
                    } else {
                        50.0 + ((j * 7 + s) % 13) as f64 * 0.01
                    };
                    format!("{{\"value\": {v}, \"time\": {}}}", base + j as i64 * 1000)
                })
                .collect();
            let payload = if per_message == 1 {
                items[0].clone()
            } else {
                format!("[{}]", items.join(","))
            };
            out.push((format!("bench/TIC-{l}/{sig}"), payload.into_bytes()));
        }
    }
    out
}

/// (c) Published → committed by an in-process daemon: samples per second.
async fn end_to_end(
    dir: &Path,
    port: u16,
    connections: usize,
    per_message: usize,
    total: usize,
    name: &str,
) -> anyhow::Result<f64> {
    let db = dir.join(format!("{name}.db"));
    let cfg_path = dir.join(format!("{name}.toml"));
    std::fs::write(
        &cfg_path,
        config_text(port, &db, 100, &format!("bench-{name}")),
    )?;
    let cfg = Config::load(&cfg_path)?;
    let daemon = Daemon::build(&cfg, &cfg_path).await?;
    let committed = daemon.committed();
    let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
    let running = tokio::spawn(daemon.run(async {
        let _ = stop_rx.await;
    }));
    // Warm up before the clock starts: connect, subscribe, and create the 300 series (a
    // one-time cost of a new store) with one earlier sample each.
    let early = jiff::Timestamp::now().as_millisecond() - 2 * 86_400_000;
    let warm: Vec<(String, Vec<u8>)> = (0..300)
        .map(|s| {
            let sig = ["sp", "pv", "op"][s % 3];
            (
                format!("bench/TIC-{}/{sig}", s / 3),
                format!("{{\"value\": 50, \"time\": {early}}}").into_bytes(),
            )
        })
        .collect();
    tokio::time::sleep(Duration::from_millis(300)).await;
    publish_all(port, 1, Arc::new(warm), &format!("{name}-warm")).await?;
    let deadline = Instant::now() + Duration::from_secs(60);
    while committed.load(Ordering::Relaxed) < 300 {
        anyhow::ensure!(
            Instant::now() < deadline,
            "the warm-up did not reach the store"
        );
        tokio::time::sleep(Duration::from_millis(5)).await;
    }
    committed.store(0, Ordering::Relaxed);
    let msgs = Arc::new(loop_messages(total, per_message, 100));
    // `loop_messages` rounds up to whole rounds: every one of the 300 series gets as many.
    let expected = total.div_ceil(300) * 300;
    let t = Instant::now();
    publish_all(port, connections, msgs, name).await?;
    let deadline = Instant::now() + Duration::from_secs(300);
    loop {
        let n = committed.load(Ordering::Relaxed) as usize;
        if n >= expected {
            break;
        }
        anyhow::ensure!(
            Instant::now() < deadline,
            "only {n} of {expected} samples committed"
        );
        tokio::time::sleep(Duration::from_millis(2)).await;
    }
    let rate = expected as f64 / t.elapsed().as_secs_f64();
    let _ = stop_tx.send(());
    running.await??;
    Ok(rate)
}

/// (d) Resident memory of a `headroom run` child with 1,000 loops while 10 minutes of 1 Hz data
/// for all of them is published: (MB at a quarter, half, three quarters and the end, peak MB).
async fn memory_run(dir: &Path, port: u16) -> anyhow::Result<(Vec<f64>, f64)> {
    let db = dir.join("memory.db");
    let cfg_path = dir.join("memory.toml");
    let loops = 1_000;
    std::fs::write(&cfg_path, config_text(port, &db, loops, "bench-memory"))?;
    let (mut child, pid) = super::spawn_daemon(&cfg_path)?;
    tokio::time::sleep(Duration::from_millis(1500)).await;
    // One message per signal and minute: 60 samples in a JSON array.
    let per_series = 600;
    let msgs = loop_messages(loops * 3 * per_series, 60, loops);
    let quarter = msgs.len() / 4;
    let mut marks = Vec::new();
    for part in msgs.chunks(quarter.max(1)) {
        publish_all(port, 4, Arc::new(part.to_vec()), "memory").await?;
        marks.push(super::proc_status_mb(&pid.to_string(), "VmRSS:").unwrap_or(f64::NAN));
    }
    // Wait until everything is committed, then read the peak.
    let store = Store::open_read_only(&db).await?;
    let deadline = Instant::now() + Duration::from_secs(300);
    while (store.sample_count().await? as usize) < loops * 3 * per_series {
        anyhow::ensure!(
            Instant::now() < deadline,
            "the memory run did not finish committing"
        );
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
    marks.push(super::proc_status_mb(&pid.to_string(), "VmRSS:").unwrap_or(f64::NAN));
    let peak = super::proc_status_mb(&pid.to_string(), "VmHWM:").unwrap_or(f64::NAN);
    store.close().await;
    let _ = child.start_kill();
    let _ = child.wait().await;
    Ok((marks, peak))
}

/// Runs the ingest measurements and prints them.
pub fn run(dir: &Path, out: &mut dyn Write, quick: bool) -> anyhow::Result<()> {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    rt.block_on(async {
        let broker = match start_broker(dir) {
            Ok(b) => b,
            Err(e) => {
                writeln!(out, "ingest: not measured — {e:#}")?;
                return Ok(());
            }
        };
        let n = if quick { 20_000 } else { 100_000 };
        writeln!(out, "ingest through Mosquitto on 127.0.0.1 ({n} samples per run, QoS 1)")?;
        let b1 = broker_ceiling(broker.port, 1, n).await?;
        let b4 = broker_ceiling(broker.port, 4, n).await?;
        let st = store_ceiling(dir, 2 * n).await?;
        writeln!(out, "  (a) broker → bare subscriber, 1 publisher   {b1:>10.0} msg/s")?;
        writeln!(out, "  (a) broker → bare subscriber, 4 publishers  {b4:>10.0} msg/s")?;
        writeln!(out, "  (b) store, idempotent inserts               {st:>10.0} rows/s")?;
        for (conns, ceiling_b) in [(1, b1), (4, b4)] {
            let e = end_to_end(dir, broker.port, conns, 1, n, &format!("single{conns}")).await?;
            let ceiling = ceiling_b.min(st);
            writeln!(
                out,
                "  (c) end to end, one sample per message, {conns} publisher(s) {e:>8.0} samples/s = {:.0} % of min(a, b) — target ≥ {:.0} % — {}",
                100.0 * e / ceiling,
                100.0 * SHARE_TARGET,
                if e >= SHARE_TARGET * ceiling { "met" } else { "MISSED" }
            )?;
        }
        let batched = end_to_end(dir, broker.port, 4, 100, 2 * n, "batched").await?;
        writeln!(
            out,
            "  (c) end to end, 100 samples per message         {batched:>8.0} samples/s = {:.0} % of (b) — target ≥ {:.0} % — {}",
            100.0 * batched / st,
            100.0 * SHARE_TARGET,
            if batched >= SHARE_TARGET * st { "met" } else { "MISSED" }
        )?;
        if quick {
            writeln!(out, "  (d) memory run skipped (--quick)")?;
        } else {
            let (marks, peak) = memory_run(dir, broker.port).await?;
            let marks: Vec<String> = marks.iter().map(|m| format!("{m:.0}")).collect();
            writeln!(
                out,
                "  (d) daemon memory, 1,000 loops × 3 tags × 10 min at 1 Hz: RSS {} MB along the run, peak {peak:.0} MB — target ≤ {MEMORY_TARGET_MB:.0} MB and flat — {}",
                marks.join(" → "),
                if peak <= MEMORY_TARGET_MB { "met" } else { "MISSED" }
            )?;
        }
        drop(broker);
        Ok(())
    })
}
