//! Data gaps: stretches in which a signal that should have arrived did not (a device that stopped
//! answering, a publisher that went quiet, the daemon itself being down).

use super::{Result, Store};
use crate::sample::Signal;

/// One recorded gap of one signal: no sample between `from_ms` (the last sample before) and
/// `to_ms` (the first sample after).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct GapRow {
    pub loop_tag: String,
    pub signal: Signal,
    pub from_ms: i64,
    pub to_ms: i64,
}

impl Store {
    /// Records gaps; a gap already recorded from the same sample is widened, not doubled.
    pub async fn record_gaps(&self, gaps: &[GapRow]) -> Result<()> {
        if gaps.is_empty() {
            return Ok(());
        }
        let mut tx = self
            .pool
            .begin_with("BEGIN IMMEDIATE")
            .await
            .map_err(self.fail("recording data gaps"))?;
        for g in gaps {
            sqlx::query(
                "INSERT INTO gaps (loop_tag, signal, from_ms, to_ms) VALUES (?1, ?2, ?3, ?4)
                 ON CONFLICT (loop_tag, signal, from_ms) DO UPDATE SET
                     to_ms = MAX(to_ms, excluded.to_ms)",
            )
            .bind(&g.loop_tag)
            .bind(g.signal.as_str())
            .bind(g.from_ms)
            .bind(g.to_ms)
            .execute(&mut *tx)
            .await
            .map_err(self.fail("recording data gaps"))?;
        }
        tx.commit().await.map_err(self.fail("recording data gaps"))
    }

    /// The recorded gaps overlapping `[from_ms, to_ms]`, of one loop or all, oldest first.
    pub async fn gaps(
        &self,
        loop_tag: Option<&str>,
        from_ms: i64,
        to_ms: i64,
    ) -> Result<Vec<GapRow>> {
        const DOING: &str = "reading data gaps";
        let rows: Vec<(String, String, i64, i64)> = sqlx::query_as(
            "SELECT loop_tag, signal, from_ms, to_ms FROM gaps
             WHERE (?1 IS NULL OR loop_tag = ?1) AND to_ms >= ?2 AND from_ms <= ?3
             ORDER BY from_ms, loop_tag, signal",
        )
        .bind(loop_tag)
        .bind(from_ms)
        .bind(to_ms)
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail(DOING))?;
        rows.into_iter()
            .map(|(loop_tag, signal, from_ms, to_ms)| {
                let signal = Signal::parse(&signal)
                    .ok_or_else(|| self.bad_value(DOING, format!("unknown signal {signal:?}")))?;
                Ok(GapRow {
                    loop_tag,
                    signal,
                    from_ms,
                    to_ms,
                })
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::super::testing::fresh_store;
    use super::*;

    fn gap(tag: &str, signal: Signal, from_ms: i64, to_ms: i64) -> GapRow {
        GapRow {
            loop_tag: tag.into(),
            signal,
            from_ms,
            to_ms,
        }
    }

    #[tokio::test]
    async fn gaps_are_kept_widened_and_found_by_overlap() {
        let (_dir, store) = fresh_store().await;
        store
            .record_gaps(&[
                gap("LIC-301", Signal::Pv, 1_000, 9_000),
                gap("LIC-301", Signal::Op, 1_000, 9_000),
                gap("FIC-402", Signal::Pv, 20_000, 30_000),
            ])
            .await
            .unwrap();
        // The same gap seen again, running longer (a resumed daemon), widens the first.
        store
            .record_gaps(&[gap("LIC-301", Signal::Pv, 1_000, 12_000)])
            .await
            .unwrap();
        let all = store.gaps(None, i64::MIN, i64::MAX).await.unwrap();
        assert_eq!(all.len(), 3);
        assert_eq!(all[1], gap("LIC-301", Signal::Pv, 1_000, 12_000));
        let lic = store.gaps(Some("LIC-301"), 10_000, 15_000).await.unwrap();
        assert_eq!(lic, [gap("LIC-301", Signal::Pv, 1_000, 12_000)]);
        assert!(store.gaps(None, 13_000, 19_999).await.unwrap().is_empty());
    }
}
