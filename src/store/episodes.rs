//! Episodes (scored setpoint changes), model history, and the per-loop overview.

use super::{Result, Store};
use crate::analysis::identify::Family;
use crate::analysis::{EpisodeResult, Model, Verdict};
use crate::sample::Signal;
use serde::Serialize;
use sqlx::sqlite::SqliteRow;
use sqlx::{Row, SqliteConnection};
use std::collections::BTreeMap;

/// A stored episode.
#[derive(Debug, Clone, Serialize)]
pub struct EpisodeRow {
    pub loop_tag: String,
    /// Time of the setpoint change (ms since the epoch, data time).
    pub start_ms: i64,
    /// Time of the last sample of the window so far.
    pub end_ms: i64,
    /// `false` while the response is still being watched; the result can still change.
    #[serde(rename = "final")]
    pub is_final: bool,
    pub verdict: Verdict,
    pub settling_time_s: Option<f64>,
    pub overshoot_pct: f64,
    pub min_settling_time_s: Option<f64>,
    /// When headroom last wrote this row (ms since the epoch).
    pub updated_ms: i64,
    /// The complete episode result, as `analyze --json` prints it.
    pub detail: serde_json::Value,
}

/// One identification of a loop's process model.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelRow {
    pub id: i64,
    pub loop_tag: String,
    /// Data time of the newest sample the fit used (ms since the epoch).
    pub identified_ms: i64,
    pub gain: f64,
    pub time_constant_s: f64,
    pub dead_time_s: f64,
    pub fit_r2: f64,
    pub episodes_used: u64,
    pub points_used: u64,
    /// The family and its own parameters (first order for models stored before families).
    pub family: Family,
}

impl ModelRow {
    /// The model as the analysis core uses it (to resume a loop after a restart).
    pub fn model(&self) -> Model {
        let first_order = Model::first_order(
            crate::analysis::Fopdt {
                gain: self.gain,
                time_constant_s: self.time_constant_s,
                dead_time_s: self.dead_time_s,
            },
            self.fit_r2,
            self.episodes_used as usize,
            self.points_used as usize,
        );
        Model {
            family: self.family,
            ..first_order
        }
    }
}

/// What the store knows about one loop.
#[derive(Debug, Clone, Serialize)]
pub struct LoopRow {
    pub loop_tag: String,
    /// Time of the newest stored sample of each signal that has any.
    pub last_sample_ms: BTreeMap<Signal, i64>,
    /// The episode with the latest start.
    pub last_episode: Option<EpisodeRow>,
    pub latest_model: Option<ModelRow>,
    pub open_alerts: u64,
}

const EPISODE_COLUMNS: &str = "loop_tag, start_ms, end_ms, final, verdict, settling_time_s, \
     overshoot_pct, min_settling_time_s, updated_ms, detail";

pub(super) const MODEL_COLUMNS: &str = "id, loop_tag, identified_ms, gain, time_constant_s, \
     dead_time_s, fit_r2, episodes_used, points_used, family";

