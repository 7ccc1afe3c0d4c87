//! From an MQTT message to samples: which loop signal a topic feeds ([`TopicMap`]) and what its
//! payload says ([`decode`]). Pure: no I/O, no clock (the receive time is an argument), so every
//! rule here is tested with plain values.
//!
//! The payload rules:
//!
//! - **`number`**: UTF-8 text holding one number, whitespace around it allowed (`" 71.25\n"`).
//!   `NaN` and `inf` are refused as `not_finite`; anything else that is not a number is
//!   `malformed_payload`. The sample is timed by its receipt.
//! - **`json`**: an object with the value in the configured field (a JSON number) and optionally
//!   a time in the time field: an RFC 3339 string (`"2026-11-23T08:00:00.250Z"`, offset required)
//!   or a number of milliseconds since the Unix epoch (fractions are rounded). Without the time
//!   field, or with `null` in it, the sample is timed by its receipt. Other fields are ignored,
//!   so publishers may add a unit or a quality. A value of `null` (how JavaScript writes NaN), a
//!   bare `NaN`/`Infinity` (how Python writes them) or the string `"NaN"`/`"Infinity"` is
//!   `not_finite`.
//! - **JSON batches**: an array of such objects, one sample each. A batch is accepted or
//!   rejected whole: one bad element rejects the message, so a message is never half-stored
//!   and the counters count messages. An empty array is a batch of no samples.
//! - **Mode**: the value may also be a word or a boolean, and becomes 1.0 (automatic) or 0.0 by
//!   the loop's [`AutoValues`]: words ignoring case; numbers by the list when it holds numbers,
//!   else any non-zero number is automatic; `true`/`false` count as 1/0.
//! - **Time limits**: a time more than `max_future_ms` after the receive time is
//!   `future_timestamp` (a publisher's clock is wrong, and storing it would put a sample where
//!   no data can follow). A time before 2000-01-01 is `bad_timestamp`: for live data that is
//!   nearly always epoch seconds sent where milliseconds were expected.
//! - **Size**: a payload over `max_payload_bytes` is `oversized_payload`, refused unread.
//!
//! Times become whole epoch milliseconds, rounded to the nearest (the store's key has
//! millisecond resolution).

use super::routes::{JsonFields, PayloadFormat, Route, TopicMap};
use crate::analysis::AutoValues;
use crate::sample::{Sample, Signal};
use crate::units::{ms_to_s, rfc3339};
use serde_json::Value;
use std::sync::Arc;

/// 2000-01-01T00:00:00Z in epoch milliseconds: earlier sample times are refused.
pub const EARLIEST_MS: i64 = 946_684_800_000;

/// How many payload bytes a rejection quotes.
const EXCERPT_BYTES: usize = 64;

/// The limits a message must respect.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    pub max_payload_bytes: usize,
    /// How far after its receipt a sample's time may be.
    pub max_future_ms: i64,
}

/// Where a rejected message came from: topic, the loop signal it was for, and its payload's
/// first bytes, escaped for printing.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Origin {
    pub topic: String,
    pub loop_tag: Arc<str>,
    pub signal: Signal,
    pub excerpt: String,
}

/// Why a message gave no samples. Expected conditions of live data, counted by [`reason`]
/// and logged with their details; never a reason to stop.
///
/// [`reason`]: Rejection::reason
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum Rejection {
    /// No source's filter matches the topic.
    UnknownTopic {
        topic: String,
        excerpt: String,
    },
    OversizedPayload {
        origin: Origin,
        len: usize,
        max: usize,
    },
    MalformedPayload {
        origin: Origin,
        detail: String,
    },
    NotFinite {
        origin: Origin,
        detail: String,
    },
    BadTimestamp {
        origin: Origin,
        detail: String,
    },
    FutureTimestamp {
        origin: Origin,
        ts_ms: i64,
        received_ms: i64,
        max_future_ms: i64,
    },
}

impl Rejection {
    /// Every [`Rejection::reason`], for setting counters up front.
    pub const REASONS: [&'static str; 6] = [
        "unknown_topic",
        "oversized_payload",
        "malformed_payload",
        "not_finite",
        "bad_timestamp",
        "future_timestamp",
    ];

