//! `headroom alerts` and `headroom alerts ack ID` as users meet them, on a store filled through
//! the store's own API: the default listing (active and returned), `--all`, acknowledging with
//! who and when, acknowledging twice, an unknown id, and no name to record.

use crate::common::{headroom_bin, run_headroom_text as run};
use headroom::store::{AlertInput, Store};
use serde_json::{Value, json};

/// A store with three alerts of one loop: a missed change (active), an outage that has ended
/// (returned), and an outage in progress (active). Returns their ids in that order.
async fn three_alerts(path: &std::path::Path) -> [i64; 3] {
    let store = Store::open(path).await.unwrap();
    let base = 1_800_000_000_000;
    let change = store
        .raise_alert(AlertInput {
            loop_tag: "TIC-9".into(),
            kind: "actuator_limited".into(),
            message: "TIC-9: the heater ran flat out".into(),
            evidence: json!({}),
            seen_ms: base + 900_000,
            since_ms: Some(base),
            change_start_ms: Some(base),
        })
        .await
        .unwrap();
    let outage = |since_ms: i64, seen_ms: i64| AlertInput {
        loop_tag: "TIC-9".into(),
        kind: "stale_tag".into(),
        message: "TIC-9: no pv sample".into(),
        evidence: json!({"pv": {"last_sample": null}}),
        seen_ms,
        since_ms: Some(since_ms),
        change_start_ms: None,
    };
    let ended = store
        .raise_alert(outage(base + 1_000_000, base + 1_100_000))
        .await
        .unwrap();
    store
        .return_alert(outage(base + 1_000_000, base + 1_500_000))
        .await
        .unwrap()
        .expect("the outage was followed");
    let ongoing = store
        .raise_alert(outage(base + 2_000_000, base + 2_100_000))
        .await
        .unwrap();
    store.close().await;
    [change.id, ended.id, ongoing.id]
}

fn json_of(out: &str) -> Value {
    serde_json::from_str(out).unwrap_or_else(|e| panic!("{e}: {out}"))
}

fn ids_and_states(listing: &Value) -> Vec<(i64, String)> {
    listing
        .as_array()
        .unwrap()
        .iter()
        .map(|a| {
            (
                a["id"].as_i64().unwrap(),
                a["state"].as_str().unwrap().to_owned(),
            )
        })
        .collect()
}

#[tokio::test]
async fn alerts_are_listed_acknowledged_with_who_and_when_and_the_first_acknowledgement_stands() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("a.db");
    let [change, ended, ongoing] = three_alerts(&db).await;
    let db = db.to_str().unwrap();

    // By default: active and returned, most recently seen first, each with its lifecycle.
    let (code, out, err) = run(&["alerts", "--db", db, "--json"]);
    assert_eq!(code, 0, "{err}");
    let listing = json_of(&out);
    assert_eq!(
        ids_and_states(&listing),
        [
            (ongoing, "active".into()),
            (ended, "returned".into()),
            (change, "active".into())
        ]
    );
    let returned = &listing[1];
    assert_eq!(returned["first_seen"], "2027-01-15T08:16:40Z");
    assert_eq!(returned["returned"], "2027-01-15T08:25:00Z");
    assert_eq!(listing[2]["change_start"], "2027-01-15T08:00:00Z");
    for a in listing.as_array().unwrap() {
        assert!(a["schema_version"].is_u64(), "{a:#}");
        assert_eq!(a["version"], env!("CARGO_PKG_VERSION"), "{a:#}");
    }
    let (_, text, _) = run(&["alerts", "--db", db]);
    assert!(
        text.contains(&format!(
            "#{ended} TIC-9 stale tag, returned: from 2027-01-15T08:16:40Z"
        )) && text.contains(&format!("#{change} TIC-9 actuator-limited, active")),
        "{text}"
    );

    // Acknowledged by a named person: recorded with who and when.
    let before = jiff::Timestamp::now();
    let (code, out, err) = run(&[
        "alerts",
        "ack",
        &ended.to_string(),
        "--by",
        "ann",
        "--db",
        db,
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(
        out.starts_with(&format!("alert {ended} acknowledged by ann at ")),
        "{out}"
    );
    let (_, out, _) = run(&["alerts", "--db", db, "--all", "--json"]);
    let all = json_of(&out);
    let acked = all
        .as_array()
        .unwrap()
        .iter()
        .find(|a| a["id"] == ended)
        .unwrap();
    assert_eq!(acked["state"], "acknowledged");
    assert_eq!(acked["acknowledged_by"], "ann");
    let at: jiff::Timestamp = acked["acknowledged_at"].as_str().unwrap().parse().unwrap();
    assert!(
        at >= before - jiff::SignedDuration::from_secs(1),
        "{at} {before}"
    );
    assert_eq!(
        acked["returned"], "2027-01-15T08:25:00Z",
        "the outage's end is kept"
    );
    // Gone from the default listing, still in --all.
    let (_, out, _) = run(&["alerts", "--db", db, "--json"]);
    assert_eq!(
        ids_and_states(&json_of(&out)),
        [(ongoing, "active".into()), (change, "active".into())]
    );

    // Acknowledging again: reported, not an error, and the first acknowledgement stands.
    let (code, out, err) = run(&[
        "alerts",
        "--db",
        db,
        "ack",
        &ended.to_string(),
        "--by",
        "bob",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(
        out.starts_with(&format!(
            "alert {ended} was already acknowledged by ann at "
        )),
        "{out}"
    );
    let (_, out, _) = run(&[
        "alerts",
        "ack",
        &ended.to_string(),
        "--by",
        "bob",
        "--db",
        db,
        "--json",
    ]);
    assert_eq!(json_of(&out)["acknowledged_by"], "ann", "{out}");

    // An unknown id is an error naming it.
    let (code, out, err) = run(&["alerts", "ack", "999", "--by", "ann", "--db", db]);
    assert_eq!(code, 2, "{out}");
    assert!(err.contains("no alert with id 999"), "{err}");
}

#[tokio::test]
async fn acknowledging_takes_the_login_name_and_refuses_when_there_is_none() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("a.db");
    let [change, _, ongoing] = three_alerts(&db).await;
    let ack = |id: i64, env: &[(&str, &str)]| {
        let mut cmd = std::process::Command::new(headroom_bin());
        cmd.args(["alerts", "ack", &id.to_string(), "--db"])
            .arg(&db)
            .env_remove("USER")
            .env_remove("LOGNAME");
        for (k, v) in env {
            cmd.env(k, v);
        }
        let out = cmd.output().unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).into_owned(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        )
    };
    let (code, _, err) = ack(change, &[]);
    assert_eq!(code, Some(2));
    assert!(err.contains("--by NAME"), "{err}");
    let (code, out, err) = ack(change, &[("LOGNAME", "cy")]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("acknowledged by cy"), "{out}");
    let (code, out, err) = ack(ongoing, &[("USER", "dee"), ("LOGNAME", "cy")]);
    assert_eq!(code, Some(0), "{err}");
    assert!(out.contains("acknowledged by dee"), "{out}");
}
