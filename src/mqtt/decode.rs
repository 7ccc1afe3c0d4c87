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

use super::topic;
use crate::analysis::AutoValues;
use crate::config::{Config, JsonFields, MqttSettings, PayloadFormat};
use crate::sample::{Sample, Signal};
use crate::units::{ms_to_s, rfc3339};
use serde_json::Value;
use std::collections::HashMap;
use std::sync::Arc;

/// 2000-01-01T00:00:00Z in epoch milliseconds: earlier sample times are refused.
pub const EARLIEST_MS: i64 = 946_684_800_000;

/// How many payload bytes a rejection quotes.
const EXCERPT_BYTES: usize = 64;

/// Which loop signal each topic feeds.
///
/// Exact topics are one hash lookup; wildcard filters are then tried in config order (tag, then
/// sp, pv, op, mode). The config refuses filters that overlap, so at most one can match; for a
/// hand-built config that breaks that rule, the first match wins.
#[derive(Debug, Clone)]
pub struct TopicMap {
    routes: Vec<Route>,
    exact: HashMap<Box<str>, usize>,
    wildcard: Vec<(Box<str>, usize)>,
}

#[derive(Debug, Clone)]
struct Route {
    loop_tag: Arc<str>,
    signal: Signal,
    format: PayloadFormat,
    /// For the mode signal: which values mean automatic.
    auto_values: Option<AutoValues>,
}

impl TopicMap {
    /// The map of every MQTT source in the config.
    pub fn new(config: &Config) -> TopicMap {
        let mut map = TopicMap {
            routes: Vec::new(),
            exact: HashMap::new(),
            wildcard: Vec::new(),
        };
        for (tag, l) in &config.loops {
            let loop_tag: Arc<str> = Arc::from(tag.as_str());
            for (signal, source) in l.sources() {
                let Some(m) = source.as_mqtt() else { continue };
                let index = map.routes.len();
                map.routes.push(Route {
                    loop_tag: loop_tag.clone(),
                    signal,
                    format: m.format.clone(),
                    auto_values: match (signal, &l.mode) {
                        (Signal::Mode, Some(mode)) => Some(mode.auto_values.clone()),
                        _ => None,
                    },
                });
                if m.topic.contains(['+', '#']) {
                    map.wildcard.push((m.topic.as_str().into(), index));
                } else {
                    map.exact.entry(m.topic.as_str().into()).or_insert(index);
                }
            }
        }
        map
    }

    /// The loop tag, signal and payload format a topic feeds, or `None` when no source's filter
    /// matches it.
    pub fn lookup(&self, topic: &str) -> Option<(Arc<str>, Signal, &PayloadFormat)> {
        self.route(topic)
            .map(|r| (r.loop_tag.clone(), r.signal, &r.format))
    }

    fn route(&self, topic: &str) -> Option<&Route> {
        if !topic::is_valid_topic_name(topic) {
            return None;
        }
        let index = match self.exact.get(topic) {
            Some(&i) => i,
            None => {
                self.wildcard
                    .iter()
                    .find(|(filter, _)| topic::matches(filter, topic))?
                    .1
            }
        };
        self.routes.get(index)
    }

    /// How many sources the map holds.
    pub fn len(&self) -> usize {
        self.routes.len()
    }

    pub fn is_empty(&self) -> bool {
        self.routes.is_empty()
    }
}

/// The limits a message must respect.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Limits {
    pub max_payload_bytes: usize,
    /// How far after its receipt a sample's time may be.
    pub max_future_ms: i64,
}

impl Limits {
    pub fn from_settings(mqtt: &MqttSettings) -> Limits {
        Limits {
            max_payload_bytes: mqtt.max_payload_bytes,
            max_future_ms: mqtt.max_future_ms(),
        }
    }
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
mod tests {
    use super::*;
    use crate::config::{MqttSource, Source};
    use proptest::prelude::*;
    use std::path::Path;

