//! Scheduled generation: once a week, at the configured weekday and local time, the daemon
//! summarises the last complete ISO week, keeps the summary in the store and writes it to the
//! configured folder.
//!
//! The schedule runs on the wall clock in the configured time zone (the meeting is held in local
//! time); the week boundaries are local midnights, so a week with a daylight-saving change is 167
//! or 169 hours. A run that fails is logged and retried at the next hour, not dropped silently.

use super::{Format, Period, ReportError, gather, write_files};
use crate::config::{Config, ReportSettings};
use crate::store::Store;
use jiff::civil::{Time, Weekday};
use jiff::tz::TimeZone;
use jiff::{SignedDuration, Timestamp, ToSpan, Zoned};
use std::path::{Path, PathBuf};
use std::time::Duration;
use tokio::sync::watch;

/// The longest single sleep. The schedule is re-read from the wall clock after each, so a clock
/// that jumps (a suspended machine, a corrected time) moves the run by at most this much.
const MAX_SLEEP: Duration = Duration::from_secs(15 * 60);

/// After a failed run, the next attempt comes this much later.
const RETRY_AFTER: Duration = Duration::from_secs(3_600);

/// A `[report]` section that cannot be resolved (the config's checks refuse both cases first).
#[derive(Debug, thiserror::Error)]
pub enum ScheduleError {
    #[error(transparent)]
    TimeZone(#[from] crate::units::UnknownTimeZone),
}

/// A resolved `[report]` section.
#[derive(Debug, Clone)]
pub struct Schedule {
    pub weekday: Weekday,
    pub time: Time,
    pub time_zone: TimeZone,
    pub folder: PathBuf,
    pub formats: Vec<Format>,
    /// The configuration file the settings came from, so each summary's reproduce commands can
    /// name it (`analyze --config FILE --loop TAG`).
    pub config_file: PathBuf,
}

impl Schedule {
    /// From the checked config section (its time zone and formats were validated there) of the
    /// configuration file `config_file`.
    pub fn from_settings(
        s: &ReportSettings,
        config_file: &Path,
    ) -> Result<Schedule, ScheduleError> {
        Ok(Schedule {
            weekday: s.weekday,
            time: s.time,
            time_zone: crate::units::time_zone(&s.time_zone)?,
            folder: s.folder.clone(),
            formats: s.formats.clone(),
            config_file: config_file.to_path_buf(),
        })
    }