impl Store {
    /// Writes an episode, replacing the stored row for the same loop and start time, so a
    /// provisional result can be written again and again as the response unfolds, then once
    /// more as final. A provisional result never replaces a final one (a restarted tracker may
    /// re-derive an episode that was already closed). Returns whether the row was written.
    pub async fn upsert_episode(
        &self,
        loop_tag: &str,
        result: &EpisodeResult,
        start_ms: i64,
        end_ms: i64,
        is_final: bool,
        now_ms: i64,
    ) -> Result<bool> {
        const DOING: &str = "storing an episode";
        let detail = serde_json::to_string(result).map_err(|e| self.bad_value(DOING, e))?;
        let done = sqlx::query(
            "INSERT INTO episodes (loop_tag, start_ms, end_ms, final, verdict, settling_time_s,
                                   overshoot_pct, min_settling_time_s, detail, updated_ms)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10)
             ON CONFLICT (loop_tag, start_ms) DO UPDATE SET
                 end_ms = excluded.end_ms,
                 final = excluded.final,
                 verdict = excluded.verdict,
                 settling_time_s = excluded.settling_time_s,
                 overshoot_pct = excluded.overshoot_pct,
                 min_settling_time_s = excluded.min_settling_time_s,
                 detail = excluded.detail,
                 updated_ms = excluded.updated_ms
             WHERE excluded.final >= episodes.final",
        )
        .bind(loop_tag)
        .bind(start_ms)
        .bind(end_ms)
        .bind(is_final)
        .bind(result.verdict.as_str())
        .bind(result.settling_time_s)
        .bind(result.overshoot_pct)
        .bind(result.min_settling_time_s)
        .bind(detail)
        .bind(now_ms)
        .execute(&self.pool)
        .await
        .map_err(self.fail(DOING))?;
        Ok(done.rows_affected() == 1)
    }

    /// Episodes, oldest first, optionally of one loop and/or starting at or after `since_ms`.
    pub async fn episodes(
        &self,
        loop_tag: Option<&str>,
        since_ms: Option<i64>,
    ) -> Result<Vec<EpisodeRow>> {
        const DOING: &str = "reading episodes";
        let sql = format!(
            "SELECT {EPISODE_COLUMNS} FROM episodes
             WHERE (?1 IS NULL OR loop_tag = ?1) AND (?2 IS NULL OR start_ms >= ?2)
             ORDER BY start_ms, loop_tag"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(loop_tag)
            .bind(since_ms)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.episode_row(r, DOING)).collect()
    }

    /// Records a newly identified model; earlier ones stay as history. Returns the row id.
    pub async fn insert_model(
        &self,
        loop_tag: &str,
        model: &Model,
        identified_ms: i64,
    ) -> Result<i64> {
        let done = sqlx::query(
            "INSERT INTO models (loop_tag, identified_ms, gain, time_constant_s, dead_time_s,
                                 fit_r2, episodes_used, points_used, family)
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
        )
        .bind(loop_tag)
        .bind(identified_ms)
        .bind(model.gain)
        .bind(model.time_constant_s)
        .bind(model.dead_time_s)
        .bind(model.fit_r2)
        .bind(i64::try_from(model.episodes_used).unwrap_or(i64::MAX))
        .bind(i64::try_from(model.points_used).unwrap_or(i64::MAX))
        .bind(
            serde_json::to_string(&model.family)
                .map_err(|e| self.bad_value("storing a model", e))?,
        )
        .execute(&self.pool)
        .await
        .map_err(self.fail("storing a model"))?;
        Ok(done.last_insert_rowid())
    }

    /// The latest model of every loop that has one, by loop tag. "Latest" is by data time, so
    /// a replay of old data does not displace a model fitted on newer data.
    pub async fn latest_models(&self) -> Result<Vec<ModelRow>> {
        let mut conn = self
            .pool
            .acquire()
            .await
            .map_err(self.fail(LATEST_MODELS))?;
        self.latest_models_on(&mut conn).await
    }

    /// Every model identified for one loop, oldest first.
    pub async fn model_history(&self, loop_tag: &str) -> Result<Vec<ModelRow>> {
        const DOING: &str = "reading a loop's model history";
        let sql = format!(
            "SELECT {MODEL_COLUMNS} FROM models WHERE loop_tag = ?1 ORDER BY identified_ms, id"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(loop_tag)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.model_row(r, DOING)).collect()
    }

    /// How many final episodes are stored, and how many times alerts were raised in all: the
    /// counts a progress line shows, without reading the rows.
    pub async fn progress_counts(&self) -> Result<(u64, u64)> {
        sqlx::query_as(
            "SELECT (SELECT COUNT(*) FROM episodes WHERE final = 1),
                    (SELECT COALESCE(SUM(count), 0) FROM alerts)",
        )
        .fetch_one(&self.pool)
        .await
        .map(|(e, a): (i64, i64)| (e as u64, a as u64))
        .map_err(self.fail("counting episodes and alerts"))
    }

    /// One row per loop tag found anywhere in the store (samples, episodes, models, alerts),
    /// by tag. All parts come from one read transaction, so they agree with each other.
    pub async fn loops_overview(&self) -> Result<Vec<LoopRow>> {
        const DOING: &str = "reading the loop overview";
        let mut tx = self.pool.begin().await.map_err(self.fail(DOING))?;

        let tags: Vec<String> = sqlx::query_scalar(
            "SELECT loop_tag FROM series UNION SELECT loop_tag FROM episodes
             UNION SELECT loop_tag FROM models UNION SELECT loop_tag FROM alerts
             ORDER BY 1",
        )
        .fetch_all(&mut *tx)
        .await
        .map_err(self.fail(DOING))?;
        let mut loops: BTreeMap<String, LoopRow> = tags
            .into_iter()
            .map(|tag| {
                let row = LoopRow {
                    loop_tag: tag.clone(),
                    last_sample_ms: BTreeMap::new(),
                    last_episode: None,
                    latest_model: None,
                    open_alerts: 0,
                };
                (tag, row)
            })
            .collect();

        // MAX over the primary key's second column is one index seek per series.
        let last_samples: Vec<(String, String, Option<i64>)> = sqlx::query_as(
            "SELECT loop_tag, signal, (SELECT MAX(ts_ms) FROM samples WHERE series_id = s.id)
             FROM series s",
        )
        .fetch_all(&mut *tx)
        .await
        .map_err(self.fail(DOING))?;
        for (tag, signal, last) in last_samples {
            let signal = Signal::parse(&signal)
                .ok_or_else(|| self.bad_value(DOING, format!("unknown signal {signal:?}")))?;
            if let (Some(row), Some(last)) = (loops.get_mut(&tag), last) {
                row.last_sample_ms.insert(signal, last);
            }
        }

        let sql = format!(
            "SELECT {EPISODE_COLUMNS} FROM episodes e
             WHERE start_ms = (SELECT MAX(start_ms) FROM episodes WHERE loop_tag = e.loop_tag)"
        );
        let last_episodes = sqlx::query(sqlx::AssertSqlSafe(sql))
            .fetch_all(&mut *tx)
            .await
            .map_err(self.fail(DOING))?;
        for r in &last_episodes {
            let episode = self.episode_row(r, DOING)?;
            if let Some(row) = loops.get_mut(&episode.loop_tag) {
                row.last_episode = Some(episode);
            }
        }

        for model in self.latest_models_on(&mut tx).await? {
            if let Some(row) = loops.get_mut(&model.loop_tag) {
                row.latest_model = Some(model);
            }
        }

        let open: Vec<(String, i64)> = sqlx::query_as(
            "SELECT loop_tag, COUNT(*) FROM alerts WHERE state <> 'acknowledged' GROUP BY loop_tag",
        )
        .fetch_all(&mut *tx)
        .await
        .map_err(self.fail(DOING))?;
        for (tag, n) in open {
            if let Some(row) = loops.get_mut(&tag) {
                row.open_alerts = n.max(0) as u64;
            }
        }

        // Nothing was written; ending the read transaction is all that is left.
        tx.rollback().await.map_err(self.fail(DOING))?;
        Ok(loops.into_values().collect())
    }

    async fn latest_models_on(&self, conn: &mut SqliteConnection) -> Result<Vec<ModelRow>> {
        let sql = format!(
            "SELECT {MODEL_COLUMNS} FROM models m
             WHERE id = (SELECT id FROM models WHERE loop_tag = m.loop_tag
                         ORDER BY identified_ms DESC, id DESC LIMIT 1)
             ORDER BY loop_tag"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .fetch_all(&mut *conn)
            .await
            .map_err(self.fail(LATEST_MODELS))?;
        rows.iter()
            .map(|r| self.model_row(r, LATEST_MODELS))
            .collect()
    }

    pub(super) fn episode_row(&self, r: &SqliteRow, doing: &'static str) -> Result<EpisodeRow> {
        let get = |e| self.fail(doing)(e);
        let verdict: String = r.try_get("verdict").map_err(get)?;
        let detail: String = r.try_get("detail").map_err(get)?;
        Ok(EpisodeRow {
            loop_tag: r.try_get("loop_tag").map_err(get)?,
            start_ms: r.try_get("start_ms").map_err(get)?,
            end_ms: r.try_get("end_ms").map_err(get)?,
            is_final: r.try_get("final").map_err(get)?,
            verdict: Verdict::ALL
                .into_iter()
                .find(|v| v.as_str() == verdict)
                .ok_or_else(|| self.bad_value(doing, format!("unknown verdict {verdict:?}")))?,
            settling_time_s: r.try_get("settling_time_s").map_err(get)?,
            overshoot_pct: r.try_get("overshoot_pct").map_err(get)?,
            min_settling_time_s: r.try_get("min_settling_time_s").map_err(get)?,
            updated_ms: r.try_get("updated_ms").map_err(get)?,
            detail: serde_json::from_str(&detail)
                .map_err(|e| self.bad_value(doing, format!("episode detail: {e}")))?,
        })
    }

    pub(super) fn model_row(&self, r: &SqliteRow, doing: &'static str) -> Result<ModelRow> {
        let get = |e| self.fail(doing)(e);
        let count = |column: &str| -> Result<u64> {
            let n: i64 = r.try_get(column).map_err(get)?;
            Ok(n.max(0) as u64)
        };
        Ok(ModelRow {
            id: r.try_get("id").map_err(get)?,
            loop_tag: r.try_get("loop_tag").map_err(get)?,
            identified_ms: r.try_get("identified_ms").map_err(get)?,
            gain: r.try_get("gain").map_err(get)?,
            time_constant_s: r.try_get("time_constant_s").map_err(get)?,
            dead_time_s: r.try_get("dead_time_s").map_err(get)?,
            fit_r2: r.try_get("fit_r2").map_err(get)?,
            episodes_used: count("episodes_used")?,
            points_used: count("points_used")?,
            family: match r.try_get::<Option<String>, _>("family").map_err(get)? {
                Some(json) => serde_json::from_str(&json)
                    .map_err(|e| self.bad_value(doing, format!("model family: {e}")))?,
                None => Family::FirstOrder,
            },
        })
    }
}