    const CONFIG: &str = r#"
[mqtt]
url = "mqtt://127.0.0.1"
client_id = "headroom-test"
alert_topic = "headroom/test/alerts"

[loops.TIC-101]
op_min = 0
op_max = 100
expected_period_s = 1
spec = { settle_within_s = 900 }
sp = { topic = "plant/r1/TIC-101/sp", format = "number" }
pv = { topic = "plant/r1/TIC-101/pv", format = "json" }
op = { topic = "plant/r1/TIC-101/op", format = "json", value_field = "out", time_field = "ts" }
mode = { topic = "plant/r1/TIC-101/mode", format = "number" }

[loops.FIC-201]
op_min = 0
op_max = 100
expected_period_s = 1
spec = { settle_within_s = 60 }
sp = { topic = "plant/feed/+/sp", format = "number" }
pv = { topic = "plant/feed/FIC-201/pv/#", format = "number" }
op = { topic = "plant/feed/FIC-201/op", format = "number" }
mode = { topic = "plant/feed/FIC-201/mode", format = "json", auto_values = ["2", "3"] }

[loops.LIC-301]
op_min = 0
op_max = 100
expected_period_s = 1
spec = { settle_within_s = 600 }
sp = { topic = "$plant/LIC-301/sp", format = "number" }
pv = { topic = "plant/level/LIC-301/pv", format = "number" }
op = { topic = "$plant/LIC-301/op", format = "number" }
"#;

    /// 2026-11-23T08:00:00Z.
    const NOW: i64 = 1_795_420_800_000;

    const LIMITS: Limits = Limits {
        max_payload_bytes: 1024,
        max_future_ms: 300_000,
    };

    fn config() -> Config {
        Config::parse(CONFIG, Path::new("t.toml")).unwrap_or_else(|e| panic!("{e}"))
    }

    fn map() -> TopicMap {
        TopicMap::new(&config())
    }

    fn ok(topic: &str, payload: &str) -> Vec<(i64, f64)> {
        match decode(topic, payload.as_bytes(), NOW, &map(), &LIMITS) {
            Ok(samples) => samples.iter().map(|s| (s.ts_ms, s.value)).collect(),
            Err(r) => panic!("{payload:?} on {topic} was rejected: {r}"),
        }
    }

    fn value(topic: &str, payload: &str) -> f64 {
        let s = ok(topic, payload);
        assert_eq!(s.len(), 1, "{s:?}");
        s[0].1
    }

    fn rejected(topic: &str, payload: &[u8]) -> Rejection {
        match decode(topic, payload, NOW, &map(), &LIMITS) {
            Ok(s) => panic!("{payload:?} on {topic} was accepted: {s:?}"),
            Err(r) => r,
        }
    }

    fn reason(topic: &str, payload: &str) -> &'static str {
        rejected(topic, payload.as_bytes()).reason()
    }

    const SP: &str = "plant/r1/TIC-101/sp";
    const PV: &str = "plant/r1/TIC-101/pv";
    const OP: &str = "plant/r1/TIC-101/op";
    const MODE: &str = "plant/r1/TIC-101/mode";

    #[test]
    fn exact_topics_map_to_their_loop_and_signal() {
        let m = map();
        let (tag, signal, format) = m.lookup(PV).unwrap();
        assert_eq!((&*tag, signal), ("TIC-101", Signal::Pv));
        assert!(matches!(format, PayloadFormat::Json(_)));
        let (tag, signal, _) = m.lookup("plant/feed/FIC-201/op").unwrap();
        assert_eq!((&*tag, signal), ("FIC-201", Signal::Op));
        assert_eq!(m.len(), 11);
    }

    #[test]
    fn wildcard_filters_map_the_topics_they_match() {
        // A `#` overlaps every other filter, so validation would refuse it; set it by hand to see
        // that exact topics and earlier filters come first and `$` topics stay out.
        let mut cfg = config();
        let lic = cfg.loops.get_mut("LIC-301").unwrap();
        lic.pv = Some(Source::Mqtt(MqttSource {
            topic: "#".into(),
            format: PayloadFormat::Number,
        }));
        let m = TopicMap::new(&cfg);
        let at = |t: &str| m.lookup(t).map(|(tag, s, _)| (tag.to_string(), s));
        let fic = |s| Some(("FIC-201".to_string(), s));
        // a/+/c
        assert_eq!(at("plant/feed/FIC-201/sp"), fic(Signal::Sp));
        assert_eq!(at("plant/feed/anything/sp"), fic(Signal::Sp));
        // a/# matches the parent level and everything below it.
        assert_eq!(at("plant/feed/FIC-201/pv"), fic(Signal::Pv));
        assert_eq!(at("plant/feed/FIC-201/pv/raw/1"), fic(Signal::Pv));
        // An exact topic wins without trying the wildcards, and `#` catches the rest...
        assert_eq!(at("plant/feed/FIC-201/op"), fic(Signal::Op));
        let lic = |s| Some(("LIC-301".to_string(), s));
        assert_eq!(at("somewhere/else"), lic(Signal::Pv));
        assert_eq!(at("plant/feed/x/sp/extra"), lic(Signal::Pv));
        // ...but not topics beginning with $, which only exact or $-led filters match.
        assert_eq!(at("$SYS/broker/load"), None);
        assert_eq!(at("$plant/LIC-301/sp"), lic(Signal::Sp));
        assert_eq!(at("$plant/LIC-301/pv"), None);
    }

