//! Stale tags against a real Mosquitto. A signal is stale when it has had no sample for
//! `stale_after_periods` × `expected_period_s` on the plant's clock: the newest data time the
//! daemon has seen, advanced by wall time only while nothing arrives.
//!
//! - A PV that stops while SP and OP keep coming is stale once the data time carried by SP and
//!   OP has moved past the limit: one `stale_tag` alert naming `pv` only, in the store and on
//!   the alert topic, and none while all three flowed.
//! - When everything stops, the plant's clock runs on wall time, and the alert comes once the
//!   limit has passed on it.
//! - A signal that starts a little after the others, within the limit, is not stale.
//! - An outage is one alert spanning it: from the last sample before the silence, its end
//!   advancing while the silence lasts, and returning when data flows again, the span then
//!   ending at the first sample after the silence — in the store and on the alert topic.

use crate::common::broker::{BrokerOptions, Mosquitto};
use crate::common::clients::{Message, PublishOptions, Spy, SpyOptions, publish, publish_all};
use crate::common::daemon::{
    DaemonProcess, LoopRig, LoopTopics, TestConfig, TestLoop, Workspace, eventually, headroom,
    stored_keys, unique,
};
use crate::common::plant::{json_sample, recent_past_ms};
use headroom::sample::Signal;
use serde_json::Value;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

const TAG: &str = "FIC-501";
/// How often every signal of the test loop is due.
const PERIOD_S: f64 = 1.0;

/// A broker, a daemon watching one loop, and a spy on the daemon's alert topic.
struct Rig {
    broker: Mosquitto,
    _ws: Workspace,
    cfg: TestConfig,
    topics: LoopTopics,
    db: PathBuf,
    spy: Spy,
    daemon: DaemonProcess,
}

impl Rig {
    async fn start(name: &str, stale_after_periods: f64) -> Rig {
        let broker = Mosquitto::start(BrokerOptions::default()).await;
        let LoopRig {
            ws,
            topics,
            cfg,
            config,
            db,
        } = LoopRig::with(TestConfig::new(broker.port(), name), TAG, |l| TestLoop {
            expected_period_s: PERIOD_S,
            stale_after_periods: Some(stale_after_periods),
            ..l
        });
        let spy = Spy::start(
            broker.port(),
            SpyOptions {
                client_id: unique("spy"),
                filters: vec![cfg.alert_topic.clone()],
                clean_session: true,
            },
        )
        .await;
        let daemon = DaemonProcess::start_subscribed(&config).await;
        Rig {
            db,
            broker,
            _ws: ws,
            cfg,
            topics,
            spy,
            daemon,
        }
    }

    /// Publishes at `per_second` messages a second and returns once the broker has
    /// acknowledged all of them.
    async fn publish(&self, msgs: &[Message], per_second: f64) {
        publish_all(
            self.broker.port(),
            msgs,
            PublishOptions {
                per_second: Some(per_second),
                deadline: Duration::from_secs(120),
                ..PublishOptions::new(unique("gateway"))
            },
        )
        .await;
    }

    /// The `stale_tag` alerts for the loop published on the alert topic so far, in order.
    fn stale_on_topic(&self) -> Vec<Value> {
        self.spy
            .received()
            .into_iter()
            .filter(|m| m.topic == self.cfg.alert_topic)
            .map(|m| serde_json::from_slice::<Value>(&m.payload).expect("an alert is JSON"))
            .filter(|a| a["kind"] == "stale_tag" && a["loop"] == TAG)
            .collect()
    }

    /// The `stale_tag` alerts for the loop in the store, as `headroom alerts --json` lists them
    /// (active and returned).
    async fn stale_in_store(&self) -> Vec<Value> {
        let out = headroom(["alerts", "--db", path(&self.db), "--json"]).await;
        let all: Vec<Value> = serde_json::from_str(&out).expect("alerts --json is JSON");
        all.into_iter()
            .filter(|a| a["kind"] == "stale_tag" && a["loop_tag"] == TAG)
            .collect()
    }

    async fn stop(mut self) {
        let status = self.daemon.sigterm().await;
        assert!(status.success(), "the daemon exited with {status}");
    }
}

/// One JSON message per listed signal at each whole second `ks` after `t0_ms`.
fn messages(
    topics: &LoopTopics,
    t0_ms: i64,
    ks: std::ops::Range<i64>,
    signals: &[Signal],
) -> Vec<Message> {
    let mut msgs = Vec::new();
    for k in ks {
        let t = t0_ms + k * 1000;
        for &s in signals {
            let value = match s {
                Signal::Sp => 40.0,
                Signal::Pv => 39.5 + 0.01 * (k % 7) as f64,
                _ => 25.0,
            };
            msgs.push((topics.of(s).to_string(), json_sample(value, t)));
        }
    }
    msgs
}

