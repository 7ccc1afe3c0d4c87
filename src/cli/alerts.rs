//! `headroom alerts`: alerts from the store (by default those not yet acknowledged), and
//! `headroom alerts ack ID` to acknowledge one, recording who and when.

use super::store::{StoreArgs, open_read_only, store_path, write_json};
use super::{Failure, Usage};
use crate::alerts::AlertKind;
use crate::store::{Acknowledgement, AlertRow, AlertState, Store};
use crate::units::{human_duration, ms_to_s, rfc3339};
use clap::{Args, Subcommand};
use std::io::Write;

#[derive(Debug, Args)]
pub struct AlertsArgs {
    #[command(subcommand)]
    pub action: Option<AlertsAction>,
    #[command(flatten)]
    pub store: StoreArgs,
    /// Every alert, acknowledged ones too (by default only active and returned alerts).
    #[arg(long)]
    pub all: bool,
    /// Only alerts not yet acknowledged: the default (kept for scripts).
    #[arg(long, hide = true, conflicts_with = "all")]
    pub open: bool,
    /// Acknowledge the alert with this id, as the login name (kept for scripts; prefer
    /// `alerts ack ID`). Unlike `ack`, an alert acknowledged before is an error (exit code 2).
    #[arg(long, value_name = "ID", value_parser = clap::value_parser!(i64).range(1..))]
    pub ack: Option<i64>,
}

#[derive(Debug, Subcommand)]
pub enum AlertsAction {
    /// Acknowledge an alert: record that a person has seen it, who and when. An alert
    /// acknowledged before keeps its first acknowledgement (reported, exit code 0); an unknown
    /// id is an error (exit code 2).
    Ack(AckArgs),
}

#[derive(Debug, Args)]
pub struct AckArgs {
    /// The alert's id, as `headroom alerts` lists it.
    #[arg(value_name = "ID", value_parser = clap::value_parser!(i64).range(1..))]
    pub id: i64,
    /// Who acknowledges it; by default the login name (USER, else LOGNAME).
    #[arg(long, value_name = "NAME")]
    pub by: Option<String>,
    #[command(flatten)]
    pub store: StoreArgs,
}

pub async fn alerts(args: &AlertsArgs, out: &mut dyn Write) -> Result<(), Failure> {
    if let Some(AlertsAction::Ack(ack)) = &args.action {
        // The store may be named before `ack` or after it.
        let given = |s: &StoreArgs| s.db.is_some() || s.config.is_some();
        let store = if given(&ack.store) {
            &ack.store
        } else {
            &args.store
        };
        let by = acknowledger(ack.by.as_deref(), env_name)?;
        let json = ack.store.json || args.store.json;
        return acknowledge(store, ack.id, Some(&by), json, out).await;
    }
    if let Some(id) = args.ack {
        let by = acknowledger(None, env_name).ok();
        return acknowledge_once(&args.store, id, by.as_deref(), out).await;
    }
    let store = open_read_only(&args.store).await?;
    let rows = store.alerts(!args.all).await?;
    store.close().await;
    if args.store.json {
        // With `--config`, each alert also carries the hash of its loop's settings there.
        let facts = super::store::loop_facts(&args.store)?;
        let listed: Vec<serde_json::Value> = rows
            .iter()
            .map(|row| {
                let mut v = crate::alerts::listing(row);
                v["settings_hash"] = facts
                    .get(&row.loop_tag)
                    .and_then(|f| f.settings_hash.clone())
                    .into();
                v
            })
            .collect();
        return write_json(&listed, out);
    }
    if rows.is_empty() {
        let none = if args.all {
            "No alerts."
        } else {
            "No active or returned alerts (--all lists acknowledged ones too)."
        };
        writeln!(out, "{none}")?;
    }
    for a in &rows {
        writeln!(out, "{}", describe(a))?;
    }
    Ok(())
}

/// Who acknowledges: the name given, else the login name from the environment.
fn acknowledger(given: Option<&str>, env: fn(&str) -> Option<String>) -> Result<String, Usage> {
    let name = given
        .map(str::to_owned)
        .or_else(|| env("USER"))
        .or_else(|| env("LOGNAME"));
    match name.map(|n| n.trim().to_owned()) {
        Some(n) if !n.is_empty() => Ok(n),
        _ => Err(Usage::NoAcknowledger),
    }
}

fn env_name(var: &str) -> Option<String> {
    std::env::var(var).ok()
}

/// Acknowledges alert `id` now in the store (opened for writing: the query commands' read-only
/// store cannot).
async fn ack_now(store: &StoreArgs, id: i64, by: Option<&str>) -> Result<Acknowledgement, Failure> {
    let path = store_path(store)?;
    let store = Store::open(&path).await.map_err(Failure::StoreOpen)?;
    let done = store
        .ack_alert(id, by, jiff::Timestamp::now().as_millisecond())
        .await;
    store.close().await;
    Ok(done?)
}

