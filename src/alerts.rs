//! Alerts: the conditions the daemon raises, the sentence a person reads, the numbers behind it,
//! and the JSON published on the alert topic and printed by `headroom alerts --json`. Pure:
//! built from values, no I/O, no clock. The store keeps them ([`crate::store::Store::raise_alert`]);
//! the daemon's writer raises and returns them; the report and the live page read them back.
//!
//! # Lifecycle
//!
//! One alert per setpoint change and per spell of a loop-wide condition. Its state goes
//! **active** (the condition is present) → **returned** (it has gone by itself) →
//! **acknowledged** (a person has seen it: `headroom alerts ack ID`, with who and when). An
//! active alert can be acknowledged at once; an acknowledged alert whose condition is still
//! present goes on being updated (its span, its evidence, its end), and keeps its
//! acknowledgement. Acknowledging twice changes nothing: the first acknowledgement stands.
//!
//! - **A missed change** (a verdict that [`Verdict::is_miss`], not marginal) is one alert,
//!   identified by its loop and the change's start. The provisional alert (raised while the
//!   change is still open, once it has missed its spec time) is updated in place when the
//!   change is final: kind (the final verdict), message, evidence and span. If the final verdict
//!   is no miss, or is marginal, the alert returns. A final miss does not go away by itself (the
//!   change did miss): it stays active until acknowledged. The next change that misses is a new
//!   alert, whatever became of this one. Marginal verdicts never raise an alert.
//! - **A stale tag** (a signal the configuration expects, silent for longer than its stale
//!   limit) is one alert per outage of a loop. Its span starts at the newest sample before the
//!   silence (the last sample itself, not that time plus the limit; where a signal was never
//!   seen, where watching began), and its end advances while the silence lasts; `raised` is
//!   when the limit had passed. A signal falling silent during the outage joins it. The alert
//!   returns when every expected signal flows again, its span ending at the first sample after
//!   the silence (of the last signal to come back). A loop that falls silent again after that
//!   is a new outage and a new alert, acknowledged or not. A daemon that restarts during an
//!   outage picks the alert up again and ends it when data flows.
//!
//! Alerts are published on the alert topic when raised, when updated in place with news (a
//! change finalised, a signal newly silent) and when they return; not each time an outage's
//! end advances, and not on acknowledgement (that happens in another process, the command
//! line, which does not connect to the broker).

use crate::analysis::regulation::{self, Disturbance, Oscillation};
use crate::analysis::{CAUTION, EpisodeResult, Verdict};
use crate::sample::Signal;
use crate::store::{AlertInput, AlertRow};
use crate::summary_format::{PRODUCT_VERSION, SCHEMA_VERSION};
use crate::units::Units;
use crate::units::{human_duration, ms_to_s, rfc3339, s_to_ms};
use serde_json::{Map, Value, json};

/// What kind of condition an alert is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum AlertKind {
    /// A setpoint change missed its spec for a known reason (a verdict that
    /// [`Verdict::is_miss`]).
    Missed(Verdict),
    /// A signal the configuration expects has been silent for longer than its stale limit.
    StaleTag,
    /// The loop cycles while its setpoint is held.
    Oscillation,
    /// A load disturbance met with the OP at its limit: more than the actuator can counter.
    ActuatorLimitedDisturbance,
}

