//! Times and spans as flags take them: `--since 24h`, `--from 2026-11-23T08:00:00Z`,
//! `--duration 7d`.

use super::Usage;

/// Reads `7d`, `36h`, `90m`, `3600s` or a plain number of seconds; `None` for anything else,
/// a negative span included.
pub fn parse_span(s: &str) -> Option<f64> {
    let s = s.trim();
    let (num, factor) = match s.char_indices().last()? {
        (i, 'd') => (&s[..i], 86_400.0),
        (i, 'h') => (&s[..i], 3_600.0),
        (i, 'm') => (&s[..i], 60.0),
        (i, 's') => (&s[..i], 1.0),
        _ => (s, 1.0),
    };
    let n: f64 = num.trim().parse().ok()?;
    (n.is_finite() && n >= 0.0).then_some(n * factor)
}

/// Reads RFC 3339, or an age with its unit (`90m`, `24h`, `7d`, `30s`) counted back from now,
/// into epoch milliseconds. A refusal names `flag`.
pub fn parse_time(flag: &'static str, s: &str) -> Result<i64, Usage> {
    if let Ok(t) = s.parse::<jiff::Timestamp>() {
        return Ok(t.as_millisecond());
    }
    let age_s = s
        .ends_with(['s', 'm', 'h', 'd'])
        .then(|| parse_span(s))
        .flatten()
        .ok_or_else(|| Usage::Time {
            flag,
            given: s.to_owned(),
        })?;
    let now = jiff::Timestamp::now().as_millisecond();
    Ok(now.saturating_sub(crate::units::s_to_ms(age_s)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spans_read_with_their_units() {
        assert_eq!(parse_span("7d"), Some(604_800.0));
        assert_eq!(parse_span("36h"), Some(129_600.0));
        assert_eq!(parse_span("90m"), Some(5_400.0));
        assert_eq!(parse_span("3600s"), Some(3_600.0));
        assert_eq!(parse_span("1.5d"), Some(129_600.0));
        assert_eq!(parse_span("600"), Some(600.0));
        assert_eq!(parse_span("week"), None);
        assert_eq!(parse_span("-1d"), None);
        assert_eq!(parse_span(""), None);
    }

    #[test]
    fn times_are_rfc3339_or_ages_with_a_unit() {
        assert_eq!(
            parse_time("--since", "2026-11-23T08:00:00Z").unwrap(),
            1_795_420_800_000
        );
        let now = jiff::Timestamp::now().as_millisecond();
        let day_ago = parse_time("--since", "1d").unwrap();
        assert!((now - 86_400_000 - day_ago).abs() < 60_000, "{day_ago}");
        for bad in ["-5m", "nanh", "infd", "600", "yesterday"] {
            let e = parse_time("--since", bad).unwrap_err().to_string();
            assert!(e.starts_with("cannot read --since "), "{bad}: {e}");
        }
    }
}
