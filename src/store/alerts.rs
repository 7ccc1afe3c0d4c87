//! Alerts (open until acknowledged, repeats counted) and counters of rejected input.

use super::{Result, Store};
use serde::Serialize;
use sqlx::Row;
use sqlx::sqlite::SqliteRow;

/// Where an alert stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum AlertState {
    /// Not yet seen by a person; repeats of the same condition add to it.
    Open,
    /// A person has seen it; the next occurrence opens a new alert.
    Acknowledged,
}

impl AlertState {
    pub fn as_str(self) -> &'static str {
        match self {
            AlertState::Open => "open",
            AlertState::Acknowledged => "acknowledged",
        }
    }

    pub fn parse(s: &str) -> Option<AlertState> {
        [AlertState::Open, AlertState::Acknowledged]
            .into_iter()
            .find(|x| x.as_str() == s)
    }
}

/// An occurrence of an alert condition, as the tracker reports it.
#[derive(Debug, Clone, Serialize)]
pub struct AlertInput {
    pub loop_tag: String,
    /// What kind of condition (such as `spec_missed`); one open alert per loop and kind.
    pub kind: String,
    /// One sentence for the person reading the alert; the latest occurrence's wording is kept.
    pub message: String,
    /// The numbers behind the alert; the latest occurrence's evidence is kept.
    pub evidence: serde_json::Value,
    /// Data time of the occurrence (ms since the epoch).
    pub seen_ms: i64,
}

/// A stored alert.
#[derive(Debug, Clone, Serialize)]
pub struct AlertRow {
    pub id: i64,
    pub loop_tag: String,
    pub kind: String,
    pub state: AlertState,
    pub first_seen_ms: i64,
    pub last_seen_ms: i64,
    /// Occurrences folded into this alert.
    pub count: u64,
    pub message: String,
    pub evidence: serde_json::Value,
    /// When it was acknowledged (wall-clock ms since the epoch).
    pub acked_ms: Option<i64>,
    /// Set by [`Store::raise_alert`] when that call opened the alert (so the caller announces
    /// it); `false` for a repeat and for every row a query returns.
    #[serde(skip)]
    pub is_new: bool,
}

/// How much input was rejected for one reason from one source.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RejectionRow {
    /// Such as `malformed_payload`.
    pub reason: String,
    /// The MQTT topic or Modbus device it came from.
    pub source: String,
    pub count: u64,
    pub first_seen_ms: i64,
    pub last_seen_ms: i64,
}

const ALERT_COLUMNS: &str =
    "id, loop_tag, kind, state, first_seen_ms, last_seen_ms, count, message, evidence, acked_ms";

impl Store {
    /// Records an occurrence of an alert condition: opens a new alert, or, when one of the same
    /// loop and kind is open, counts the repeat and keeps the latest message and evidence.
    /// The returned row says which (`is_new`).
    pub async fn raise_alert(&self, alert: AlertInput) -> Result<AlertRow> {
        const DOING: &str = "recording an alert";
        let evidence =
            serde_json::to_string(&alert.evidence).map_err(|e| self.bad_value(DOING, e))?;
        // The conflict target names the partial unique index (its WHERE included), so an
        // acknowledged alert of the same kind never conflicts.
        let sql = format!(
            "INSERT INTO alerts (loop_tag, kind, state, first_seen_ms, last_seen_ms, count,
                                 message, evidence)
             VALUES (?1, ?2, 'open', ?3, ?3, 1, ?4, ?5)
             ON CONFLICT (loop_tag, kind) WHERE state = 'open' DO UPDATE SET
                 count = count + 1,
                 last_seen_ms = MAX(last_seen_ms, excluded.last_seen_ms),
                 message = excluded.message,
                 evidence = excluded.evidence
             RETURNING {ALERT_COLUMNS}"
        );
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(&alert.loop_tag)
            .bind(&alert.kind)
            .bind(alert.seen_ms)
            .bind(&alert.message)
            .bind(evidence)
            .fetch_one(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        let mut row = self.alert_row(&row, DOING)?;
        // An insert starts at 1 and a repeat makes it at least 2.
        row.is_new = row.count == 1;
        Ok(row)
    }