impl AlertKind {
    /// The kind as stored and published (`tuning_limited`, …, `stale_tag`).
    pub fn as_str(self) -> &'static str {
        match self {
            AlertKind::Missed(v) => v.as_str(),
            AlertKind::StaleTag => "stale_tag",
            AlertKind::Oscillation => "oscillation",
            AlertKind::ActuatorLimitedDisturbance => "actuator_limited_disturbance",
        }
    }

    /// The kind as people read it (`tuning-limited`, …, `stale tag`).
    pub fn label(self) -> &'static str {
        match self {
            AlertKind::Missed(v) => v.label(),
            AlertKind::StaleTag => "stale tag",
            AlertKind::Oscillation => "oscillation",
            AlertKind::ActuatorLimitedDisturbance => "actuator-limited disturbance",
        }
    }

    /// The display spelling of a stored kind; an unknown stored kind reads as stored.
    pub fn label_of(stored: &str) -> &str {
        AlertKind::parse(stored).map_or(stored, |k| k.label())
    }

    /// The kind from its stored spelling.
    pub fn parse(stored: &str) -> Option<AlertKind> {
        let loop_wide = [
            AlertKind::StaleTag,
            AlertKind::Oscillation,
            AlertKind::ActuatorLimitedDisturbance,
        ];
        if let Some(k) = loop_wide.into_iter().find(|k| k.as_str() == stored) {
            return Some(k);
        }
        Verdict::ALL
            .into_iter()
            .find(|v| v.as_str() == stored)
            .map(AlertKind::Missed)
    }
}

/// The numbers behind a scored change's alert.
fn change_evidence(r: &EpisodeResult, is_final: bool) -> Value {
    json!({
        "start": rfc3339(s_to_ms(r.start_s)),
        "sp_from": r.sp_from,
        "sp_to": r.sp_to,
        "verdict": r.verdict.as_str(),
        "settling_time_s": r.settling_time_s,
        "overshoot_pct": r.overshoot_pct,
        "min_settling_time_s": r.min_settling_time_s,
        "required_op_limit": r.required_op_limit,
        "capacity_ratio": r.capacity_ratio,
        "saturation_duty": r.saturation_duty,
        "min_settling_time_range_s": r.min_settling_time_range_s,
        "confidence": r.confidence,
        "final": is_final,
    })
}

/// A sighting of a scored change: the change's start is its identity and the start of its span,
/// which reaches the later of the change's start and its window's end.
fn change_sighting(
    loop_tag: &str,
    r: &EpisodeResult,
    is_final: bool,
    message: String,
) -> AlertInput {
    let (start_ms, end_ms) = (s_to_ms(r.start_s), s_to_ms(r.end_s));
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::Missed(r.verdict).as_str().to_string(),
        message,
        evidence: change_evidence(r, is_final),
        seen_ms: start_ms.max(end_ms),
        since_ms: Some(start_ms),
        change_start_ms: Some(start_ms),
    }
}

/// The alert for a scored setpoint change, when its verdict is a miss that is not marginal;
/// `None` otherwise (then [`change_cleared`] returns any alert the change had).
pub fn missed_change(loop_tag: &str, r: &EpisodeResult, is_final: bool) -> Option<AlertInput> {
    // Marginal verdicts raise no alert: they are listed to watch in the summaries.
    if !r.verdict.is_miss() || r.is_marginal() {
        return None;
    }
    Some(change_sighting(
        loop_tag,
        r,
        is_final,
        format!("{loop_tag}: {}", r.reason),
    ))
}

/// The change's alert returning: its latest look (in the end, for a final one) is no miss, or a
/// marginal one.
pub fn change_cleared(loop_tag: &str, r: &EpisodeResult, is_final: bool) -> AlertInput {
    let marginal = if r.is_marginal() { ", marginal" } else { "" };
    let when = if is_final {
        "in the end"
    } else {
        "on a longer look"
    };
    let message = format!(
        "{loop_tag}: no miss to alert on {when}: {}{marginal} ({})",
        r.verdict.label(),
        r.reason
    );
    change_sighting(loop_tag, r, is_final, message)
}

/// One expected signal that is or was silent during an outage.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Silent {
    pub signal: Signal,
    /// Its newest sample before the silence, if it ever had one.
    pub last_sample_ms: Option<i64>,
    /// Its first sample after the silence, once there is one.
    pub back_ms: Option<i64>,
}