    #[test]
    fn topics_no_filter_matches_are_unknown() {
        let m = map();
        for t in [
            "plant/r1/TIC-101",
            "plant/r1/TIC-101/pv/x",
            "elsewhere",
            "$SYS/broker/load",
            "",
            "a/+",
        ] {
            let r = decode(t, b"1", NOW, &m, &LIMITS).unwrap_err();
            assert_eq!(r.reason(), "unknown_topic", "{t}");
            assert_eq!(r.topic(), t);
            assert!(r.origin().is_none());
        }
    }

    #[test]
    fn a_plain_number_is_one_sample_at_the_receive_time() {
        let s = decode(SP, b" 71.25\n", NOW, &map(), &LIMITS).unwrap();
        assert_eq!(
            s,
            vec![Sample {
                loop_tag: "TIC-101".into(),
                signal: Signal::Sp,
                ts_ms: NOW,
                value: 71.25
            }]
        );
        assert_eq!(value(SP, "-3e2"), -300.0);
        assert_eq!(value(SP, "-0").to_bits(), 0.0_f64.to_bits());
    }

    #[test]
    fn plain_text_that_is_not_a_number_is_malformed() {
        for p in [
            "",
            "  ",
            "12 °C",
            "0x10",
            "1,5",
            "seventy",
            "{\"value\": 1}",
        ] {
            assert_eq!(reason(SP, p), "malformed_payload", "{p:?}");
        }
        let r = rejected(SP, b"\xff\xfe12");
        assert_eq!(r.reason(), "malformed_payload");
        assert!(r.to_string().contains("\\xff\\xfe12"), "{r}");
    }

    #[test]
    fn nan_and_infinity_are_not_finite() {
        for p in ["NaN", "nan", "inf", "-inf", "Infinity", "1e999"] {
            assert_eq!(reason(SP, p), "not_finite", "{p:?}");
        }
        for p in [
            r#"{"value": NaN}"#,
            r#"{"value": -Infinity}"#,
            r#"{"value": null}"#,
            r#"{"value": "NaN"}"#,
            "{\"time\": 1,\n \"value\": Infinity}",
        ] {
            assert_eq!(reason(PV, p), "not_finite", "{p:?}");
        }
        assert_eq!(reason(MODE, "NaN"), "not_finite");
    }

