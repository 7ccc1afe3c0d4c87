//! What the weekly loop-health summary reads (episodes and models of a period, how well each
//! signal was covered by data) and the summaries kept after they are generated.

use super::episodes::MODEL_COLUMNS;
use super::{EpisodeRow, ModelRow, Result, Store};
use crate::sample::Signal;
use serde::Serialize;

/// How well one signal was covered by samples over a period.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SeriesCoverage {
    pub loop_tag: String,
    pub signal: Signal,
    pub samples: u64,
    /// Times of the first and last sample in the period (ms since the epoch), if any.
    pub first_ms: Option<i64>,
    pub last_ms: Option<i64>,
    /// Silences between consecutive samples longer than the threshold used.
    pub gaps: u64,
    /// Their total length (ms).
    pub gap_ms: i64,
    pub longest_gap_ms: i64,
    /// The threshold a silence had to exceed to count as a gap (ms).
    pub gap_threshold_ms: i64,
}

/// A summary kept in the store.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct KeptReport {
    pub id: i64,
    pub label: String,
    pub from_ms: i64,
    pub to_ms: i64,
    pub format: String,
    pub generated_ms: i64,
    pub bytes: u64,
}

impl Store {
    /// Final and provisional episodes whose change happened in `[from_ms, to_ms)`, by start.
    pub async fn episodes_between(&self, from_ms: i64, to_ms: i64) -> Result<Vec<EpisodeRow>> {
        const DOING: &str = "reading the episodes of a period";
        let rows = sqlx::query(
            "SELECT loop_tag, start_ms, end_ms, final, verdict, settling_time_s, overshoot_pct,
                    min_settling_time_s, updated_ms, detail
             FROM episodes WHERE start_ms >= ?1 AND start_ms < ?2
             ORDER BY start_ms, loop_tag",
        )
        .bind(from_ms)
        .bind(to_ms)
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.episode_row(r, DOING)).collect()
    }

    /// Every model identified from data before `to_ms`, by loop and then oldest first.
    pub async fn models_before(&self, to_ms: i64) -> Result<Vec<ModelRow>> {
        const DOING: &str = "reading model history";
        let sql = format!(
            "SELECT {MODEL_COLUMNS} FROM models WHERE identified_ms < ?1
             ORDER BY loop_tag, identified_ms, id"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(to_ms)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.model_row(r, DOING)).collect()
    }

    /// Every (loop, signal) that has a series, by tag and signal.
    pub async fn series_list(&self) -> Result<Vec<(String, Signal)>> {
        const DOING: &str = "listing the stored signals";
        let rows: Vec<(String, String)> =
            sqlx::query_as("SELECT loop_tag, signal FROM series ORDER BY loop_tag, signal")
                .fetch_all(&self.pool)
                .await
                .map_err(self.fail(DOING))?;
        rows.into_iter()
            .map(|(tag, s)| {
                let signal = Signal::parse(&s)
                    .ok_or_else(|| self.bad_value(DOING, format!("unknown signal {s:?}")))?;
                Ok((tag, signal))
            })
            .collect()
    }

    /// The newest data time in the store: the latest sample or scored change (ms), if any.
    pub async fn newest_data_ms(&self) -> Result<Option<i64>> {
        // MAX over the primary key's second column is one index seek per series.
        sqlx::query_scalar(
            "SELECT MAX(t) FROM (
                 SELECT (SELECT MAX(ts_ms) FROM samples WHERE series_id = s.id) AS t FROM series s
                 UNION ALL SELECT MAX(start_ms) FROM episodes)",
        )
        .fetch_one(&self.pool)
        .await
        .map_err(self.fail("finding the newest data"))
    }

    /// Whether any sample or scored change lies in `[from_ms, to_ms)`.
    pub async fn has_data_between(&self, from_ms: i64, to_ms: i64) -> Result<bool> {
        // One index range probe per series: the samples key starts with the series id.
        sqlx::query_scalar(
            "SELECT EXISTS (SELECT 1 FROM series s WHERE EXISTS (
                        SELECT 1 FROM samples WHERE series_id = s.id AND ts_ms >= ?1 AND ts_ms < ?2))
                 OR EXISTS (SELECT 1 FROM episodes WHERE start_ms >= ?1 AND start_ms < ?2)",
        )
        .bind(from_ms)
        .bind(to_ms)
        .fetch_one(&self.pool)
        .await
        .map_err(self.fail("looking for data in a period"))
    }

    /// How well one signal was covered in `[from_ms, to_ms)`: its samples, and the data gaps the
    /// daemon recorded for it (see `record_gaps`), clipped to the period. `gap_threshold_ms` is
    /// the silence the daemon counts as a gap for this loop, for the wording; without it (a loop
    /// no longer configured) no gaps are reported.
    pub async fn coverage(
        &self,
        loop_tag: &str,
        signal: Signal,
        from_ms: i64,
        to_ms: i64,
        gap_threshold_ms: Option<i64>,
    ) -> Result<SeriesCoverage> {
        let (samples, first_ms, last_ms) = self
            .series_row(
                "SELECT COUNT(*), MIN(ts_ms), MAX(ts_ms) FROM samples
                 WHERE series_id = (SELECT id FROM series WHERE loop_tag = ?1 AND signal = ?2)
                   AND ts_ms >= ?3 AND ts_ms < ?4",
                (loop_tag, signal, from_ms, to_ms),
            )
            .await?;
        let (gaps, gap_ms, longest) = match gap_threshold_ms {
            None => (0, None, None),
            Some(_) => {
                self.series_row(
                    "SELECT COUNT(*), SUM(MIN(to_ms, ?4) - MAX(from_ms, ?3)),
                            MAX(MIN(to_ms, ?4) - MAX(from_ms, ?3))
                     FROM gaps
                     WHERE loop_tag = ?1 AND signal = ?2 AND to_ms > ?3 AND from_ms < ?4",
                    (loop_tag, signal, from_ms, to_ms),
                )
                .await?
            }
        };
        Ok(SeriesCoverage {
            loop_tag: loop_tag.to_string(),
            signal,
            samples: samples.max(0) as u64,
            first_ms,
            last_ms,
            gaps: gaps.max(0) as u64,
            gap_ms: gap_ms.unwrap_or(0),
            longest_gap_ms: longest.unwrap_or(0),
            gap_threshold_ms: gap_threshold_ms.unwrap_or(i64::MAX),
        })
    }

    /// One row of a count and two optional numbers over one series and a half-open period: the
    /// query binds ?1 the loop's tag, ?2 the signal, ?3 and ?4 the period's ends (ms).
    async fn series_row(
        &self,
        sql: &'static str,
        (loop_tag, signal, from_ms, to_ms): (&str, Signal, i64, i64),
    ) -> Result<(i64, Option<i64>, Option<i64>)> {
        sqlx::query_as(sql)
            .bind(loop_tag)
            .bind(signal.as_str())
            .bind(from_ms)
            .bind(to_ms)
            .fetch_one(&self.pool)
            .await
            .map_err(self.fail("measuring data coverage"))
    }

    /// Keeps a generated summary, replacing an earlier one of the same period and format.
    /// Returns the row id.
    pub async fn keep_report(
        &self,
        label: &str,
        from_ms: i64,
        to_ms: i64,
        format: &str,
        generated_ms: i64,
        content: &str,
    ) -> Result<i64> {
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO reports (label, from_ms, to_ms, format, generated_ms, content)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)
             ON CONFLICT (from_ms, to_ms, format) DO UPDATE SET
                 label = excluded.label,
                 generated_ms = excluded.generated_ms,
                 content = excluded.content
             RETURNING id",
        )
        .bind(label)
        .bind(from_ms)
        .bind(to_ms)
        .bind(format)
        .bind(generated_ms)
        .bind(content)
        .fetch_one(&self.pool)
        .await
        .map_err(self.fail("keeping a report"))?;
        Ok(id)
    }

    /// The kept summaries, newest period first (without their content).
    pub async fn kept_reports(&self) -> Result<Vec<KeptReport>> {
        let rows: Vec<(i64, String, i64, i64, String, i64, i64)> = sqlx::query_as(
            "SELECT id, label, from_ms, to_ms, format, generated_ms, LENGTH(CAST(content AS BLOB))
             FROM reports ORDER BY from_ms DESC, format",
        )
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail("listing kept reports"))?;
        Ok(rows
            .into_iter()
            .map(
                |(id, label, from_ms, to_ms, format, generated_ms, bytes)| KeptReport {
                    id,
                    label,
                    from_ms,
                    to_ms,
                    format,
                    generated_ms,
                    bytes: bytes.max(0) as u64,
                },
            )
            .collect())
    }

    /// The content of a kept summary.
    pub async fn kept_report_content(&self, id: i64) -> Result<Option<String>> {
        sqlx::query_scalar("SELECT content FROM reports WHERE id = ?1")
            .bind(id)
            .fetch_optional(&self.pool)
            .await
            .map_err(self.fail("reading a kept report"))
    }
}