const ALL: [Signal; 3] = [Signal::Sp, Signal::Pv, Signal::Op];

/// The names of the signals an alert's evidence lists.
fn named(alert: &Value) -> BTreeSet<String> {
    alert["evidence"]
        .as_object()
        .unwrap_or_else(|| panic!("the evidence is an object: {alert:#}"))
        .keys()
        .cloned()
        .collect()
}

fn names(list: &[&str]) -> BTreeSet<String> {
    list.iter().map(|s| s.to_string()).collect()
}

/// Epoch milliseconds of an RFC 3339 time in JSON.
fn ms(v: &Value) -> i64 {
    let s = v.as_str().unwrap_or_else(|| panic!("not a time: {v}"));
    let t: jiff::Timestamp = s.parse().unwrap_or_else(|e| panic!("{s}: {e}"));
    t.as_millisecond()
}

fn path(p: &Path) -> &str {
    p.to_str().expect("UTF-8 temp path")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_pv_that_stops_while_sp_and_op_flow_is_stale_on_the_data_clock() {
    let stale_after_periods = 5.0;
    let limit_ms = (stale_after_periods * PERIOD_S * 1000.0) as i64;
    let rig = Rig::start("stale-pv", stale_after_periods).await;

    // Half a minute of all three signals, then SP and OP alone for ten minutes of data time.
    // Published ten data seconds per wall second, stamped two hours ago: the data's own time
    // is the only clock that can make PV stale while SP and OP keep arriving.
    let t0_ms = recent_past_ms(2 * 3600);
    let pv_last_ms = t0_ms + 29_000;
    let mut msgs = messages(&rig.topics, t0_ms, 0..30, &ALL);
    msgs.extend(messages(
        &rig.topics,
        t0_ms,
        30..630,
        &[Signal::Sp, Signal::Op],
    ));
    let port = rig.broker.port();
    let gateway = tokio::spawn(async move {
        publish(
            port,
            &msgs,
            PublishOptions {
                per_second: Some(20.0),
                deadline: Duration::from_secs(120),
                ..PublishOptions::new(unique("gateway"))
            },
        )
        .await
    });

    let alert = eventually(
        "a stale_tag alert on the alert topic",
        Duration::from_secs(60),
        async || {
            assert!(
                !gateway.is_finished(),
                "SP and OP stopped before PV was found stale"
            );
            rig.stale_on_topic()
                .into_iter()
                .next()
                .ok_or_else(|| "none yet".to_string())
        },
    )
    .await;
    let raised_ms = ms(&alert["raised"]);
    // SP and OP keep arriving, their data time well past the alert; still nothing of theirs
    // is stale.
    eventually(
        "SP and OP samples stamped after the alert in the store",
        Duration::from_secs(60),
        async || {
            assert!(!gateway.is_finished(), "SP and OP stopped too soon");
            let keys = stored_keys(&rig.db, &[TAG]).await?;
            let newest = |signal: Signal| {
                keys.iter()
                    .filter(|(_, s, _)| *s == signal)
                    .map(|(_, _, t)| *t)
                    .max()
                    .unwrap_or(i64::MIN)
            };
            let (sp, op) = (newest(Signal::Sp), newest(Signal::Op));
            if sp.min(op) > raised_ms + 2 * limit_ms {
                Ok(())
            } else {
                Err(format!("newest SP {sp}, OP {op}; alert at {raised_ms}"))
            }
        },
    )
    .await;
    let stored = rig.stale_in_store().await;
    let on_topic = rig.stale_on_topic();
    assert!(
        !gateway.is_finished(),
        "SP and OP were still being published"
    );
    gateway.abort();

    // On the alert topic: PV alone, silent since its last sample for more than the limit on
    // the data's clock (two hours behind the wall clock).
    assert_eq!(named(&alert), names(&["pv"]), "{alert:#}");
    assert_eq!(
        ms(&alert["evidence"]["pv"]["last_sample"]),
        pv_last_ms,
        "{alert:#}"
    );
    assert!(
        raised_ms - pv_last_ms > limit_ms,
        "raised {} ms after PV's last sample, before the {limit_ms} ms limit: {alert:#}",
        raised_ms - pv_last_ms
    );
    assert!(
        raised_ms < jiff::Timestamp::now().as_millisecond() - 3_600_000,
        "the alert is timed by the wall clock, not the data's: {alert:#}"
    );
    assert!(
        alert["message"].as_str().is_some_and(|m| m.contains("pv")),
        "{alert:#}"
    );
    // Nothing was stale while all three flowed, and SP and OP never were: every stale alert so
    // far names PV alone.
    assert!(
        on_topic.len() == 1 && named(&on_topic[0]) == names(&["pv"]),
        "stale alerts published: {on_topic:#?}"
    );

    // Its span starts where PV fell silent: its last sample.
    assert_eq!(ms(&alert["first_seen"]), pv_last_ms, "{alert:#}");

    // In the store: the same alert, raised once, active.
    assert_eq!(stored.len(), 1, "{stored:#?}");
    let a = &stored[0];
    assert_eq!(a["id"], alert["id"], "{a:#}");
    assert_eq!(a["state"], "active", "{a:#}");
    assert_eq!(
        a["count"], 1,
        "a stale alert before PV stopped was folded in: {a:#}"
    );
    assert_eq!(a["raised_ms"], raised_ms, "{a:#}");
    assert_eq!(a["first_seen_ms"], pv_last_ms, "{a:#}");
    assert_eq!(named(a), names(&["pv"]), "{a:#}");

    rig.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn when_nothing_arrives_the_stale_alert_comes_after_the_limit_in_wall_time() {
    let stale_after_periods = 5.0;
    let limit = Duration::from_secs_f64(stale_after_periods * PERIOD_S);
    let rig = Rig::start("stale-all", stale_after_periods).await;

    // Twenty seconds of data, fast; then the last time step on its own, and then silence.
    let t0_ms = recent_past_ms(2 * 3600);
    let last_ms = t0_ms + 20_000;
    rig.publish(&messages(&rig.topics, t0_ms, 0..20, &ALL), 60.0)
        .await;
    let silence_from = Instant::now();
    rig.publish(&messages(&rig.topics, t0_ms, 20..21, &ALL), 60.0)
        .await;

    let alert = eventually(
        "a stale_tag alert on the alert topic",
        Duration::from_secs(60),
        async || {
            rig.stale_on_topic()
                .into_iter()
                .next()
                .ok_or_else(|| "none yet".to_string())
        },
    )
    .await;
    let waited = silence_from.elapsed();

    // The daemon saw the last samples after `silence_from`; with nothing newer, its clock runs
    // on wall time from there, so the alert cannot come sooner than the limit.
    assert!(
        waited >= limit,
        "the alert came {waited:?} after the last samples were sent, within the {limit:?} limit"
    );
    assert_eq!(named(&alert), names(&["op", "pv", "sp"]), "{alert:#}");
    for s in ["sp", "pv", "op"] {
        assert_eq!(
            ms(&alert["evidence"][s]["last_sample"]),
            last_ms,
            "{alert:#}"
        );
    }
    let raised_ms = ms(&alert["raised"]);
    assert!(raised_ms - last_ms > limit.as_millis() as i64, "{alert:#}");
    assert_eq!(ms(&alert["first_seen"]), last_ms, "{alert:#}");
    assert!(
        raised_ms < jiff::Timestamp::now().as_millisecond() - 3_600_000,
        "the alert is timed by the wall clock, not the data's advanced by it: {alert:#}"
    );

    let stored = rig.stale_in_store().await;
    assert_eq!(stored.len(), 1, "{stored:#?}");
    assert_eq!(stored[0]["id"], alert["id"]);
    assert_eq!(stored[0]["count"], 1, "{:#}", stored[0]);
    assert_eq!(named(&stored[0]), names(&["op", "pv", "sp"]));

    rig.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_signal_that_starts_within_the_limit_after_the_others_is_not_stale() {
    let stale_after_periods = 10.0;
    let limit_ms = (stale_after_periods * PERIOD_S * 1000.0) as i64;
    let rig = Rig::start("stale-join", stale_after_periods).await;

    // In real time: SP and OP for three seconds, then PV joins them for six more. PV's first
    // sample comes three seconds after the daemon began to watch, well within the ten-second
    // limit, and the daemon's one-second checks run while PV has not been seen yet.
    let t0_ms = recent_past_ms(60);
    let last_ms = t0_ms + 8_000;
    rig.publish(
        &messages(&rig.topics, t0_ms, 0..3, &[Signal::Sp, Signal::Op]),
        2.0,
    )
    .await;
    rig.publish(&messages(&rig.topics, t0_ms, 3..9, &ALL), 3.0)
        .await;
    eventually(
        "every sample in the store",
        Duration::from_secs(60),
        async || {
            let n = stored_keys(&rig.db, &[TAG]).await?.len();
            if n == 6 + 18 {
                Ok(())
            } else {
                Err(format!("{n} of 24 stored"))
            }
        },
    )
    .await;

    // Alerts raised once data stopped are legitimate (the test may be slow to look); any timed
    // before the limit had passed after the last sample was raised while the signals flowed.
    let early = |seen_ms: i64| seen_ms - last_ms <= limit_ms;
    let on_topic: Vec<Value> = rig
        .stale_on_topic()
        .into_iter()
        .filter(|a| early(ms(&a["raised"])))
        .collect();
    assert!(
        on_topic.is_empty(),
        "stale alerts while every signal was within its limit: {on_topic:#?}"
    );
    let stored: Vec<Value> = rig
        .stale_in_store()
        .await
        .into_iter()
        .filter(|a| early(a["raised_ms"].as_i64().expect("raised_ms")))
        .collect();
    assert!(
        stored.is_empty(),
        "stale alerts while every signal was within its limit: {stored:#?}"
    );

    rig.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_outage_is_one_alert_that_spans_it_and_returns_when_data_flows() {
    let stale_after_periods = 3.0;
    let rig = Rig::start("stale-back", stale_after_periods).await;

    // Twenty seconds of data, then silence: the daemon's clock runs on wall time.
    let t0_ms = recent_past_ms(2 * 3600);
    let last_ms = t0_ms + 19_000;
    rig.publish(&messages(&rig.topics, t0_ms, 0..20, &ALL), 60.0)
        .await;
    let raised = eventually(
        "a stale_tag alert in the store",
        Duration::from_secs(60),
        async || {
            rig.stale_in_store()
                .await
                .into_iter()
                .next()
                .ok_or_else(|| "none yet".to_string())
        },
    )
    .await;
    assert_eq!(raised["state"], "active", "{raised:#}");
    assert_eq!(raised["ongoing"], true, "{raised:#}");
    assert_eq!(raised["first_seen_ms"], last_ms, "{raised:#}");
    assert!(raised["returned"].is_null(), "{raised:#}");

    // While the silence lasts, the alert's end advances; it stays one alert.
    let raised_last = raised["last_seen_ms"].as_i64().expect("last_seen_ms");
    let grown = eventually(
        "the outage's end advancing in the store",
        Duration::from_secs(60),
        async || {
            let stored = rig.stale_in_store().await;
            match stored.as_slice() {
                [a] if a["last_seen_ms"].as_i64() > Some(raised_last) => Ok(a.clone()),
                other => Err(format!("{other:#?}")),
            }
        },
    )
    .await;
    assert_eq!(grown["id"], raised["id"]);
    assert_eq!(grown["first_seen_ms"], last_ms, "{grown:#}");

    // Data again, stamped an hour after the last sample: an hour's outage, returned.
    let back_ms = last_ms + 3_600_000;
    let resumed: Vec<Message> = messages(&rig.topics, back_ms, 0..5, &ALL);
    rig.publish(&resumed, 60.0).await;
    let back = eventually(
        "the alert returned in the store",
        Duration::from_secs(60),
        async || {
            let stored = rig.stale_in_store().await;
            match stored.as_slice() {
                [a] if a["state"] == "returned" => Ok(a.clone()),
                other => Err(format!("{other:#?}")),
            }
        },
    )
    .await;
    assert_eq!(back["id"], raised["id"]);
    assert_eq!(back["ongoing"], false, "{back:#}");
    assert_eq!(back["first_seen_ms"], last_ms, "{back:#}");
    assert_eq!(back["last_seen_ms"], back_ms, "{back:#}");
    assert_eq!(back["returned_ms"], back_ms, "{back:#}");
    for s in ["sp", "pv", "op"] {
        assert_eq!(ms(&back["evidence"][s]["last_sample"]), last_ms, "{back:#}");
        assert_eq!(
            ms(&back["evidence"][s]["first_sample_after"]),
            back_ms,
            "{back:#}"
        );
    }
    assert!(
        back["message"]
            .as_str()
            .is_some_and(|m| m.contains("after 60.0 min of silence")),
        "{back:#}"
    );

    // On the alert topic: raised, then returned, the same alert; nothing between.
    let on_topic = eventually(
        "the return on the alert topic",
        Duration::from_secs(30),
        async || {
            let seen = rig.stale_on_topic();
            if seen.last().is_some_and(|a| a["state"] == "returned") {
                Ok(seen)
            } else {
                Err(format!("{seen:#?}"))
            }
        },
    )
    .await;
    let states: Vec<&str> = on_topic
        .iter()
        .filter_map(|a| a["state"].as_str())
        .collect();
    assert_eq!(states, ["active", "returned"], "{on_topic:#?}");
    assert!(on_topic.iter().all(|a| a["id"] == raised["id"]));
    assert_eq!(ms(&on_topic[1]["first_seen"]), last_ms);
    assert_eq!(ms(&on_topic[1]["returned"]), back_ms);
    assert!(on_topic[1]["schema_version"].is_u64(), "{:#}", on_topic[1]);

    rig.stop().await;
}