    /// A stable name for counters and logs.
    pub fn reason(&self) -> &'static str {
        match self {
            Rejection::UnknownTopic { .. } => "unknown_topic",
            Rejection::OversizedPayload { .. } => "oversized_payload",
            Rejection::MalformedPayload { .. } => "malformed_payload",
            Rejection::NotFinite { .. } => "not_finite",
            Rejection::BadTimestamp { .. } => "bad_timestamp",
            Rejection::FutureTimestamp { .. } => "future_timestamp",
        }
    }

    pub fn topic(&self) -> &str {
        match self {
            Rejection::UnknownTopic { topic, .. } => topic,
            _ => self.origin().map_or("", |o| o.topic.as_str()),
        }
    }

    /// The loop signal the message was for; `None` for an unknown topic.
    pub fn origin(&self) -> Option<&Origin> {
        match self {
            Rejection::UnknownTopic { .. } => None,
            Rejection::OversizedPayload { origin, .. }
            | Rejection::MalformedPayload { origin, .. }
            | Rejection::NotFinite { origin, .. }
            | Rejection::BadTimestamp { origin, .. }
            | Rejection::FutureTimestamp { origin, .. } => Some(origin),
        }
    }
}

impl std::fmt::Display for Rejection {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let with = |f: &mut std::fmt::Formatter<'_>, what: &str, o: &Origin| {
            write!(
                f,
                "{}: {what} on topic \"{}\" ({} {}); payload b\"{}\"",
                self.reason(),
                short(&o.topic),
                o.loop_tag,
                o.signal,
                o.excerpt
            )
        };
        match self {
            Rejection::UnknownTopic { topic, excerpt } => write!(
                f,
                "unknown_topic: no source's filter matches topic \"{}\"; payload b\"{excerpt}\"",
                short(topic)
            ),
            Rejection::OversizedPayload { origin, len, max } => with(
                f,
                &format!("{len} bytes, more than max_payload_bytes ({max})"),
                origin,
            ),
            Rejection::MalformedPayload { origin, detail }
            | Rejection::NotFinite { origin, detail }
            | Rejection::BadTimestamp { origin, detail } => with(f, detail, origin),
            Rejection::FutureTimestamp {
                origin,
                ts_ms,
                received_ms,
                max_future_ms,
            } => with(
                f,
                &format!(
                    "time {} is {} s after the message arrived ({}), more than the {} s allowed",
                    rfc3339(*ts_ms),
                    ms_to_s(ts_ms.saturating_sub(*received_ms)),
                    rfc3339(*received_ms),
                    ms_to_s(*max_future_ms)
                ),
                origin,
            ),
        }
    }
}

impl std::error::Error for Rejection {}

/// A topic shortened and escaped for messages.
fn short(topic: &str) -> String {
    const MAX_CHARS: usize = 200;
    let mut s: String = topic
        .chars()
        .take(MAX_CHARS)
        .flat_map(char::escape_debug)
        .collect();
    if topic.chars().nth(MAX_CHARS).is_some() {
        s.push('…');
    }
    s
}

/// The first bytes of a payload, escaped: printable ASCII as is, the rest as `\xNN` or `\n`.
fn excerpt(payload: &[u8]) -> String {
    let mut s = payload[..payload.len().min(EXCERPT_BYTES)]
        .escape_ascii()
        .to_string();
    if payload.len() > EXCERPT_BYTES {
        s.push('…');
    }
    s
}

/// Why a payload gave no samples, before the origin is attached.
enum Fault {
    Malformed(String),
    NotFinite(String),
    BadTimestamp(String),
    Future(i64),
}

impl Fault {
    /// The same fault, said of one element of a batch.
    fn in_element(self, i: usize) -> Fault {
        match self {
            Fault::Malformed(d) => Fault::Malformed(format!("batch element {i}: {d}")),
            Fault::NotFinite(d) => Fault::NotFinite(format!("batch element {i}: {d}")),
            Fault::BadTimestamp(d) => Fault::BadTimestamp(format!("batch element {i}: {d}")),
            Fault::Future(t) => Fault::Future(t),
        }
    }
}