/// `alerts ack ID`: acknowledges, or reports the acknowledgement that stands.
async fn acknowledge(
    store: &StoreArgs,
    id: i64,
    by: Option<&str>,
    json: bool,
    out: &mut dyn Write,
) -> Result<(), Failure> {
    let (row, line) = match ack_now(store, id, by).await? {
        Acknowledgement::Unknown => return Err(Usage::NoAlert(id).into()),
        Acknowledgement::Done(row) => {
            let line = format!("alert {id} acknowledged{}", acked(&row));
            (row, line)
        }
        Acknowledgement::Already(row) => {
            let line = format!(
                "alert {id} was already acknowledged{}; that stands",
                acked(&row)
            );
            (row, line)
        }
    };
    if json {
        return write_json(&crate::alerts::listing(&row), out);
    }
    writeln!(out, "{line}")?;
    Ok(())
}

/// `alerts --ack ID`, as before `alerts ack`: an alert acknowledged before is an error.
async fn acknowledge_once(
    store: &StoreArgs,
    id: i64,
    by: Option<&str>,
    out: &mut dyn Write,
) -> Result<(), Failure> {
    match ack_now(store, id, by).await? {
        Acknowledgement::Done(row) => {
            writeln!(out, "alert {id} acknowledged{}", acked(&row))?;
            Ok(())
        }
        Acknowledgement::Already(_) | Acknowledgement::Unknown => {
            Err(Usage::NoOpenAlert(id).into())
        }
    }
}

/// ` by NAME at TIME` for an acknowledged alert.
fn acked(row: &AlertRow) -> String {
    let by = row
        .acked_by
        .as_deref()
        .map(|b| format!(" by {b}"))
        .unwrap_or_default();
    let at = row
        .acked_ms
        .map(|t| format!(" at {}", rfc3339(t)))
        .unwrap_or_default();
    format!("{by}{at}")
}

/// One alert for people: id, loop, kind and state; its span (times in RFC 3339, as stored);
/// its message; who acknowledged it.
fn describe(a: &AlertRow) -> String {
    let kind = AlertKind::label_of(&a.kind);
    let length = human_duration(ms_to_s(a.last_seen_ms - a.first_seen_ms));
    // A change's span is the change itself; a loop-wide condition may still be going on.
    let span = if a.ongoing && a.change_start_ms.is_none() {
        format!(
            "since {}, still so at {} ({length})",
            rfc3339(a.first_seen_ms),
            rfc3339(a.last_seen_ms)
        )
    } else {
        format!(
            "from {} to {} ({length})",
            rfc3339(a.first_seen_ms),
            rfc3339(a.last_seen_ms)
        )
    };
    let mut text = format!(
        "#{} {} {kind}, {}: {span}\n    {}",
        a.id,
        a.loop_tag,
        a.state.label(),
        a.message
    );
    if a.state == AlertState::Acknowledged {
        text.push_str(&format!("\n    acknowledged{}", acked(a)));
    }
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_acknowledger_is_the_name_given_else_the_login_name() {
        let none = |_: &str| None;
        let user = |v: &str| (v == "USER").then(|| "ann".to_owned());
        let logname = |v: &str| (v == "LOGNAME").then(|| "bob".to_owned());
        assert_eq!(acknowledger(Some("cy"), user).unwrap(), "cy");
        assert_eq!(acknowledger(None, user).unwrap(), "ann");
        assert_eq!(acknowledger(None, logname).unwrap(), "bob");
        assert!(matches!(
            acknowledger(None, none),
            Err(Usage::NoAcknowledger)
        ));
        assert!(matches!(
            acknowledger(Some("  "), none),
            Err(Usage::NoAcknowledger)
        ));
    }

    #[test]
    fn an_alert_reads_with_its_state_span_and_acknowledgement() {
        let mut a = AlertRow {
            id: 7,
            loop_tag: "LIC-150".into(),
            kind: "stale_tag".into(),
            state: AlertState::Active,
            ongoing: true,
            change_start_ms: None,
            first_seen_ms: 1_800_000_000_000,
            last_seen_ms: 1_800_028_800_000,
            raised_ms: 1_800_000_060_000,
            returned_ms: None,
            count: 1,
            message: "LIC-150: no pv sample".into(),
            evidence: serde_json::json!({}),
            acked_ms: None,
            acked_by: None,
            is_new: false,
        };
        assert_eq!(
            describe(&a),
            "#7 LIC-150 stale tag, active: since 2027-01-15T08:00:00Z, still so at \
             2027-01-15T16:00:00Z (8.0 h)\n    LIC-150: no pv sample"
        );
        // A change's alert reads as the change's span, even while followed.
        let mut change = a.clone();
        change.change_start_ms = Some(change.first_seen_ms);
        assert!(
            describe(&change).contains("active: from 2027-01-15T08:00:00Z to 2027-01-15T16:00:00Z"),
            "{}",
            describe(&change)
        );
        a.ongoing = false;
        a.state = AlertState::Acknowledged;
        a.acked_by = Some("ann".into());
        a.acked_ms = Some(1_800_030_000_000);
        assert_eq!(
            describe(&a),
            "#7 LIC-150 stale tag, acknowledged: from 2027-01-15T08:00:00Z to \
             2027-01-15T16:00:00Z (8.0 h)\n    LIC-150: no pv sample\n    acknowledged by ann \
             at 2027-01-15T16:20:00Z"
        );
    }
}