/// The evidence of an outage: each signal's newest sample before it, and first after it.
fn outage_evidence(silent: &[Silent]) -> Value {
    let evidence: Map<String, Value> = silent
        .iter()
        .map(|s| {
            let mut e = json!({ "last_sample": s.last_sample_ms.map(rfc3339) });
            if let Some(back) = s.back_ms {
                e["first_sample_after"] = rfc3339(back).into();
            }
            (s.signal.as_str().to_string(), e)
        })
        .collect();
    Value::Object(evidence)
}

/// The signals of an outage read back from its stored alert's evidence, for a daemon that
/// restarts during it. Keys that name no signal are skipped.
pub fn outage_signals(row: &AlertRow) -> Vec<Silent> {
    let time = |v: &Value| {
        v.as_str()
            .and_then(|s| s.parse::<jiff::Timestamp>().ok())
            .map(|t| t.as_millisecond())
    };
    let Some(evidence) = row.evidence.as_object() else {
        return Vec::new();
    };
    evidence
        .iter()
        .filter_map(|(name, e)| {
            Some(Silent {
                signal: Signal::parse(name)?,
                last_sample_ms: time(&e["last_sample"]),
                back_ms: time(&e["first_sample_after"]),
            })
        })
        .collect()
}

fn signal_names(silent: &[Silent]) -> String {
    let names: Vec<&str> = silent.iter().map(|s| s.signal.as_str()).collect();
    names.join("/")
}

/// A sighting of a loop's outage: `silent` are the signals silent in it, `since_ms` where the
/// silence began, `now_ms` the plant's clock.
pub fn stale_tag(loop_tag: &str, silent: &[Silent], since_ms: i64, now_ms: i64) -> AlertInput {
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::StaleTag.as_str().to_string(),
        message: format!(
            "{loop_tag}: no {} sample for more than the expected period times the stale limit",
            signal_names(silent)
        ),
        evidence: outage_evidence(silent),
        seen_ms: now_ms,
        since_ms: Some(since_ms),
        change_start_ms: None,
    }
}

/// The outage's end: every signal of `silent` flows again, the last of them from `back_ms`.
pub fn stale_tag_returned(
    loop_tag: &str,
    silent: &[Silent],
    since_ms: i64,
    back_ms: i64,
) -> AlertInput {
    let mut a = stale_tag(loop_tag, silent, since_ms, back_ms);
    a.message = format!(
        "{loop_tag}: {} samples flow again after {} of silence",
        signal_names(silent),
        human_duration(ms_to_s(back_ms - since_ms))
    );
    a
}

/// A sighting of an oscillation in a loop's held setpoint: one alert per spell, followed while
/// it lasts, returned by [`oscillation_gone`]. `seen_ms` is the newest data time.
pub fn oscillation(loop_tag: &str, o: &Oscillation, units: &Units, seen_ms: i64) -> AlertInput {
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::Oscillation.as_str().to_string(),
        message: format!("{loop_tag}: {}", regulation::words::oscillation(o, units)),
        evidence: serde_json::to_value(o).unwrap_or(Value::Null),
        seen_ms,
        since_ms: None,
        change_start_ms: None,
    }
}

/// The oscillation's spell is over: the recent held data show none.
pub fn oscillation_gone(loop_tag: &str, seen_ms: i64) -> AlertInput {
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::Oscillation.as_str().to_string(),
        message: format!("{loop_tag}: no oscillation in the recent held data any more"),
        evidence: json!({ "detected": false }),
        seen_ms,
        since_ms: None,
        change_start_ms: None,
    }
}

