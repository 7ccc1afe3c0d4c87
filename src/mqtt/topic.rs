//! MQTT topic names and topic filters, by the rules of MQTT 3.1.1 (section 4.7).
//!
//! A topic name is what a message is published on (`wrenmoor/r1/TIC-101/pv`); a topic filter is
//! what a client subscribes to and may hold wildcards: `+` stands for exactly one level, `#` for
//! the parent level and any number of levels below it, so `a/#` matches `a`, `a/b` and `a/b/c`.
//! Topics that begin with `$` (the broker's own, such as `$SYS/...`) never match a filter that
//! begins with a wildcard.
//!
//! Everything here is pure string work. The config uses it to validate filters at load and to
//! find two sources whose filters could both match one topic; the decoder uses [`matches()`].

/// The longest topic or filter MQTT can carry: its length is a 16-bit field.
pub const MAX_TOPIC_BYTES: usize = 65_535;

/// Why a string is not a usable topic filter or topic name.
pub fn filter_problem(filter: &str) -> Option<String> {
    common_problem(filter).or_else(|| {
        let levels: Vec<&str> = filter.split('/').collect();
        for (i, level) in levels.iter().enumerate() {
            if level.contains('#') && (*level != "#" || i + 1 != levels.len()) {
                return Some("`#` must be a whole level and the last one (as in `plant/#`)".into());
            }
            if level.contains('+') && *level != "+" {
                return Some("`+` must be a whole level (as in `plant/+/pv`)".into());
            }
        }
        None
    })
}

/// Why a string is not a topic name that headroom may publish on.
pub fn publish_topic_problem(topic: &str) -> Option<String> {
    common_problem(topic).or_else(|| {
        if topic.contains(['+', '#']) {
            Some("a topic to publish on cannot hold the wildcards `+` or `#`".into())
        } else if topic.starts_with('$') {
            Some("topics beginning with `$` are reserved for the broker".into())
        } else {
            None
        }
    })
}

fn common_problem(s: &str) -> Option<String> {
    if s.is_empty() {
        Some("a topic cannot be empty".into())
    } else if s.len() > MAX_TOPIC_BYTES {
        Some(format!("a topic can be at most {MAX_TOPIC_BYTES} bytes"))
    } else if s.contains('\0') {
        Some("a topic cannot contain the NUL character".into())
    } else {
        None
    }
}

/// Whether a topic name is one a broker could have delivered: not empty, no wildcards, no NUL.
/// Anything else cannot match a subscription, whatever the filter says.
pub fn is_valid_topic_name(topic: &str) -> bool {
    common_problem(topic).is_none() && !topic.contains(['+', '#'])
}

/// Whether `topic` (a topic name) matches `filter` (a valid topic filter).
pub fn matches(filter: &str, topic: &str) -> bool {
    if !is_valid_topic_name(topic) {
        return false;
    }
    if topic.starts_with('$') && filter.starts_with(['+', '#']) {
        return false;
    }
    let mut topic_levels = topic.split('/');
    for f in filter.split('/') {
        if f == "#" {
            return true;
        }
        match topic_levels.next() {
            Some(t) if f == "+" || f == t => {}
            _ => return false,
        }
    }
    topic_levels.next().is_none()
}

/// Whether some topic name matches both filters; if so, one such topic, to show the user.
///
/// Both filters must be valid. The walk goes level by level: a `#` on either side matches
/// whatever the other side still holds (including nothing, since `a/#` matches `a`), `+` matches
/// any single level, and two literal levels must be equal.
pub fn overlap(a: &str, b: &str) -> Option<String> {
    let a: Vec<&str> = a.split('/').collect();
    let b: Vec<&str> = b.split('/').collect();
    // A topic that begins with `$` cannot match a filter that begins with a wildcard, so a filter
    // whose first level is a `$` literal shares no topic with one that begins with a wildcard.
    let wild = |l: &str| l == "+" || l == "#";
    if (wild(a[0]) && b[0].starts_with('$')) || (wild(b[0]) && a[0].starts_with('$')) {
        return None;
    }
    let mut example: Vec<&str> = Vec::new();
    let mut i = 0;
    loop {
        match (a.get(i), b.get(i)) {
            (Some(&"#"), _) => {
                example.extend(b[i.min(b.len())..].iter().map(|l| concrete(l)));
                break;
            }
            (_, Some(&"#")) => {
                example.extend(a[i.min(a.len())..].iter().map(|l| concrete(l)));
                break;
            }
            (None, None) => break,
            (None, Some(_)) | (Some(_), None) => return None,
            (Some(&x), Some(&y)) => {
                if x == "+" {
                    example.push(concrete(y));
                } else if y == "+" || x == y {
                    example.push(x);
                } else {
                    return None;
                }
            }
        }
        i += 1;
    }
    // Never empty: each filter has at least one level, and the first level always adds one.
    Some(example.join("/"))
}

