use super::*;
use crate::config::{Config, MqttSource, Source};
use crate::mqtt::routes::PayloadFormat;
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
    TopicMap::new(config().mqtt_routes())
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
    let m = TopicMap::new(cfg.mqtt_routes());
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