#[cfg(test)]
mod tests {
    use super::super::testing::{episode_result, fresh_store, sample};
    use super::*;
    use crate::analysis::{Model, Verdict};

    #[tokio::test]
    async fn episodes_between_takes_changes_inside_the_half_open_period() {
        let (_dir, store) = fresh_store().await;
        let e = episode_result(Verdict::Met, Some(60.0));
        for start in [999, 1_000, 1_999, 2_000] {
            store
                .upsert_episode("TIC-101", &e, start, start + 500, true, 0)
                .await
                .unwrap();
        }
        let starts: Vec<i64> = store
            .episodes_between(1_000, 2_000)
            .await
            .unwrap()
            .iter()
            .map(|r| r.start_ms)
            .collect();
        assert_eq!(starts, [1_000, 1_999]);
    }

    #[tokio::test]
    async fn models_before_leaves_out_later_fits() {
        let (_dir, store) = fresh_store().await;
        let m = Model::first_order(
            crate::analysis::Fopdt {
                gain: 1.0,
                time_constant_s: 60.0,
                dead_time_s: 5.0,
            },
            0.99,
            2,
            100,
        );
        store.insert_model("TIC-101", &m, 500).await.unwrap();
        store.insert_model("TIC-101", &m, 1_500).await.unwrap();
        let before = store.models_before(1_000).await.unwrap();
        assert_eq!(before.len(), 1);
        assert_eq!(before[0].identified_ms, 500);
    }

