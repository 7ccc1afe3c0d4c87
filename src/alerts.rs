//! Alerts: the conditions the daemon raises, the sentence a person reads, the numbers behind it,
//! and the JSON published on the alert topic. Pure: built from values, no I/O, no clock. The
//! store keeps them ([`crate::store::Store::raise_alert`], one open alert per loop and kind); the
//! daemon's writer raises them; the report and the live page read them back.

use crate::analysis::{CAUTION, EpisodeResult, Verdict};
use crate::sample::Signal;
use crate::store::{AlertInput, AlertRow};
use crate::units::{rfc3339, s_to_ms};
use serde_json::{Value, json};

/// What kind of condition an alert is about: one open alert per loop and kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum AlertKind {
    /// A setpoint change missed its spec for a known reason (a verdict that
    /// [`Verdict::is_miss`]).
    Missed(Verdict),
    /// A signal the configuration expects has been silent for longer than its stale limit.
    StaleTag,
}

impl AlertKind {
    /// The kind as stored and published (`tuning_limited`, …, `stale_tag`).
    pub fn as_str(self) -> &'static str {
        match self {
            AlertKind::Missed(v) => v.as_str(),
            AlertKind::StaleTag => "stale_tag",
        }
    }

    /// The kind as people read it (`tuning-limited`, …, `stale tag`).
    pub fn label(self) -> &'static str {
        match self {
            AlertKind::Missed(v) => v.label(),
            AlertKind::StaleTag => "stale tag",
        }
    }

    /// The kind from its stored spelling.
    pub fn parse(stored: &str) -> Option<AlertKind> {
        if stored == AlertKind::StaleTag.as_str() {
            return Some(AlertKind::StaleTag);
        }
        Verdict::ALL
            .into_iter()
            .find(|v| v.as_str() == stored)
            .map(AlertKind::Missed)
    }
}

/// The alert for a scored setpoint change, when its verdict is a miss; `None` otherwise. Seen at
/// the later of the change's start and its window's end.
pub fn missed_change(loop_tag: &str, r: &EpisodeResult, is_final: bool) -> Option<AlertInput> {
    // Marginal verdicts raise no alert: they are listed to watch in the summaries.
    if !r.verdict.is_miss() || r.is_marginal() {
        return None;
    }
    let (start_ms, end_ms) = (s_to_ms(r.start_s), s_to_ms(r.end_s));
    let evidence = json!({
        "start": rfc3339(start_ms),
        "sp_from": r.sp_from,
        "sp_to": r.sp_to,
        "settling_time_s": r.settling_time_s,
        "overshoot_pct": r.overshoot_pct,
        "min_settling_time_s": r.min_settling_time_s,
        "required_op_limit": r.required_op_limit,
        "capacity_ratio": r.capacity_ratio,
        "saturation_duty": r.saturation_duty,
        "min_settling_time_range_s": r.min_settling_time_range_s,
        "confidence": r.confidence,
        "final": is_final,
    });
    Some(AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::Missed(r.verdict).as_str().to_string(),
        message: format!("{loop_tag}: {}", r.reason),
        evidence,
        seen_ms: start_ms.max(end_ms),
    })
}

/// One expected signal that has gone silent, with its newest sample if it ever had one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Silent {
    pub signal: Signal,
    pub last_sample_ms: Option<i64>,
}

/// The `stale_tag` alert for a loop: the message names the signals that newly fell silent
/// (`fresh`), the evidence gives every silent signal's newest sample.
pub fn stale_tag(loop_tag: &str, fresh: &[Signal], silent: &[Silent], now_ms: i64) -> AlertInput {
    let names: Vec<&str> = fresh.iter().map(|s| s.as_str()).collect();
    let evidence: serde_json::Map<String, Value> = silent
        .iter()
        .map(|s| {
            let last = s.last_sample_ms.map(rfc3339);
            (
                s.signal.as_str().to_string(),
                json!({ "last_sample": last }),
            )
        })
        .collect();
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::StaleTag.as_str().to_string(),
        message: format!(
            "{loop_tag}: no {} sample for more than the expected period times the stale limit",
            names.join("/")
        ),
        evidence: Value::Object(evidence),
        seen_ms: now_ms,
    }
}