    #[test]
    fn a_json_object_gives_its_value_and_time() {
        assert_eq!(ok(PV, r#"{"value": 64.5}"#), vec![(NOW, 64.5)]);
        assert_eq!(
            ok(
                PV,
                r#"{"value": 64.5, "time": "2026-11-23T07:59:00Z", "unit": "°C"}"#
            ),
            vec![(NOW - 60_000, 64.5)]
        );
        assert_eq!(
            ok(
                PV,
                r#"{"value": 1, "time": "2026-11-23T08:59:00.25+01:00"}"#
            ),
            vec![(NOW - 60_000 + 250, 1.0)]
        );
        assert_eq!(
            ok(PV, r#"{"value": 1, "time": 1795420740000}"#),
            vec![(NOW - 60_000, 1.0)]
        );
        assert_eq!(ok(PV, r#"{"value": 2, "time": null}"#), vec![(NOW, 2.0)]);
        // Other field names, as configured.
        assert_eq!(
            ok(OP, r#"{"out": 40, "ts": 1795420799000}"#),
            vec![(NOW - 1000, 40.0)]
        );
    }

    #[test]
    fn times_are_rounded_to_the_nearest_millisecond() {
        assert_eq!(
            ok(PV, r#"{"value": 1, "time": 1795420740000.5}"#)[0].0,
            NOW - 59_999
        );
        assert_eq!(
            ok(PV, r#"{"value": 1, "time": 1795420740000.4}"#)[0].0,
            NOW - 60_000
        );
        assert_eq!(
            ok(
                PV,
                r#"{"value": 1, "time": "2026-11-23T07:59:00.0004999Z"}"#
            )[0]
            .0,
            NOW - 60_000
        );
        assert_eq!(
            ok(PV, r#"{"value": 1, "time": "2026-11-23T07:59:00.0005Z"}"#)[0].0,
            NOW - 59_999
        );
    }

    #[test]
    fn a_json_batch_gives_one_sample_per_element() {
        let p = r#"[{"value": 1, "time": 1795420700000}, {"value": 2, "time": 1795420701000},
                    {"value": 3}]"#;
        assert_eq!(
            ok(PV, p),
            vec![
                (1_795_420_700_000, 1.0),
                (1_795_420_701_000, 2.0),
                (NOW, 3.0)
            ]
        );
        assert_eq!(ok(PV, "[]"), vec![]);
    }

    #[test]
    fn one_bad_element_rejects_the_whole_batch() {
        let r = rejected(PV, br#"[{"value": 1}, {"value": "high"}, {"value": 3}]"#);
        assert_eq!(r.reason(), "malformed_payload");
        assert!(r.to_string().contains("batch element 1"), "{r}");
        assert_eq!(reason(PV, r#"[{"value": 1}, 2]"#), "malformed_payload");
        assert_eq!(
            reason(PV, r#"[{"value": 1}, {"value": 2, "time": "x"}]"#),
            "bad_timestamp"
        );
        assert_eq!(
            reason(PV, r#"[{"value": 1}, {"value": null}]"#),
            "not_finite"
        );
        let far = NOW + 3_600_000;
        assert_eq!(
            reason(
                PV,
                &format!(r#"[{{"value": 1}}, {{"value": 2, "time": {far}}}]"#)
            ),
            "future_timestamp"
        );
    }

    #[test]
    fn json_that_is_not_an_object_with_a_number_is_malformed() {
        for p in [
            "",
            "64.5",
            "\"64.5\"",
            "{\"value\": 64.5",
            "{\"val\": 64.5}",
            "{\"value\": \"64.5\"}",
            "{\"value\": true}",
            "{\"value\": [1]}",
            "{\"value\": {\"v\": 1}}",
            "null",
            "[[{\"value\": 1}]]",
        ] {
            assert_eq!(reason(PV, p), "malformed_payload", "{p:?}");
        }
        let r = rejected(PV, b"64.5");
        assert!(r.to_string().contains("format = \"number\""), "{r}");
    }

    #[test]
    fn unreadable_or_ancient_times_are_bad_timestamps() {
        for t in [
            "\"yesterday\"",
            "\"2026-11-23T08:00:00\"",
            "\"2026-11-23\"",
            "\"1795420740000\"",
            "true",
            "[1795420740000]",
            "{}",
            // Seconds where milliseconds belong: 1970 plus three weeks.
            "1795420740",
            "-5",
            "\"1999-12-31T23:59:59Z\"",
        ] {
            let p = format!(r#"{{"value": 1, "time": {t}}}"#);
            assert_eq!(reason(PV, &p), "bad_timestamp", "{p}");
        }
        let r = rejected(PV, br#"{"value": 1, "time": 1795420740}"#);
        assert!(r.to_string().contains("epoch seconds"), "{r}");
    }

    #[test]
    fn times_too_far_ahead_of_receipt_are_refused() {
        let limit = NOW + LIMITS.max_future_ms;
        assert_eq!(
            ok(PV, &format!(r#"{{"value": 1, "time": {limit}}}"#))[0].0,
            limit
        );
        for t in [
            format!("{}", limit + 1),
            format!("{}.0", limit + 1),
            "1e300".to_string(),
            "18446744073709551615".to_string(),
            "\"2999-01-01T00:00:00Z\"".to_string(),
        ] {
            let p = format!(r#"{{"value": 1, "time": {t}}}"#);
            assert_eq!(reason(PV, &p), "future_timestamp", "{p}");
        }
        let r = rejected(
            PV,
            format!(r#"{{"value": 1, "time": {}}}"#, NOW + 600_000).as_bytes(),
        );
        let shown = r.to_string();
        assert!(
            shown.contains("600 s after") && shown.contains("300 s allowed"),
            "{shown}"
        );
    }

    #[test]
    fn payloads_over_the_limit_are_refused_unread() {
        let big = format!("{:>1025}", "1");
        let r = rejected(SP, big.as_bytes());
        assert_eq!(r.reason(), "oversized_payload");
        assert!(r.to_string().contains("1025 bytes"), "{r}");
        let fits = format!("{:>1024}", "1");
        assert_eq!(value(SP, &fits), 1.0);
    }

    #[test]
    fn mode_words_and_numbers_become_automatic_or_not() {
        // Default automatic values: words AUTO, CAS, ON, TRUE; any non-zero number.
        for (p, want) in [
            ("AUTO", 1.0),
            ("auto\n", 1.0),
            ("Cas", 1.0),
            ("1", 1.0),
            ("2", 1.0),
            ("MAN", 0.0),
            ("0", 0.0),
            ("IMAN", 0.0),
        ] {
            assert_eq!(value(MODE, p), want, "{p:?}");
        }
        assert_eq!(reason(MODE, " "), "malformed_payload");
        // A list with numbers: exactly those numbers, in JSON numbers, strings and booleans.
        let fic = "plant/feed/FIC-201/mode";
        for (p, want) in [
            (r#"{"value": 2}"#, 1.0),
            (r#"{"value": 3.0}"#, 1.0),
            (r#"{"value": 1}"#, 0.0),
            (r#"{"value": "2"}"#, 1.0),
            (r#"{"value": "AUTO"}"#, 0.0),
            (r#"{"value": true}"#, 0.0),
            (r#"{"value": false}"#, 0.0),
        ] {
            assert_eq!(value(fic, p), want, "{p}");
        }
        assert_eq!(reason(fic, r#"{"value": []}"#), "malformed_payload");
    }

    #[test]
    fn a_rejection_names_the_topic_loop_signal_and_payload_start() {
        let payload = [b"x".repeat(100).as_slice(), b"\n\x00"].concat();
        let r = rejected(SP, &payload);
        let o = r.origin().unwrap();
        assert_eq!(
            (&*o.loop_tag, o.signal, o.topic.as_str()),
            ("TIC-101", Signal::Sp, SP)
        );
        let shown = r.to_string();
        assert!(shown.starts_with("malformed_payload: "), "{shown}");
        assert!(
            shown.contains(SP) && shown.contains("TIC-101 sp"),
            "{shown}"
        );
        assert!(
            shown.contains(&format!("b\"{}…\"", "x".repeat(64))),
            "{shown}"
        );
        let r = rejected(SP, b"\xe2\x82\xac\n");
        assert!(r.to_string().contains("\\xe2\\x82\\xac\\n"), "{r}");
    }

    #[test]
    fn every_reason_is_listed() {
        let far = format!(r#"{{"value": 1, "time": {}}}"#, NOW + 3_600_000);
        let found: Vec<&str> = vec![
            reason("nowhere", "1"),
            rejected(SP, &[b'1'; 2000]).reason(),
            reason(SP, "x"),
            reason(SP, "NaN"),
            reason(PV, r#"{"value": 1, "time": "x"}"#),
            reason(PV, &far),
        ];
        assert_eq!(found, Rejection::REASONS);
    }

    fn topics() -> impl Strategy<Value = String> {
        prop_oneof![
            any::<String>(),
            "[a-z$/+#]{0,12}",
            Just(SP.to_string()),
            Just(PV.to_string()),
            Just(OP.to_string()),
            Just(MODE.to_string()),
            Just("plant/feed/FIC-201/mode".to_string()),
            "plant/feed/[a-z+#/]{0,6}/sp",
            "plant/feed/FIC-201/pv(/[a-z]{0,3}){0,3}",
        ]
    }

    fn payloads() -> impl Strategy<Value = Vec<u8>> {
        prop_oneof![
            proptest::collection::vec(any::<u8>(), 0..200),
            "[ -~]{0,60}".prop_map(String::into_bytes),
            (any::<f64>(), any::<i64>(), "[ -~]{0,30}").prop_map(|(v, t, s)| {
                format!(r#"[{{"value": {v}, "time": {t}}}, {{"value": "{s}", "out": {v}}}]"#)
                    .into_bytes()
            }),
            (any::<f64>(), any::<f64>()).prop_map(|(v, t)| {
                format!(r#"{{"value": {v:e}, "ts": {t:e}, "out": {v}, "time": {t}}}"#).into_bytes()
            }),
            "[\\[\\]{}\":,0-9a-zNI .e+-]{0,80}".prop_map(String::into_bytes),
        ]
    }

    proptest! {
        #[test]
        fn decode_never_panics(
            topic in topics(),
            payload in payloads(),
            received_ms in prop_oneof![any::<i64>(), Just(NOW)],
            max_payload_bytes in prop_oneof![0usize..300, Just(usize::MAX)],
            max_future_ms in prop_oneof![any::<i64>(), Just(300_000i64)],
        ) {
            let limits = Limits { max_payload_bytes, max_future_ms };
            let m = map();
            match decode(&topic, &payload, received_ms, &m, &limits) {
                Ok(samples) => {
                    for s in samples {
                        prop_assert!(s.value.is_finite());
                        prop_assert!(s.ts_ms == received_ms || s.ts_ms >= EARLIEST_MS);
                    }
                }
                Err(r) => {
                    prop_assert!(Rejection::REASONS.contains(&r.reason()));
                    prop_assert!(!r.to_string().is_empty());
                }
            }
        }
    }
}