    #[tokio::test]
    async fn coverage_counts_samples_and_the_recorded_gaps_inside_the_period() {
        let (_dir, store) = fresh_store().await;
        // Every second from 0 to 100 s, except nothing between 40 s and 70 s, which the daemon
        // recorded as a gap; and a gap from before the period that runs into it.
        let rows: Vec<_> = (0..=100)
            .filter(|s| !(41..70).contains(s))
            .map(|s| sample("TIC-101", Signal::Pv, s * 1_000, 1.0))
            .collect();
        store.insert_samples(&rows).await.unwrap();
        let gap = |from_ms, to_ms| crate::store::GapRow {
            loop_tag: "TIC-101".into(),
            signal: Signal::Pv,
            from_ms,
            to_ms,
        };
        store
            .record_gaps(&[gap(-20_000, 0), gap(40_000, 70_000)])
            .await
            .unwrap();
        let c = store
            .coverage("TIC-101", Signal::Pv, 0, 101_000, Some(10_000))
            .await
            .unwrap();
        assert_eq!(c.samples, 72);
        assert_eq!((c.first_ms, c.last_ms), (Some(0), Some(100_000)));
        // The first gap ends where the period starts: nothing of it is inside.
        assert_eq!((c.gaps, c.gap_ms, c.longest_gap_ms), (1, 30_000, 30_000));
        let c = store
            .coverage("TIC-101", Signal::Pv, 50_000, 101_000, Some(10_000))
            .await
            .unwrap();
        assert_eq!((c.gaps, c.gap_ms), (1, 20_000), "clipped to the period");

        // Without the loop's threshold no gaps are claimed.
        let c = store
            .coverage("TIC-101", Signal::Pv, 0, 101_000, None)
            .await
            .unwrap();
        assert_eq!((c.samples, c.gaps), (72, 0));

        let none = store
            .coverage("TIC-101", Signal::Op, 0, 101_000, Some(10_000))
            .await
            .unwrap();
        assert_eq!((none.samples, none.gaps, none.first_ms), (0, 0, None));
    }

    #[tokio::test]
    async fn a_report_kept_twice_for_a_period_and_format_keeps_the_newer_one() {
        let (_dir, store) = fresh_store().await;
        let a = store
            .keep_report("2026-W48", 0, 10, "md", 1, "old")
            .await
            .unwrap();
        let b = store
            .keep_report("2026-W48", 0, 10, "md", 2, "newer")
            .await
            .unwrap();
        store
            .keep_report("2026-W48", 0, 10, "json", 2, "{}")
            .await
            .unwrap();
        assert_eq!(a, b);
        let kept = store.kept_reports().await.unwrap();
        assert_eq!(kept.len(), 2);
        let md = kept.iter().find(|k| k.format == "md").unwrap();
        assert_eq!((md.generated_ms, md.bytes), (2, 5));
        assert_eq!(
            store.kept_report_content(a).await.unwrap().as_deref(),
            Some("newer")
        );
    }

    #[tokio::test]
    async fn the_newest_data_time_covers_samples_and_episodes() {
        let (_dir, store) = fresh_store().await;
        assert_eq!(store.newest_data_ms().await.unwrap(), None);
        store
            .insert_samples(&[sample("TIC-101", Signal::Pv, 7_000, 1.0)])
            .await
            .unwrap();
        assert_eq!(store.newest_data_ms().await.unwrap(), Some(7_000));
        let e = episode_result(Verdict::Met, Some(60.0));
        store
            .upsert_episode("TIC-102", &e, 9_000, 9_500, true, 0)
            .await
            .unwrap();
        assert_eq!(store.newest_data_ms().await.unwrap(), Some(9_000));
    }
}