/// The JSON published on the alert topic for a stored alert.
pub fn payload(row: &AlertRow) -> Value {
    json!({
        "id": row.id,
        "loop": row.loop_tag,
        "kind": row.kind,
        "state": row.state,
        "count": row.count,
        "first_seen": rfc3339(row.first_seen_ms),
        "last_seen": rfc3339(row.last_seen_ms),
        "message": row.message,
        "evidence": row.evidence,
        "caution": CAUTION,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::segment::{ChangeShape, WindowEnd};
    use crate::store::AlertState;

    fn episode(verdict: Verdict) -> EpisodeResult {
        EpisodeResult {
            start_s: 1_800_000_000.0,
            end_s: 1_800_000_600.5,
            sp_from: 60.0,
            sp_to: 70.0,
            shape: ChangeShape::Step,
            window_end: WindowEnd::NextChange,
            samples: 600,
            settling_time_s: Some(420.0),
            overshoot_pct: 3.0,
            rise_time_s: Some(100.0),
            iae_per_delta_s: 50.0,
            saturation_duty: 0.4,
            pv_smoothing_samples: 1,
            op_start: 50.0,
            op_headroom: 50.0,
            peak_op: 100.0,
            min_settling_time_s: Some(400.0),
            reach: Some(20.0),
            required_op_limit: Some(120.0),
            capacity_ratio: Some(1.4),
            verdict,
            reason: "the heater ran flat out".into(),
            start_pv: None,
            pv_moving: false,
            confidence: None,
            confidence_reasons: Vec::new(),
            min_settling_time_range_s: None,
            reach_range: None,
            capacity_ratio_range: None,
            bound_beaten: false,
            quality: Vec::new(),
            deciding_step: None,
        }
    }

    #[test]
    fn kinds_keep_their_stored_spellings() {
        let k = AlertKind::Missed(Verdict::ActuatorLimited);
        assert_eq!(k.as_str(), "actuator_limited");
        assert_eq!(k.label(), "actuator-limited");
        assert_eq!(AlertKind::StaleTag.as_str(), "stale_tag");
        assert_eq!(AlertKind::StaleTag.label(), "stale tag");
        for k in Verdict::ALL
            .map(AlertKind::Missed)
            .into_iter()
            .chain([AlertKind::StaleTag])
        {
            assert_eq!(AlertKind::parse(k.as_str()), Some(k));
        }
        assert_eq!(AlertKind::parse("nonsense"), None);
    }

    #[test]
    fn only_a_missed_change_raises_an_alert() {
        for v in Verdict::ALL {
            assert_eq!(
                missed_change("TIC-1", &episode(v), true).is_some(),
                v.is_miss(),
                "{v:?}"
            );
        }
        let a = missed_change("TIC-1", &episode(Verdict::ActuatorLimited), false).unwrap();
        assert_eq!(a.kind, "actuator_limited");
        assert_eq!(a.message, "TIC-1: the heater ran flat out");
        assert_eq!(a.seen_ms, 1_800_000_600_500);
        assert_eq!(a.evidence["start"], "2027-01-15T08:00:00Z");
        assert_eq!(a.evidence["final"], false);
        assert_eq!(a.evidence["capacity_ratio"], 1.4);
    }

    #[test]
    fn a_marginal_miss_raises_no_alert_and_a_clear_one_does() {
        use crate::analysis::confidence::Confidence;
        let mut e = episode(Verdict::ActuatorLimited);
        e.confidence = Some(Confidence::Marginal);
        assert!(missed_change("TIC-1", &e, true).is_none());
        e.confidence = Some(Confidence::Clear);
        let a = missed_change("TIC-1", &e, true).unwrap();
        assert_eq!(a.evidence["confidence"], "clear");
    }

    #[test]
    fn a_stale_alert_names_the_new_silence_and_shows_every_silent_signal() {
        let silent = [
            Silent {
                signal: Signal::Pv,
                last_sample_ms: Some(1_800_000_000_000),
            },
            Silent {
                signal: Signal::Op,
                last_sample_ms: None,
            },
        ];
        let a = stale_tag("TIC-1", &[Signal::Op], &silent, 7);
        assert_eq!(a.kind, "stale_tag");
        assert!(
            a.message.starts_with("TIC-1: no op sample"),
            "{}",
            a.message
        );
        assert_eq!(a.evidence["pv"]["last_sample"], "2027-01-15T08:00:00Z");
        assert!(a.evidence["op"]["last_sample"].is_null());
        assert_eq!(a.seen_ms, 7);
    }

    #[test]
    fn the_published_payload_carries_the_row_and_the_caution() {
        let row = AlertRow {
            id: 3,
            loop_tag: "TIC-1".into(),
            kind: "stale_tag".into(),
            state: AlertState::Open,
            first_seen_ms: 0,
            last_seen_ms: 1_000,
            count: 2,
            message: "m".into(),
            evidence: json!({"pv": 1}),
            acked_ms: None,
            is_new: true,
        };
        let p = payload(&row);
        assert_eq!(p["loop"], "TIC-1");
        assert_eq!(p["state"], "open");
        assert_eq!(p["last_seen"], "1970-01-01T00:00:01Z");
        assert_eq!(p["count"], 2);
        assert_eq!(p["evidence"]["pv"], 1);
        assert_eq!(p["caution"], CAUTION);
    }
}