const LATEST_MODELS: &str = "reading the latest models";

#[cfg(test)]
mod tests {
    use super::super::AlertInput;
    use super::super::testing::{episode_result, fresh_store, sample};
    use super::*;

    fn model(gain: f64, fit_r2: f64) -> Model {
        Model::first_order(
            crate::analysis::Fopdt {
                gain,
                time_constant_s: 60.0,
                dead_time_s: 8.0,
            },
            fit_r2,
            3,
            900,
        )
    }

    #[tokio::test]
    async fn progress_counts_final_episodes_only() {
        let (_dir, store) = fresh_store().await;
        assert_eq!(store.progress_counts().await.unwrap(), (0, 0));
        let done = episode_result(Verdict::Met, Some(100.0));
        let open = episode_result(Verdict::Inconclusive, None);
        for (start, result, is_final) in [(0, &done, true), (500_000, &done, true)] {
            store
                .upsert_episode("TIC-101", result, start, start + 400_000, is_final, 1)
                .await
                .unwrap();
        }
        store
            .upsert_episode("TIC-101", &open, 900_000, 950_000, false, 1)
            .await
            .unwrap();
        assert_eq!(store.progress_counts().await.unwrap(), (2, 0));
    }

    #[tokio::test]
    async fn a_provisional_episode_becomes_final_in_the_same_row() {
        let (_dir, store) = fresh_store().await;
        let provisional = episode_result(Verdict::Inconclusive, None);
        assert!(
            store
                .upsert_episode("TIC-101", &provisional, 100_000, 250_000, false, 1)
                .await
                .unwrap()
        );
        let done = episode_result(Verdict::ActuatorLimited, Some(180.0));
        assert!(
            store
                .upsert_episode("TIC-101", &done, 100_000, 400_000, true, 2)
                .await
                .unwrap()
        );
        let rows = store.episodes(None, None).await.unwrap();
        assert_eq!(rows.len(), 1);
        let row = &rows[0];
        assert_eq!(
            (row.end_ms, row.is_final, row.verdict, row.updated_ms),
            (400_000, true, Verdict::ActuatorLimited, 2)
        );
        assert_eq!(row.settling_time_s, Some(180.0));
        assert_eq!(row.min_settling_time_s, Some(95.0));
        assert_eq!(row.detail["verdict"], "actuator_limited");
        assert_eq!(row.detail["required_op_limit"], 130.0);
        assert_eq!(row.detail, serde_json::to_value(&done).unwrap());
    }