/// A level of an example topic: a wildcard becomes a plain word.
fn concrete(level: &str) -> &str {
    match level {
        "+" | "#" => "x",
        l => l,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_plus_matches_exactly_one_level() {
        assert!(matches("a/+/c", "a/b/c"));
        assert!(matches("a/+/c", "a//c"));
        assert!(!matches("a/+/c", "a/b/x/c"));
        assert!(!matches("a/+/c", "a/c"));
        assert!(!matches("a/+/c", "a/b/c/d"));
        assert!(matches("+", "a"));
        assert!(!matches("+", "a/b"));
        assert!(matches("+/+", "/a"));
    }

    #[test]
    fn a_hash_matches_the_parent_and_everything_below() {
        assert!(matches("a/#", "a"));
        assert!(matches("a/#", "a/b"));
        assert!(matches("a/#", "a/b/c"));
        assert!(!matches("a/#", "b/a"));
        assert!(!matches("a/#", "ab"));
        assert!(matches("#", "a/b/c"));
        assert!(matches("#", "/"));
    }

    #[test]
    fn topics_beginning_with_dollar_do_not_match_leading_wildcards() {
        assert!(!matches("#", "$SYS/broker/uptime"));
        assert!(!matches("+/broker/uptime", "$SYS/broker/uptime"));
        assert!(matches("$SYS/#", "$SYS/broker/uptime"));
        assert!(matches("$SYS/+/uptime", "$SYS/broker/uptime"));
    }

    #[test]
    fn exact_filters_match_only_themselves() {
        assert!(matches("wrenmoor/r1/TIC-101/pv", "wrenmoor/r1/TIC-101/pv"));
        assert!(!matches("wrenmoor/r1/TIC-101/pv", "wrenmoor/r1/TIC-101/PV"));
        assert!(!matches(
            "wrenmoor/r1/TIC-101/pv",
            "wrenmoor/r1/TIC-101/pv/"
        ));
    }

    #[test]
    fn names_that_no_broker_would_deliver_match_nothing() {
        assert!(!matches("#", ""));
        assert!(!matches("#", "a/+"));
        assert!(!matches("a/+", "a/+"));
        assert!(!matches("#", "a\0b"));
    }

    #[test]
    fn wildcards_must_be_whole_levels() {
        assert!(filter_problem("a/+/c").is_none());
        assert!(filter_problem("a/#").is_none());
        assert!(filter_problem("#").is_none());
        assert!(filter_problem("a/b+").is_some());
        assert!(filter_problem("a/#/c").is_some());
        assert!(filter_problem("a#").is_some());
        assert!(filter_problem("").is_some());
        assert!(filter_problem("a\0").is_some());
    }

    #[test]
    fn publish_topics_hold_no_wildcards_and_no_leading_dollar() {
        assert!(publish_topic_problem("headroom/wrenmoor/alerts").is_none());
        assert!(publish_topic_problem("headroom/+/alerts").is_some());
        assert!(publish_topic_problem("headroom/#").is_some());
        assert!(publish_topic_problem("$SYS/x").is_some());
        assert!(publish_topic_problem("").is_some());
    }

    #[test]
    fn overlapping_filters_come_with_a_topic_both_match() {
        let cases = [
            ("a/+/c", "a/b/c"),
            ("a/+/c", "+/b/+"),
            ("a/#", "a"),
            ("a", "a/#"),
            ("#", "a/b"),
            ("#", "#"),
            ("a/b", "a/b"),
            ("+/+", "a/#"),
            ("$SYS/#", "$SYS/+"),
        ];
        for (a, b) in cases {
            let t = overlap(a, b).unwrap_or_else(|| panic!("{a} and {b} overlap"));
            assert!(matches(a, &t) && matches(b, &t), "{a} {b} -> {t}");
            let t = overlap(b, a).unwrap();
            assert!(matches(a, &t) && matches(b, &t), "{b} {a} -> {t}");
        }
    }

    #[test]
    fn disjoint_filters_do_not_overlap() {
        let cases = [
            ("a/+/c", "a/b/d"),
            ("a/+", "a/b/c"),
            ("a/b", "a"),
            ("a/#", "b/#"),
            ("#", "$SYS/x"),
            ("+/x", "$SYS/x"),
            ("a/b/c", "a/b/c/d"),
        ];
        for (a, b) in cases {
            assert_eq!(overlap(a, b), None, "{a} {b}");
            assert_eq!(overlap(b, a), None, "{b} {a}");
        }
    }
}