/// A sighting of a disturbance met with the OP at its limit: one alert per disturbance, named by
/// its start (`id_start_ms`), updated while it lasts (`ongoing`); once over it stays active until
/// acknowledged, like a missed change (it did happen).
pub fn actuator_limited_disturbance(
    loop_tag: &str,
    d: &Disturbance,
    units: &Units,
    id_start_ms: i64,
    ongoing: bool,
) -> AlertInput {
    let state = if ongoing { "still going" } else { "over" };
    let mut evidence = serde_json::to_value(d).unwrap_or(Value::Null);
    evidence["ongoing"] = ongoing.into();
    AlertInput {
        loop_tag: loop_tag.to_string(),
        kind: AlertKind::ActuatorLimitedDisturbance.as_str().to_string(),
        message: format!(
            "{loop_tag}: a load disturbance beyond what the actuator can counter ({state}): {};              no tuning could have held the PV",
            regulation::words::disturbance(d, units)
        ),
        evidence,
        seen_ms: s_to_ms(d.end_s),
        since_ms: Some(id_start_ms),
        change_start_ms: Some(id_start_ms),
    }
}

/// The lifecycle of a stored alert in JSON: its state, the times of its span, when it was
/// raised, when its condition went, and who acknowledged it when (RFC 3339).
fn lifecycle(row: &AlertRow) -> Map<String, Value> {
    let at = |ms: Option<i64>| ms.map(rfc3339);
    let Value::Object(m) = json!({
        "state": row.state,
        "first_seen": rfc3339(row.first_seen_ms),
        "last_seen": rfc3339(row.last_seen_ms),
        "raised": rfc3339(row.raised_ms),
        "returned": at(row.returned_ms),
        "change_start": at(row.change_start_ms),
        "acknowledged_by": row.acked_by,
        "acknowledged_at": at(row.acked_ms),
        "schema_version": SCHEMA_VERSION,
        "version": PRODUCT_VERSION,
    }) else {
        unreachable!("json! of an object is an object")
    };
    m
}

/// The JSON published on the alert topic for a stored alert.
pub fn payload(row: &AlertRow) -> Value {
    let mut p = json!({
        "id": row.id,
        "loop": row.loop_tag,
        "kind": row.kind,
        "count": row.count,
        "message": row.message,
        "evidence": row.evidence,
        "caution": CAUTION,
    });
    if let Value::Object(m) = &mut p {
        m.extend(lifecycle(row));
    }
    p
}