    #[tokio::test]
    async fn a_provisional_result_never_replaces_a_final_one() {
        let (_dir, store) = fresh_store().await;
        let done = episode_result(Verdict::Met, Some(60.0));
        store
            .upsert_episode("TIC-101", &done, 100_000, 400_000, true, 1)
            .await
            .unwrap();
        let late = episode_result(Verdict::Inconclusive, None);
        let written = store
            .upsert_episode("TIC-101", &late, 100_000, 150_000, false, 2)
            .await
            .unwrap();
        assert!(!written);
        let rows = store.episodes(Some("TIC-101"), None).await.unwrap();
        assert_eq!((rows[0].verdict, rows[0].is_final), (Verdict::Met, true));
    }

    #[tokio::test]
    async fn episodes_filter_by_loop_and_start_time() {
        let (_dir, store) = fresh_store().await;
        let r = episode_result(Verdict::Met, Some(60.0));
        for (tag, start) in [("TIC-101", 1_000), ("TIC-101", 5_000), ("FIC-205", 3_000)] {
            store
                .upsert_episode(tag, &r, start, start + 900, true, 0)
                .await
                .unwrap();
        }
        let starts = |rows: Vec<EpisodeRow>| -> Vec<(String, i64)> {
            rows.into_iter().map(|e| (e.loop_tag, e.start_ms)).collect()
        };
        assert_eq!(
            starts(store.episodes(None, None).await.unwrap()),
            [
                ("TIC-101".into(), 1_000),
                ("FIC-205".into(), 3_000),
                ("TIC-101".into(), 5_000)
            ]
        );
        assert_eq!(
            starts(store.episodes(Some("TIC-101"), Some(2_000)).await.unwrap()),
            [("TIC-101".into(), 5_000)]
        );
        assert_eq!(
            starts(store.episodes(None, Some(3_000)).await.unwrap()),
            [("FIC-205".into(), 3_000), ("TIC-101".into(), 5_000)]
        );
    }