    /// Acknowledges an open alert. Returns `false` when no open alert has this id (unknown,
    /// or already acknowledged).
    pub async fn ack_alert(&self, id: i64, now_ms: i64) -> Result<bool> {
        let done = sqlx::query(
            "UPDATE alerts SET state = 'acknowledged', acked_ms = ?2
             WHERE id = ?1 AND state = 'open'",
        )
        .bind(id)
        .bind(now_ms)
        .execute(&self.pool)
        .await
        .map_err(self.fail("acknowledging an alert"))?;
        Ok(done.rows_affected() == 1)
    }

    /// Alerts, most recently seen first; only the open ones when `open_only`.
    pub async fn alerts(&self, open_only: bool) -> Result<Vec<AlertRow>> {
        const DOING: &str = "reading alerts";
        let sql = format!(
            "SELECT {ALERT_COLUMNS} FROM alerts
             WHERE NOT ?1 OR state = 'open'
             ORDER BY last_seen_ms DESC, id DESC"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(open_only)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.alert_row(r, DOING)).collect()
    }

    /// Adds `n` rejected inputs to the counter of (reason, source).
    pub async fn count_rejection(
        &self,
        reason: &str,
        source: &str,
        n: u64,
        now_ms: i64,
    ) -> Result<()> {
        if n == 0 {
            return Ok(());
        }
        sqlx::query(
            "INSERT INTO rejections (reason, source, count, first_seen_ms, last_seen_ms)
             VALUES (?1, ?2, ?3, ?4, ?4)
             ON CONFLICT (reason, source) DO UPDATE SET
                 count = count + excluded.count,
                 first_seen_ms = MIN(first_seen_ms, excluded.first_seen_ms),
                 last_seen_ms = MAX(last_seen_ms, excluded.last_seen_ms)",
        )
        .bind(reason)
        .bind(source)
        .bind(i64::try_from(n).unwrap_or(i64::MAX))
        .bind(now_ms)
        .execute(&self.pool)
        .await
        .map_err(self.fail("counting rejected input"))?;
        Ok(())
    }

    /// Every rejection counter, by reason and source.
    pub async fn rejections(&self) -> Result<Vec<RejectionRow>> {
        let rows: Vec<(String, String, i64, i64, i64)> = sqlx::query_as(
            "SELECT reason, source, count, first_seen_ms, last_seen_ms FROM rejections
             ORDER BY reason, source",
        )
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail("reading rejection counters"))?;
        Ok(rows
            .into_iter()
            .map(
                |(reason, source, count, first_seen_ms, last_seen_ms)| RejectionRow {
                    reason,
                    source,
                    count: count.max(0) as u64,
                    first_seen_ms,
                    last_seen_ms,
                },
            )
            .collect())
    }