/// Decodes one message into samples, or says why it gives none. See the module doc for the
/// rules; `received_ms` is when the message arrived (epoch milliseconds).
///
/// A JSON array is a batch and is all or nothing: every element must be valid, or the whole
/// message is rejected and no sample from it is returned.
pub fn decode(
    topic: &str,
    payload: &[u8],
    received_ms: i64,
    map: &TopicMap,
    limits: &Limits,
) -> Result<Vec<Sample>, Rejection> {
    let Some(route) = map.route(topic) else {
        return Err(Rejection::UnknownTopic {
            topic: topic.to_owned(),
            excerpt: excerpt(payload),
        });
    };
    let origin = || Origin {
        topic: topic.to_owned(),
        loop_tag: route.loop_tag.clone(),
        signal: route.signal,
        excerpt: excerpt(payload),
    };
    if payload.len() > limits.max_payload_bytes {
        return Err(Rejection::OversizedPayload {
            origin: origin(),
            len: payload.len(),
            max: limits.max_payload_bytes,
        });
    }
    let decoded = match &route.format {
        PayloadFormat::Number => {
            plain(payload, route.auto_values.as_ref()).map(|v| vec![(received_ms, v)])
        }
        PayloadFormat::Json(fields) => json(payload, fields, route, received_ms, limits),
    };
    match decoded {
        Ok(values) => Ok(values
            .into_iter()
            .map(|(ts_ms, value)| Sample {
                loop_tag: route.loop_tag.clone(),
                signal: route.signal,
                ts_ms,
                value,
            })
            .collect()),
        Err(Fault::Malformed(detail)) => Err(Rejection::MalformedPayload {
            origin: origin(),
            detail,
        }),
        Err(Fault::NotFinite(detail)) => Err(Rejection::NotFinite {
            origin: origin(),
            detail,
        }),
        Err(Fault::BadTimestamp(detail)) => Err(Rejection::BadTimestamp {
            origin: origin(),
            detail,
        }),
        Err(Fault::Future(ts_ms)) => Err(Rejection::FutureTimestamp {
            origin: origin(),
            ts_ms,
            received_ms,
            max_future_ms: limits.max_future_ms,
        }),
    }
}

/// A plain-text payload: a number, or for a mode a number or a word.
fn plain(payload: &[u8], auto_values: Option<&AutoValues>) -> Result<f64, Fault> {
    let text = std::str::from_utf8(payload)
        .map_err(|_| Fault::Malformed("not UTF-8 text".into()))?
        .trim();
    if text.is_empty() {
        return Err(Fault::Malformed("empty payload".into()));
    }
    match auto_values {
        Some(auto) => mode_text(text, auto),
        None => number_text(text),
    }
}

/// Text that must be a finite number; -0 becomes 0.
fn number_text(text: &str) -> Result<f64, Fault> {
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v + 0.0),
        Ok(_) => Err(Fault::NotFinite(format!(
            "\"{}\" is not finite",
            short(text)
        ))),
        Err(_) => Err(Fault::Malformed(format!(
            "\"{}\" is not a number",
            short(text)
        ))),
    }
}

/// A mode word or number as 1.0 (automatic) or 0.0.
fn mode_text(text: &str, auto: &AutoValues) -> Result<f64, Fault> {
    let text = text.trim();
    if text.is_empty() {
        return Err(Fault::Malformed("empty mode value".into()));
    }
    if let Ok(v) = text.parse::<f64>()
        && !v.is_finite()
    {
        return Err(Fault::NotFinite(format!(
            "\"{}\" is not finite",
            short(text)
        )));
    }
    Ok(flag(auto.is_auto_text(text)))
}

fn flag(auto: bool) -> f64 {
    if auto { 1.0 } else { 0.0 }
}

/// A JSON payload: one object or a batch of them.
fn json(
    payload: &[u8],
    fields: &JsonFields,
    route: &Route,
    received_ms: i64,
    limits: &Limits,
) -> Result<Vec<(i64, f64)>, Fault> {
    let doc: Value = serde_json::from_slice(payload).map_err(|e| json_syntax(payload, &e))?;
    let one = |v: &Value| match v {
        Value::Object(o) => {
            let value = json_value(o.get(&fields.value_field), fields, route)?;
            let ts = json_time(o.get(&fields.time_field), received_ms, limits)?;
            Ok((ts, value))
        }
        Value::Number(_) => Err(Fault::Malformed(
            "a bare number, not an object: a topic carrying plain numbers needs \
             format = \"number\""
                .into(),
        )),
        other => Err(Fault::Malformed(format!(
            "{}, not an object with field \"{}\"",
            kind(other),
            fields.value_field
        ))),
    };
    match &doc {
        Value::Array(items) => items
            .iter()
            .enumerate()
            .map(|(i, item)| one(item).map_err(|f| f.in_element(i)))
            .collect(),
        other => one(other).map(|s| vec![s]),
    }
}

