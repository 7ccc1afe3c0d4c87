//! Counters of rejected input: how much was turned away, why, and from where.

use super::{Result, Store};
use serde::Serialize;

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

impl Store {
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
}

#[cfg(test)]
mod tests {
    use super::super::testing::fresh_store;
    use super::*;

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