/// One alert as `headroom alerts --json` prints it: the stored row's fields (times in ms) with
/// the lifecycle's in RFC 3339, the schema version and the product version.
pub fn listing(row: &AlertRow) -> Value {
    let mut v = serde_json::to_value(row).unwrap_or(Value::Null);
    if let Value::Object(m) = &mut v {
        m.extend(lifecycle(row));
    }
    v
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
        for k in Verdict::ALL.map(AlertKind::Missed).into_iter().chain([
            AlertKind::StaleTag,
            AlertKind::Oscillation,
            AlertKind::ActuatorLimitedDisturbance,
        ]) {
            assert_eq!(AlertKind::parse(k.as_str()), Some(k));
        }
        assert_eq!(AlertKind::parse("nonsense"), None);
    }

    #[test]
    fn a_disturbance_alert_is_named_by_its_start_and_words_it_with_units() {
        use crate::analysis::regulation::{DisturbanceVerdict, RecoveryLimit};
        let d = Disturbance {
            start_s: 1_800_000_000.0,
            end_s: 1_800_000_900.0,
            peak_deviation: -7.04,
            recovery_time_s: None,
            op_at_limit_frac: 0.85,
            verdict: DisturbanceVerdict::ActuatorLimited,
            missed_spec: Some(RecoveryLimit::ActuatorLimited),
        };
        let units = Units {
            pv: "°C".into(),
            op: "%".into(),
        };
        let id = 1_799_999_990_000;
        let a = actuator_limited_disturbance("TIC-120", &d, &units, id, true);
        assert_eq!(a.kind, "actuator_limited_disturbance");
        assert_eq!((a.change_start_ms, a.since_ms), (Some(id), Some(id)));
        assert_eq!(a.seen_ms, 1_800_000_900_000);
        assert_eq!(a.evidence["ongoing"], true);
        assert_eq!(a.evidence["verdict"], "actuator_limited");
        assert!(a.message.contains("still going"), "{}", a.message);
        assert!(a.message.contains("-7.04 °C from SP"), "{}", a.message);
        assert!(a.message.contains("85.0 %"), "{}", a.message);
        let over = actuator_limited_disturbance("TIC-120", &d, &units, id, false);
        assert!(over.message.contains("(over)"), "{}", over.message);
    }

    #[test]
    fn an_oscillation_is_a_loop_wide_spell_with_its_evidence() {
        let o = Oscillation {
            detected: true,
            period_s: Some(120.0),
            amplitude: Some(0.8),
            likely_cause: Some(crate::analysis::regulation::Cause::Valve),
            evidence: Some("the OP–PV cross-correlation is odd".into()),
        };
        let units = Units {
            pv: "m³/h".into(),
            op: "%".into(),
        };
        let a = oscillation("FIC-140", &o, &units, 5_000);
        assert_eq!((a.kind.as_str(), a.change_start_ms), ("oscillation", None));
        assert!(a.message.contains("period 2.0 min"), "{}", a.message);
        assert!(a.message.contains("±0.800 m³/h"), "{}", a.message);
        assert!(
            a.message.contains("cross-correlation is odd"),
            "{}",
            a.message
        );
        assert_eq!(a.evidence["likely_cause"], "valve");
        let gone = oscillation_gone("FIC-140", 9_000);
        assert_eq!((gone.kind, gone.seen_ms), (a.kind, 9_000));
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
        assert_eq!(a.evidence["verdict"], "actuator_limited");
        // The change is the alert's identity and the start of its span.
        assert_eq!(a.change_start_ms, Some(1_800_000_000_000));
        assert_eq!(a.since_ms, Some(1_800_000_000_000));
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
    fn a_cleared_change_keeps_its_identity_and_says_why() {
        let e = episode(Verdict::Met);
        let miss = missed_change("TIC-1", &episode(Verdict::TuningLimited), false).unwrap();
        let c = change_cleared("TIC-1", &e, true);
        assert_eq!(c.change_start_ms, miss.change_start_ms);
        assert_eq!(c.change_start_ms, Some(1_800_000_000_000));
        assert_eq!(c.since_ms, Some(1_800_000_000_000));
        assert_eq!(
            c.message,
            "TIC-1: no miss to alert on in the end: met (the heater ran flat out)"
        );
        assert_eq!(c.evidence["verdict"], "met");
        assert_eq!(c.evidence["final"], true);
    }

    fn pv_and_op_silent() -> [Silent; 2] {
        [
            Silent {
                signal: Signal::Pv,
                last_sample_ms: Some(1_800_000_000_000),
                back_ms: None,
            },
            Silent {
                signal: Signal::Op,
                last_sample_ms: None,
                back_ms: None,
            },
        ]
    }

    #[test]
    fn a_stale_alert_names_every_silent_signal_and_spans_the_silence() {
        let silent = pv_and_op_silent();
        let a = stale_tag("TIC-1", &silent, 1_800_000_000_000, 1_800_000_060_000);
        assert_eq!(a.kind, "stale_tag");
        assert!(
            a.message.starts_with("TIC-1: no pv/op sample"),
            "{}",
            a.message
        );
        assert_eq!(a.evidence["pv"]["last_sample"], "2027-01-15T08:00:00Z");
        assert!(a.evidence["op"]["last_sample"].is_null());
        assert!(a.evidence["pv"].get("first_sample_after").is_none());
        assert_eq!(
            (a.since_ms, a.seen_ms),
            (Some(1_800_000_000_000), 1_800_000_060_000)
        );
        assert_eq!(a.change_start_ms, None);
    }

    #[test]
    fn an_outage_reads_back_from_its_stored_evidence() {
        let mut silent = pv_and_op_silent();
        silent[1].back_ms = Some(1_800_000_030_000);
        let a = stale_tag("TIC-1", &silent, 1_800_000_000_000, 1_800_000_060_000);
        let mut r = row();
        r.evidence = a.evidence;
        // Read back in the evidence's order, by name.
        let mut expected = silent.to_vec();
        expected.sort_by_key(|s| s.signal.as_str());
        assert_eq!(outage_signals(&r), expected);
        r.evidence = json!({"pv": {"last_sample": null}, "nonsense": {}});
        assert_eq!(
            outage_signals(&r),
            [Silent {
                signal: Signal::Pv,
                last_sample_ms: None,
                back_ms: None
            }]
        );
    }

    #[test]
    fn a_returned_outage_says_how_long_it_lasted_and_when_data_came_back() {
        let mut silent = pv_and_op_silent();
        silent[0].back_ms = Some(1_800_028_800_000);
        silent[1].back_ms = Some(1_800_028_799_000);
        let a = stale_tag_returned("TIC-1", &silent, 1_800_000_000_000, 1_800_028_800_000);
        assert_eq!(
            a.message,
            "TIC-1: pv/op samples flow again after 8.0 h of silence"
        );
        assert_eq!(a.seen_ms, 1_800_028_800_000);
        assert_eq!(
            a.evidence["pv"]["first_sample_after"],
            "2027-01-15T16:00:00Z"
        );
        assert_eq!(
            a.evidence["op"]["first_sample_after"],
            "2027-01-15T15:59:59Z"
        );
    }

    fn row() -> AlertRow {
        AlertRow {
            id: 3,
            loop_tag: "TIC-1".into(),
            kind: "stale_tag".into(),
            state: AlertState::Acknowledged,
            ongoing: false,
            change_start_ms: None,
            first_seen_ms: 0,
            last_seen_ms: 1_000,
            raised_ms: 500,
            returned_ms: Some(1_000),
            count: 1,
            message: "m".into(),
            evidence: json!({"pv": 1}),
            acked_ms: Some(2_000),
            acked_by: Some("ann".into()),
            is_new: true,
        }
    }

    #[test]
    fn the_published_payload_carries_the_row_its_lifecycle_and_the_caution() {
        let p = payload(&row());
        assert_eq!(p["loop"], "TIC-1");
        assert_eq!(p["state"], "acknowledged");
        assert_eq!(p["first_seen"], "1970-01-01T00:00:00Z");
        assert_eq!(p["last_seen"], "1970-01-01T00:00:01Z");
        assert_eq!(p["raised"], "1970-01-01T00:00:00.5Z");
        assert_eq!(p["returned"], "1970-01-01T00:00:01Z");
        assert_eq!(p["acknowledged_by"], "ann");
        assert_eq!(p["acknowledged_at"], "1970-01-01T00:00:02Z");
        assert!(p["change_start"].is_null());
        assert_eq!(p["count"], 1);
        assert_eq!(p["evidence"]["pv"], 1);
        assert_eq!(p["caution"], CAUTION);
        assert_eq!(p["schema_version"], SCHEMA_VERSION);
        assert_eq!(p["version"], PRODUCT_VERSION);
    }

    #[test]
    fn the_listing_keeps_the_stored_fields_and_adds_the_lifecycle() {
        let v = listing(&row());
        assert_eq!(v["loop_tag"], "TIC-1");
        assert_eq!(v["first_seen_ms"], 0);
        assert_eq!(v["acked_ms"], 2_000);
        assert_eq!(v["acked_by"], "ann");
        assert_eq!(v["state"], "acknowledged");
        assert_eq!(v["acknowledged_at"], "1970-01-01T00:00:02Z");
        assert_eq!(v["returned"], "1970-01-01T00:00:01Z");
        assert_eq!(v["schema_version"], SCHEMA_VERSION);
        assert_eq!(v["version"], PRODUCT_VERSION);
        assert!(v.get("is_new").is_none());
    }
}