/// A JSON syntax error; `NaN` or `Infinity` where a value should be is what Python writes for
/// non-finite floats, so it is called that rather than just malformed.
fn json_syntax(payload: &[u8], e: &serde_json::Error) -> Fault {
    if e.is_syntax() {
        // serde_json counts lines from 1 and columns from 1 in bytes of that line.
        let line_start = payload
            .split(|&b| b == b'\n')
            .take(e.line().saturating_sub(1))
            .map(|l| l.len() + 1)
            .sum::<usize>();
        let at = line_start + e.column().saturating_sub(1);
        let rest = payload.get(at..).unwrap_or_default();
        let rest = rest.strip_prefix(b"-").unwrap_or(rest);
        if rest.starts_with(b"NaN") || rest.starts_with(b"Infinity") {
            return Fault::NotFinite(
                "NaN or Infinity, which JSON cannot hold, where a value should be".into(),
            );
        }
    }
    Fault::Malformed(format!("not valid JSON: {e}"))
}

/// The value field: a finite number, or for a mode also a word or a boolean.
fn json_value(v: Option<&Value>, fields: &JsonFields, route: &Route) -> Result<f64, Fault> {
    let name = &fields.value_field;
    let Some(v) = v else {
        return Err(Fault::Malformed(format!("no field \"{name}\"")));
    };
    match (v, route.auto_values.as_ref()) {
        (Value::Null, _) => Err(Fault::NotFinite(format!(
            "field \"{name}\" is null (how JSON writers put NaN)"
        ))),
        (Value::Number(n), auto) => {
            let x = n
                .as_f64()
                .filter(|x| x.is_finite())
                .ok_or_else(|| Fault::NotFinite(format!("field \"{name}\" is not finite")))?;
            Ok(match auto {
                Some(a) => flag(a.is_auto_number(x)),
                None => x + 0.0,
            })
        }
        (Value::String(s), Some(auto)) => mode_text(s, auto),
        (Value::Bool(b), Some(auto)) => Ok(flag(auto.is_auto_number(flag(*b)))),
        (Value::String(s), None) => match s.trim().parse::<f64>() {
            Ok(x) if !x.is_finite() => Err(Fault::NotFinite(format!(
                "field \"{name}\" is the string \"{}\"",
                short(s)
            ))),
            _ => Err(Fault::Malformed(format!(
                "field \"{name}\" is a string, not a number"
            ))),
        },
        (other, _) => Err(Fault::Malformed(format!(
            "field \"{name}\" is {}, not a number",
            kind(other)
        ))),
    }
}

/// The time field as epoch milliseconds, or the receive time when there is none.
fn json_time(v: Option<&Value>, received_ms: i64, limits: &Limits) -> Result<i64, Fault> {
    let latest = received_ms.saturating_add(limits.max_future_ms.max(0));
    let ts = match v {
        None | Some(Value::Null) => return Ok(received_ms),
        Some(Value::String(s)) => {
            let t: jiff::Timestamp = s.parse().map_err(|_| {
                Fault::BadTimestamp(format!(
                    "\"{}\" is not an RFC 3339 time with an offset (Z or +hh:mm)",
                    short(s)
                ))
            })?;
            round_ns_to_ms(t.as_nanosecond())
        }
        Some(Value::Number(n)) => match n.as_i64() {
            Some(ms) => ms,
            None => {
                // A fraction, or an integer beyond i64: round in floating point, and compare
                // before converting so that the conversion never saturates into range.
                let ms = n.as_f64().unwrap_or(f64::NAN).round();
                if ms.is_nan() || ms < EARLIEST_MS as f64 {
                    return Err(too_early(ms));
                }
                if ms > latest as f64 {
                    return Err(Fault::Future(ms as i64));
                }
                ms as i64
            }
        },
        Some(other) => {
            return Err(Fault::BadTimestamp(format!(
                "the time is {}, not an RFC 3339 string or epoch milliseconds",
                kind(other)
            )));
        }
    };
    if ts < EARLIEST_MS {
        return Err(too_early(ts as f64));
    }
    if ts > latest {
        return Err(Fault::Future(ts));
    }
    Ok(ts)
}

fn too_early(ms: f64) -> Fault {
    Fault::BadTimestamp(format!(
        "time {ms} ms is before 2000-01-01T00:00:00Z; epoch seconds where milliseconds belong?"
    ))
}

/// Nanoseconds to milliseconds, rounding halves up.
fn round_ns_to_ms(ns: i128) -> i64 {
    let ms = ns.div_euclid(1_000_000) + i128::from(ns.rem_euclid(1_000_000) >= 500_000);
    // jiff's timestamps span years -9999 to 9999, well inside i64 milliseconds.
    i64::try_from(ms).unwrap_or(i64::MAX)
}

fn kind(v: &Value) -> &'static str {
    match v {
        Value::Null => "null",
        Value::Bool(_) => "a boolean",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Array(_) => "an array",
        Value::Object(_) => "an object",
    }
}

#[cfg(test)]
mod tests;
