//! `[report]`: when and where the daemon writes the weekly loop-health summary.

use super::error::Checker;
use super::raw::RawReport;
use super::relative_to;
use crate::summary_format::Format;
use std::path::PathBuf;

/// `[report]`: when the daemon generates the weekly loop-health summary, and where it goes.
/// Each run covers the last complete ISO 8601 week (Monday 00:00 to Monday 00:00 in
/// `time_zone`); the summary is kept in the store and written to `folder`.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportSettings {
    pub weekday: jiff::civil::Weekday,
    /// Local time of day in `time_zone`.
    pub time: jiff::civil::Time,
    /// An IANA name such as `Europe/London`, checked to exist when the file is read.
    pub time_zone: String,
    /// Resolved against the config file's folder when relative.
    pub folder: PathBuf,
    /// At least one, no repeats.
    pub formats: Vec<Format>,
}

/// The format names as a sentence: `"html", "md" or "json"`.
fn quoted_names() -> String {
    let names: Vec<String> = Format::ALL
        .iter()
        .map(|f| format!("{:?}", f.as_str()))
        .collect();
    match names.split_last() {
        Some((last, [])) => last.clone(),
        Some((last, rest)) => format!("{} or {last}", rest.join(", ")),
        None => String::new(),
    }
}

impl Checker<'_> {
    pub(super) fn report(&mut self, raw: RawReport) -> ReportSettings {
        use jiff::civil::{Time, Weekday};
        let days = [
            ("monday", Weekday::Monday),
            ("tuesday", Weekday::Tuesday),
            ("wednesday", Weekday::Wednesday),
            ("thursday", Weekday::Thursday),
            ("friday", Weekday::Friday),
            ("saturday", Weekday::Saturday),
            ("sunday", Weekday::Sunday),
        ];
        let weekday = days
            .iter()
            .find(|(n, _)| n.eq_ignore_ascii_case(raw.weekday.trim()))
            .map(|(_, d)| *d);
        if weekday.is_none() {
            self.problem(
                &["report", "weekday"],
                format!(
                    "{:?} is not a weekday: write monday ... sunday",
                    raw.weekday
                ),
            );
        }
        let time = raw.time.parse::<Time>().ok();
        if time.is_none() {
            self.problem(
                &["report", "time"],
                format!(
                    "{:?} is not a time of day: write 24-hour HH:MM, e.g. \"07:00\"",
                    raw.time
                ),
            );
        }
        if let Err(e) = crate::units::time_zone(&raw.time_zone) {
            self.problem(&["report", "time_zone"], e.to_string());
        }
        if raw.folder.as_os_str().is_empty() {
            self.problem(&["report", "folder"], "the report folder cannot be empty");
        }
        let mut formats = Vec::new();
        for f in &raw.formats {
            match Format::parse(f) {
                None => self.problem(
                    &["report", "formats"],
                    format!("unknown format {f:?}: use {}", quoted_names()),
                ),
                Some(format) if formats.contains(&format) => {
                    self.problem(&["report", "formats"], format!("{f:?} is listed twice"))
                }
                Some(format) => formats.push(format),
            }
        }
        if raw.formats.is_empty() {
            self.problem(&["report", "formats"], "list at least one format");
        }
        ReportSettings {
            weekday: weekday.unwrap_or(Weekday::Monday),
            time: time.unwrap_or(Time::midnight()),
            time_zone: raw.time_zone,
            folder: relative_to(self.dir, &raw.folder),
            formats,
        }
    }
}

#[cfg(test)]
mod tests {
    use crate::config::Config;
    use crate::config::fixture::refusal_in;
    use std::path::{Path, PathBuf};

    const LOOP: &str =
        "[loops.TIC-101]\nop_min = 0\nop_max = 100\nspec = { settle_within_s = 900 }\n";

    #[test]
    fn a_report_section_is_read_with_its_defaults() {
        let text = format!(
            "{LOOP}[report]\nweekday = \"Monday\"\ntime = \"07:30\"\nfolder = \"reports\"\n"
        );
        let c = Config::parse(&text, Path::new("/etc/headroom/plant.toml")).unwrap();
        let r = c.report.unwrap();
        assert_eq!(r.weekday, jiff::civil::Weekday::Monday);
        assert_eq!(r.time, jiff::civil::time(7, 30, 0, 0));
        assert_eq!(r.time_zone, "UTC");
        assert_eq!(r.folder, PathBuf::from("/etc/headroom/reports"));
        assert_eq!(r.formats, crate::summary_format::Format::ALL);
    }

    #[test]
    fn report_mistakes_are_named_with_their_line_and_key() {
        let text = format!(
            "{LOOP}[report]\nweekday = \"Moonday\"\ntime = \"7 o'clock\"\ntime_zone = \"Mars/Olympus\"\nfolder = \"r\"\nformats = [\"pdf\"]\n"
        );
        let e = refusal_in(&text, "plant.toml");
        for expected in [
            "plant.toml:6:11: report.weekday: \"Moonday\" is not a weekday",
            "plant.toml:7:8: report.time:",
            "plant.toml:8:13: report.time_zone: unknown time zone \"Mars/Olympus\"",
            "report.formats: unknown format \"pdf\"",
        ] {
            assert!(e.contains(expected), "missing {expected:?} in:\n{e}");
        }
    }
}