    #[tokio::test]
    async fn a_models_family_and_its_parameters_come_back_as_stored() {
        let (_dir, store) = fresh_store().await;
        let m = Model {
            family: Family::SecondOrder {
                first_time_constant_s: 50.0,
                second_time_constant_s: 20.0,
                process_dead_time_s: 3.0,
            },
            ..model(1.5, 0.97)
        };
        store.insert_model("TIC-120", &m, 10_000).await.unwrap();
        let back = store.model_history("TIC-120").await.unwrap();
        assert_eq!(back[0].family, m.family);
        assert_eq!(back[0].model(), m);
        // The report's model history reads the same columns.
        assert_eq!(
            store.models_before(20_000).await.unwrap()[0].family,
            m.family
        );
    }

    #[tokio::test]
    async fn models_keep_their_history_and_the_latest_wins_by_data_time() {
        let (_dir, store) = fresh_store().await;
        store
            .insert_model("TIC-101", &model(1.0, 0.90), 10_000)
            .await
            .unwrap();
        store
            .insert_model("TIC-101", &model(1.2, 0.95), 20_000)
            .await
            .unwrap();
        // A replay of older data fitted last: history keeps it, it is not the latest.
        store
            .insert_model("TIC-101", &model(0.8, 0.70), 5_000)
            .await
            .unwrap();
        store
            .insert_model("FIC-205", &model(-2.0, 0.99), 1_000)
            .await
            .unwrap();

        let latest = store.latest_models().await.unwrap();
        let summary: Vec<(&str, f64)> = latest
            .iter()
            .map(|m| (m.loop_tag.as_str(), m.gain))
            .collect();
        assert_eq!(summary, [("FIC-205", -2.0), ("TIC-101", 1.2)]);
        assert_eq!(latest[1].model(), model(1.2, 0.95));

        let history: Vec<i64> = store
            .model_history("TIC-101")
            .await
            .unwrap()
            .iter()
            .map(|m| m.identified_ms)
            .collect();
        assert_eq!(history, [5_000, 10_000, 20_000]);
    }