    fn alert_row(&self, r: &SqliteRow, doing: &'static str) -> Result<AlertRow> {
        let get = |e| self.fail(doing)(e);
        let state: String = r.try_get("state").map_err(get)?;
        let evidence: String = r.try_get("evidence").map_err(get)?;
        let count: i64 = r.try_get("count").map_err(get)?;
        Ok(AlertRow {
            id: r.try_get("id").map_err(get)?,
            loop_tag: r.try_get("loop_tag").map_err(get)?,
            kind: r.try_get("kind").map_err(get)?,
            state: AlertState::parse(&state)
                .ok_or_else(|| self.bad_value(doing, format!("unknown alert state {state:?}")))?,
            first_seen_ms: r.try_get("first_seen_ms").map_err(get)?,
            last_seen_ms: r.try_get("last_seen_ms").map_err(get)?,
            count: count.max(0) as u64,
            message: r.try_get("message").map_err(get)?,
            evidence: serde_json::from_str(&evidence)
                .map_err(|e| self.bad_value(doing, format!("alert evidence: {e}")))?,
            acked_ms: r.try_get("acked_ms").map_err(get)?,
            is_new: false,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::super::testing::fresh_store;
    use super::*;
    use serde_json::json;

    fn occurrence(kind: &str, seen_ms: i64, settling_s: f64) -> AlertInput {
        AlertInput {
            loop_tag: "TIC-101".into(),
            kind: kind.into(),
            message: format!("settled in {settling_s} s, spec 120 s"),
            evidence: json!({ "settling_time_s": settling_s }),
            seen_ms,
        }
    }

    #[tokio::test]
    async fn an_alert_opens_counts_repeats_and_closes_on_acknowledgement() {
        let (_dir, store) = fresh_store().await;
        let first = store
            .raise_alert(occurrence("spec_missed", 1_000, 150.0))
            .await
            .unwrap();
        assert!(first.is_new);
        assert_eq!((first.state, first.count), (AlertState::Open, 1));

        let repeat = store
            .raise_alert(occurrence("spec_missed", 5_000, 170.0))
            .await
            .unwrap();
        assert!(!repeat.is_new);
        assert_eq!(repeat.id, first.id);
        assert_eq!(
            (repeat.count, repeat.first_seen_ms, repeat.last_seen_ms),
            (2, 1_000, 5_000)
        );
        assert_eq!(repeat.message, "settled in 170 s, spec 120 s");
        assert_eq!(repeat.evidence, json!({ "settling_time_s": 170.0 }));
        assert_eq!(store.alerts(true).await.unwrap().len(), 1);

        assert!(store.ack_alert(first.id, 9_999).await.unwrap());
        assert!(
            !store.ack_alert(first.id, 10_000).await.unwrap(),
            "an acknowledged alert cannot be acknowledged again"
        );
        assert!(!store.ack_alert(first.id + 100, 10_000).await.unwrap());
        assert!(store.alerts(true).await.unwrap().is_empty());

        // The condition comes back: a new alert, the acknowledged one stays as it was.
        let again = store
            .raise_alert(occurrence("spec_missed", 20_000, 160.0))
            .await
            .unwrap();
        assert!(again.is_new);
        assert_ne!(again.id, first.id);
        let all = store.alerts(false).await.unwrap();
        let summary: Vec<(i64, AlertState, u64, Option<i64>)> = all
            .iter()
            .map(|a| (a.id, a.state, a.count, a.acked_ms))
            .collect();
        assert_eq!(
            summary,
            [
                (again.id, AlertState::Open, 1, None),
                (first.id, AlertState::Acknowledged, 2, Some(9_999)),
            ]
        );
    }

    #[tokio::test]
    async fn alerts_of_different_kinds_or_loops_are_separate() {
        let (_dir, store) = fresh_store().await;
        let a = store
            .raise_alert(occurrence("spec_missed", 1_000, 150.0))
            .await
            .unwrap();
        let b = store
            .raise_alert(occurrence("saturated", 1_000, 150.0))
            .await
            .unwrap();
        let mut other_loop = occurrence("spec_missed", 1_000, 150.0);
        other_loop.loop_tag = "TIC-102".into();
        let c = store.raise_alert(other_loop).await.unwrap();
        assert!(a.is_new && b.is_new && c.is_new);
        assert_eq!(store.alerts(true).await.unwrap().len(), 3);
    }

    #[tokio::test]
    async fn the_schema_itself_refuses_a_second_open_alert_of_a_kind() {
        let (_dir, store) = fresh_store().await;
        let insert = "INSERT INTO alerts (loop_tag, kind, state, first_seen_ms, last_seen_ms,
                                          count, message, evidence)
                      VALUES ('TIC-101', 'spec_missed', ?1, 0, 0, 1, 'm', '{}')";
        sqlx::query(insert)
            .bind("open")
            .execute(&store.pool)
            .await
            .unwrap();
        sqlx::query(insert)
            .bind("acknowledged")
            .execute(&store.pool)
            .await
            .expect("acknowledged alerts of a kind may pile up");
        let second_open = sqlx::query(insert).bind("open").execute(&store.pool).await;
        assert!(second_open.is_err(), "a second open alert was accepted");
    }

    #[tokio::test]
    async fn rejections_add_up_per_reason_and_source() {
        let (_dir, store) = fresh_store().await;
        let topic = "plant/TIC-101/pv";
        let counts = [
            ("malformed_payload", 3, 2_000),
            ("malformed_payload", 2, 1_000),
            ("non_finite", 1, 3_000),
            ("non_finite", 0, 9_000),
        ];
        for (reason, n, at_ms) in counts {
            store
                .count_rejection(reason, topic, n, at_ms)
                .await
                .unwrap();
        }
        assert_eq!(
            store.rejections().await.unwrap(),
            [
                RejectionRow {
                    reason: "malformed_payload".into(),
                    source: topic.into(),
                    count: 5,
                    first_seen_ms: 1_000,
                    last_seen_ms: 2_000,
                },
                RejectionRow {
                    reason: "non_finite".into(),
                    source: topic.into(),
                    count: 1,
                    first_seen_ms: 3_000,
                    last_seen_ms: 3_000,
                },
            ]
        );
    }
}