    /// The first scheduled instant strictly after `after`. On a day when the local time does not
    /// exist (skipped by a daylight-saving change) the run comes just after the gap; when it
    /// exists twice, at its first occurrence.
    pub fn next_run(&self, after: Timestamp) -> Zoned {
        let today = after.to_zoned(self.time_zone.clone()).date();
        for d in 0..=8 {
            let Ok(date) = today.checked_add(d.days()) else {
                break;
            };
            if date.weekday() != self.weekday {
                continue;
            }
            if let Ok(at) = date.to_datetime(self.time).to_zoned(self.time_zone.clone())
                && at.timestamp() > after
            {
                return at;
            }
        }
        // Unreachable within 8 days for any weekday; a far-future answer keeps the loop safe.
        (after + SignedDuration::from_hours(7 * 24)).to_zoned(self.time_zone.clone())
    }
}

/// The last complete ISO week before the run: for a Monday-morning run, the week that ended at
/// the preceding midnight.
pub fn week_before(run: &Zoned) -> Result<Period, super::PeriodError> {
    Period::week_containing(run.timestamp(), run.time_zone())?.previous()
}

/// Generates, keeps and writes the summary of `period`. Returns the files written.
pub async fn generate_once(
    store: &Store,
    config: &Config,
    schedule: &Schedule,
    period: &Period,
) -> Result<Vec<PathBuf>, ReportError> {
    let now = Timestamp::now();
    let report = gather(
        store,
        Some(config),
        Some(&schedule.config_file),
        period,
        now,
    )
    .await?;
    let written = write_files(&report, period, &schedule.formats, &schedule.folder)?;
    for ((_, text), f) in written.iter().zip(&schedule.formats) {
        store
            .keep_report(
                &period.label,
                period.from_ms(),
                period.to_ms(),
                f.as_str(),
                now.as_millisecond(),
                text,
            )
            .await?;
    }
    Ok(written.into_iter().map(|(p, _)| p).collect())
}

/// The scheduled task: sleeps until each run, generates, and returns as soon as `stop` turns
/// true (between runs, or after the run in hand).
pub async fn run(
    store: Store,
    config: Config,
    schedule: Schedule,
    mut stop: watch::Receiver<bool>,
) {
    let mut next = schedule.next_run(Timestamp::now());
    tracing::info!(next = %next, "weekly summary scheduled");
    loop {
        if *stop.borrow() {
            return;
        }
        let now = Timestamp::now();
        if now >= next.timestamp() {
            let outcome = match week_before(&next) {
                Ok(period) => generate_once(&store, &config, &schedule, &period)
                    .await
                    .map(|files| (period, files)),
                Err(e) => Err(e.into()),
            };
            match outcome {
                Ok((period, files)) => {
                    tracing::info!(week = %period.label, files = ?files, "weekly summary written");
                    next = schedule.next_run(Timestamp::now());
                }
                Err(e) => {
                    tracing::warn!(error = %e, "weekly summary failed; retrying in an hour");
                    next = (Timestamp::now()
                        + SignedDuration::try_from(RETRY_AFTER)
                            .unwrap_or(SignedDuration::from_hours(1)))
                    .to_zoned(schedule.time_zone.clone());
                }
            }
            continue;
        }
        let until = next.timestamp().duration_since(now);
        let nap = Duration::try_from(until)
            .unwrap_or(MAX_SLEEP)
            .min(MAX_SLEEP);
        tokio::select! {
            _ = tokio::time::sleep(nap) => {}
            changed = stop.changed() => {
                if changed.is_err() {
                    return;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn schedule(weekday: Weekday, time: &str, zone: &str) -> Schedule {
        Schedule {
            weekday,
            time: time.parse().unwrap(),
            time_zone: crate::units::time_zone(zone)
                .expect("the tests need the tzdata package (/usr/share/zoneinfo)"),
            folder: PathBuf::from("reports"),
            formats: vec![Format::Html],
            config_file: PathBuf::from("headroom.toml"),
        }
    }

    fn at(s: &str) -> Timestamp {
        s.parse().unwrap()
    }

    #[test]
    fn the_next_run_is_the_coming_weekday_at_local_time() {
        let s = schedule(Weekday::Monday, "07:00", "Europe/Berlin");
        // Wednesday 2026-11-25: the next Monday is 30 November, 07:00 CET = 06:00 UTC.
        let next = s.next_run(at("2026-11-25T12:00:00Z"));
        assert_eq!(next.to_string(), "2026-11-30T07:00:00+01:00[Europe/Berlin]");
        // Exactly at the run time, the next one is a week later.
        let again = s.next_run(next.timestamp());
        assert_eq!(
            again.to_string(),
            "2026-12-07T07:00:00+01:00[Europe/Berlin]"
        );
        // Earlier on the day itself, it is that day.
        let same_day = s.next_run(at("2026-11-30T05:59:00Z"));
        assert_eq!(same_day, next);
    }

    #[test]
    fn a_run_in_a_skipped_hour_comes_after_the_daylight_saving_gap() {
        // Europe/Berlin skips 02:00–03:00 on Sunday 29 March 2026.
        let s = schedule(Weekday::Sunday, "02:30", "Europe/Berlin");
        let next = s.next_run(at("2026-03-28T00:00:00Z"));
        assert_eq!(next.to_string(), "2026-03-29T03:30:00+02:00[Europe/Berlin]");
    }

    #[test]
    fn each_run_covers_the_iso_week_before_it_in_the_zone() {
        let s = schedule(Weekday::Monday, "07:00", "America/New_York");
        // Monday 2 November 2026, the day after the clocks went back: week 44 has 169 hours.
        let next = s.next_run(at("2026-10-31T12:00:00Z"));
        let week = week_before(&next).unwrap();
        assert_eq!(week.label, "2026-W44");
        assert_eq!(week.hours(), 169.0);
        // Across the year end: the run on Monday 4 January 2027 covers 2026-W53.
        let s = schedule(Weekday::Monday, "06:00", "UTC");
        let next = s.next_run(at("2027-01-01T00:00:00Z"));
        assert_eq!(next.date().to_string(), "2027-01-04");
        assert_eq!(week_before(&next).unwrap().label, "2026-W53");
    }

    #[tokio::test]
    async fn a_scheduled_run_writes_every_format_and_keeps_them_in_the_store() {
        use crate::analysis::Verdict;
        let dir = tempfile::tempdir().unwrap();
        let store = Store::open(&dir.path().join("h.db")).await.unwrap();
        let config = Config::parse(
            "[loops.TIC-101]\nop_min = 0\nop_max = 100\nspec = { settle_within_s = 120 }\n",
            &dir.path().join("plant.toml"),
        )
        .unwrap();
        let e = crate::store::testing::episode_result(Verdict::Met, Some(60.0));
        let week = Period::parse_week("2026-W48", &TimeZone::UTC).unwrap();
        store
            .upsert_episode(
                "TIC-101",
                &e,
                week.from_ms() + 3_600_000,
                week.from_ms() + 4_000_000,
                true,
                0,
            )
            .await
            .unwrap();
        let mut s = schedule(Weekday::Monday, "07:00", "UTC");
        s.folder = dir.path().join("reports");
        s.formats = Format::ALL.to_vec();
        let files = generate_once(&store, &config, &s, &week).await.unwrap();
        let names: Vec<String> = files
            .iter()
            .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
            .collect();
        assert_eq!(
            names,
            [
                "loop-health-2026-W48.html",
                "loop-health-2026-W48.md",
                "loop-health-2026-W48.json"
            ]
        );
        let kept = store.kept_reports().await.unwrap();
        assert_eq!(kept.len(), 3);
        let json = kept.iter().find(|k| k.format == "json").unwrap();
        let text = store.kept_report_content(json.id).await.unwrap().unwrap();
        assert_eq!(text, std::fs::read_to_string(&files[2]).unwrap());
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(v["loops"][0]["stats"]["counts"]["met"], 1);
    }

    #[tokio::test]
    async fn the_task_stops_on_the_stop_signal_while_waiting() {
        let dir = tempfile::tempdir().unwrap();
        let store = Store::open(&dir.path().join("h.db")).await.unwrap();
        let config = Config::parse("", std::path::Path::new("empty.toml")).unwrap();
        let (tx, rx) = watch::channel(false);
        let task = tokio::spawn(run(
            store,
            config,
            schedule(Weekday::Monday, "07:00", "UTC"),
            rx,
        ));
        tx.send(true).unwrap();
        tokio::time::timeout(Duration::from_secs(5), task)
            .await
            .expect("the schedule task did not stop")
            .unwrap();
    }
}