    #[tokio::test]
    async fn the_overview_gathers_each_loop_from_every_table() {
        let (_dir, store) = fresh_store().await;
        store
            .insert_samples(&[
                sample("TIC-101", Signal::Sp, 1_000, 50.0),
                sample("TIC-101", Signal::Sp, 9_000, 60.0),
                sample("TIC-101", Signal::Pv, 8_000, 55.0),
            ])
            .await
            .unwrap();
        let r = episode_result(Verdict::TuningLimited, Some(200.0));
        store
            .upsert_episode("TIC-101", &r, 2_000, 3_000, true, 0)
            .await
            .unwrap();
        store
            .upsert_episode("TIC-101", &r, 9_000, 9_500, false, 0)
            .await
            .unwrap();
        store
            .insert_model("TIC-101", &model(1.5, 0.9), 9_000)
            .await
            .unwrap();
        // A loop known only from an alert still appears.
        for kind in ["spec_missed", "saturated"] {
            store
                .raise_alert(AlertInput {
                    loop_tag: "LIC-300".into(),
                    kind: kind.into(),
                    message: "level loop misses its spec".into(),
                    evidence: serde_json::json!({}),
                    seen_ms: 5_000,
                    since_ms: None,
                    change_start_ms: None,
                })
                .await
                .unwrap();
        }

        let overview = store.loops_overview().await.unwrap();
        let tags: Vec<&str> = overview.iter().map(|l| l.loop_tag.as_str()).collect();
        assert_eq!(tags, ["LIC-300", "TIC-101"]);

        let lic = &overview[0];
        assert_eq!(lic.open_alerts, 2);
        assert!(lic.last_sample_ms.is_empty() && lic.last_episode.is_none());

        let tic = &overview[1];
        assert_eq!(
            tic.last_sample_ms,
            BTreeMap::from([(Signal::Sp, 9_000), (Signal::Pv, 8_000)])
        );
        let last = tic.last_episode.as_ref().unwrap();
        assert_eq!((last.start_ms, last.is_final), (9_000, false));
        assert_eq!(tic.latest_model.as_ref().map(|m| m.gain), Some(1.5));
        assert_eq!(tic.open_alerts, 0);

        // The overview is what `--json` prints; signals become keys.
        let json = serde_json::to_value(tic).unwrap();
        assert_eq!(json["last_sample_ms"]["sp"], 9_000);
        assert_eq!(json["last_episode"]["final"], false);
    }
}
