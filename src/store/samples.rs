//! Samples: batched idempotent inserts, range reads and retention.

use super::{Result, Store};
use crate::analysis::live::{Row, align};
use crate::sample::{Sample, Signal};
use crate::units::ms_to_s;
use serde::Serialize;
use sqlx::{QueryBuilder, Sqlite, SqliteConnection};
use std::collections::HashMap;
use std::sync::Arc;

/// Rows per multi-row INSERT. 500 rows × 3 parameters = 1,500 bound parameters, far below
/// SQLite's limit of 32,766; bigger statements measured no faster. Every full chunk has the
/// same SQL text, so each connection prepares it once and reuses it.
const ROWS_PER_STATEMENT: usize = 500;

/// Samples the pruner examines per transaction, so that clearing a large backlog never holds
/// the write lock long enough to make the writer wait out its busy timeout.
const PRUNE_SLICE_ROWS: i64 = 20_000;

/// What one call to [`Store::insert_samples`] did with its samples.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct InsertOutcome {
    /// New rows written.
    pub inserted: u64,
    /// Samples already stored (same loop, signal and millisecond), including repeats within the
    /// batch: a redelivered message lands here.
    pub duplicates: u64,
    /// Samples whose value was NaN or infinite; they are not stored. The sources reject these
    /// before they reach the store, so a non-zero count points to a bug in a source.
    pub non_finite: u64,
}

/// A batch's rows keyed by series id, before the transaction: the series the cache does not
/// know yet are created in it, and their rows patched.
struct Keyed {
    /// (series id, time, value); 0 as the id of a row that waits for a new series.
    rows: Vec<(i64, i64, f64)>,
    new_series: Vec<(Arc<str>, Signal)>,
    /// (row, index into `new_series`).
    waiting: Vec<(usize, usize)>,
}

impl Store {
    /// Resolves series ids from the cache and notes which rows wait for a new series; counts
    /// and drops non-finite values.
    fn keyed(&self, samples: &[Sample], outcome: &mut InsertOutcome) -> Keyed {
        let mut k = Keyed {
            rows: Vec::with_capacity(samples.len()),
            new_series: Vec::new(),
            waiting: Vec::new(),
        };
        let mut new_index: HashMap<(Arc<str>, Signal), usize> = HashMap::new();
        let cache = self.series_cache();
        for s in samples {
            if !s.value.is_finite() {
                outcome.non_finite += 1;
                continue;
            }
            let key = (s.loop_tag.clone(), s.signal);
            let id = match cache.get(&key) {
                Some(&id) => id,
                None => {
                    let m = *new_index.entry(key.clone()).or_insert_with(|| {
                        k.new_series.push(key);
                        k.new_series.len() - 1
                    });
                    k.waiting.push((k.rows.len(), m));
                    0 // patched once the series exists
                }
            };
            k.rows.push((id, s.ts_ms, s.value));
        }
        k
    }
}

impl Store {
    /// Stores a batch of samples in one transaction. Samples already stored are ignored and
    /// counted as duplicates, so the same batch can safely be written twice.
    ///
    /// When this returns `Ok`, the batch is committed; when it returns an error, none of it is.
    pub async fn insert_samples(&self, samples: &[Sample]) -> Result<InsertOutcome> {
        const DOING: &str = "storing samples";
        let mut outcome = InsertOutcome::default();

        let Keyed {
            mut rows,
            new_series,
            waiting,
        } = self.keyed(samples, &mut outcome);
        if rows.is_empty() {
            return Ok(outcome);
        }

        let mut tx = self
            .pool
            .begin_with("BEGIN IMMEDIATE")
            .await
            .map_err(self.fail(DOING))?;

        let mut new_ids = Vec::with_capacity(new_series.len());
        for (tag, signal) in &new_series {
            let id = series_id(&mut tx, tag, *signal)
                .await
                .map_err(self.fail(DOING))?;
            new_ids.push(id);
        }
        for (row, m) in waiting {
            rows[row].0 = new_ids[m];
        }
        // In key order each series' rows land on neighbouring leaf pages of the samples table,
        // instead of one page per series per statement: the insert runs several times faster
        // for batches that mix many series.
        rows.sort_unstable_by_key(|&(series_id, ts_ms, _)| (series_id, ts_ms));

        let mut insert =
            QueryBuilder::<Sqlite>::new("INSERT OR IGNORE INTO samples (series_id, ts_ms, value) ");
        for chunk in rows.chunks(ROWS_PER_STATEMENT) {
            insert.reset();
            insert.push_values(chunk, |mut row, &(series_id, ts_ms, value)| {
                row.push_bind(series_id).push_bind(ts_ms).push_bind(value);
            });
            // A short last chunk has SQL text of its own size; preparing it once and dropping
            // it keeps one-off statements out of the connection's statement cache.
            let done = insert
                .build()
                .persistent(chunk.len() == ROWS_PER_STATEMENT)
                .execute(&mut *tx)
                .await
                .map_err(self.fail(DOING))?;
            outcome.inserted += done.rows_affected();
        }
        tx.commit().await.map_err(self.fail(DOING))?;

        // Cache new ids only now: after a rollback, SQLite may hand the same id to another
        // series, and a cached id would then file samples under the wrong signal.
        self.series_cache()
            .extend(new_series.into_iter().zip(new_ids));
        outcome.duplicates = rows.len() as u64 - outcome.inserted;
        Ok(outcome)
    }

    /// A loop's stored samples joined into rows on the PV's time stamps (PV from `from_ms` to
    /// `to_ms`; the SP, OP and mode in force at the first PV sample may be older), exactly as the
    /// live tracker joins them ([`align`]); and whether the loop has mode samples.
    pub async fn loop_rows(
        &self,
        loop_tag: &str,
        from_ms: i64,
        to_ms: i64,
    ) -> Result<(Vec<Row>, bool)> {
        let mut series = Vec::new();
        for s in [Signal::Pv, Signal::Sp, Signal::Op, Signal::Mode] {
            // What the join needs of the other signals: the value in force at `from_ms` (their
            // newest sample before it) and everything after, not their whole history.
            let mut rows = match s {
                Signal::Pv => Vec::new(),
                _ => self.latest_before(loop_tag, s, from_ms).await?,
            };
            rows.extend(self.samples(loop_tag, s, from_ms, to_ms).await?);
            series.push(
                rows.into_iter()
                    .map(|(t, v)| (ms_to_s(t), v))
                    .collect::<Vec<_>>(),
            );
        }
        let rows = align(&series[0], &series[1], &series[2], &series[3]);
        Ok((rows, !series[3].is_empty()))
    }

    /// The samples of one signal with `from_ms <= ts_ms <= to_ms`, oldest first, as
    /// (time, value) pairs. An unknown loop or signal gives an empty list.
    pub async fn samples(
        &self,
        loop_tag: &str,
        signal: Signal,
        from_ms: i64,
        to_ms: i64,
    ) -> Result<Vec<(i64, f64)>> {
        sqlx::query_as(
            "SELECT ts_ms, value FROM samples
             WHERE series_id = (SELECT id FROM series WHERE loop_tag = ?1 AND signal = ?2)
               AND ts_ms BETWEEN ?3 AND ?4
             ORDER BY ts_ms",
        )
        .bind(loop_tag)
        .bind(signal.as_str())
        .bind(from_ms)
        .bind(to_ms)
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail("reading samples"))
    }

    /// The newest sample of one signal with `ts_ms < before_ms`, if any.
    async fn latest_before(
        &self,
        loop_tag: &str,
        signal: Signal,
        before_ms: i64,
    ) -> Result<Vec<(i64, f64)>> {
        sqlx::query_as(
            "SELECT ts_ms, value FROM samples
             WHERE series_id = (SELECT id FROM series WHERE loop_tag = ?1 AND signal = ?2)
               AND ts_ms < ?3
             ORDER BY ts_ms DESC LIMIT 1",
        )
        .bind(loop_tag)
        .bind(signal.as_str())
        .bind(before_ms)
        .fetch_all(&self.pool)
        .await
        .map_err(self.fail("reading samples"))
    }

    /// How many samples are stored. Counts every row, so it takes a moment on a large store.
    pub async fn sample_count(&self) -> Result<u64> {
        let n: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM samples")
            .fetch_one(&self.pool)
            .await
            .map_err(self.fail("counting samples"))?;
        Ok(n.max(0) as u64)
    }

    /// Retention: deletes the samples older than `older_than_ms`, except those inside any
    /// episode window of the same loop widened by `keep_margin_ms` before its start
    /// (`[start_ms − keep_margin_ms, end_ms]`), so that every stored episode can still be shown
    /// and re-analysed with the data that led up to it. Returns how many samples were deleted.
    ///
    /// Works in slices of one series and a bounded number of rows per transaction, so the
    /// writer is never kept waiting for long.
    pub async fn prune_samples(&self, older_than_ms: i64, keep_margin_ms: i64) -> Result<u64> {
        self.prune_in_slices(older_than_ms, keep_margin_ms, PRUNE_SLICE_ROWS)
            .await
    }

    async fn prune_in_slices(
        &self,
        cutoff_ms: i64,
        keep_margin_ms: i64,
        slice_rows: i64,
    ) -> Result<u64> {
        const DOING: &str = "deleting old samples";
        let margin = keep_margin_ms.max(0);
        let series: Vec<(i64, String)> =
            sqlx::query_as("SELECT id, loop_tag FROM series ORDER BY id")
                .fetch_all(&self.pool)
                .await
                .map_err(self.fail(DOING))?;
        let mut deleted = 0;
        for (series_id, loop_tag) in series {
            let mut from = i64::MIN;
            loop {
                // The slice ends at the `slice_rows`-th old sample from `from`, or at the
                // cutoff when fewer are left.
                let nth: Option<i64> = sqlx::query_scalar(
                    "SELECT ts_ms FROM samples
                     WHERE series_id = ?1 AND ts_ms >= ?2 AND ts_ms < ?3
                     ORDER BY ts_ms LIMIT 1 OFFSET ?4",
                )
                .bind(series_id)
                .bind(from)
                .bind(cutoff_ms)
                .bind(slice_rows.max(1) - 1)
                .fetch_optional(&self.pool)
                .await
                .map_err(self.fail(DOING))?;
                let to = nth.unwrap_or(i64::MAX);

                let mut tx = self
                    .pool
                    .begin_with("BEGIN IMMEDIATE")
                    .await
                    .map_err(self.fail(DOING))?;
                let done = sqlx::query(
                    "DELETE FROM samples
                     WHERE series_id = ?1 AND ts_ms BETWEEN ?2 AND ?3 AND ts_ms < ?4
                       AND NOT EXISTS (
                           SELECT 1 FROM episodes e
                           WHERE e.loop_tag = ?5
                             AND e.start_ms <= samples.ts_ms + ?6
                             AND e.end_ms >= samples.ts_ms)",
                )
                .bind(series_id)
                .bind(from)
                .bind(to)
                .bind(cutoff_ms)
                .bind(&loop_tag)
                .bind(margin)
                .execute(&mut *tx)
                .await
                .map_err(self.fail(DOING))?;
                tx.commit().await.map_err(self.fail(DOING))?;
                deleted += done.rows_affected();

                match nth {
                    Some(ts) if ts < i64::MAX => from = ts + 1,
                    _ => break,
                }
            }
        }
        Ok(deleted)
    }
}

/// The id of a series, creating it if needed. Runs inside the caller's write transaction, so
/// two writers that meet a new series at once cannot both create it.
async fn series_id(
    conn: &mut SqliteConnection,
    loop_tag: &str,
    signal: Signal,
) -> Result<i64, sqlx::Error> {
    sqlx::query("INSERT OR IGNORE INTO series (loop_tag, signal) VALUES (?1, ?2)")
        .bind(loop_tag)
        .bind(signal.as_str())
        .execute(&mut *conn)
        .await?;
    sqlx::query_scalar("SELECT id FROM series WHERE loop_tag = ?1 AND signal = ?2")
        .bind(loop_tag)
        .bind(signal.as_str())
        .fetch_one(&mut *conn)
        .await
}

#[cfg(test)]
mod tests {
    use super::super::testing::{episode_result, fresh_store, sample};
    use super::*;
    use crate::analysis::Verdict;

    /// `n` samples of one signal, one per second from `t0_ms`.
    fn ramp(tag: &str, signal: Signal, t0_ms: i64, n: usize) -> Vec<Sample> {
        (0..n)
            .map(|i| sample(tag, signal, t0_ms + 1_000 * i as i64, i as f64 * 0.5))
            .collect()
    }

    #[tokio::test]
    async fn inserting_the_same_samples_twice_stores_them_once() {
        let (_dir, store) = fresh_store().await;
        let batch = ramp("TIC-101", Signal::Pv, 0, 10);
        let first = store.insert_samples(&batch).await.unwrap();
        let second = store.insert_samples(&batch).await.unwrap();
        assert_eq!(
            (first.inserted, first.duplicates),
            (10, 0),
            "first write of the batch"
        );
        assert_eq!(
            (second.inserted, second.duplicates),
            (0, 10),
            "the redelivered batch"
        );
        assert_eq!(store.sample_count().await.unwrap(), 10);
    }

    #[tokio::test]
    async fn a_repeat_inside_one_batch_counts_as_a_duplicate_and_the_first_value_stays() {
        let (_dir, store) = fresh_store().await;
        let batch = [
            sample("TIC-101", Signal::Op, 5_000, 30.0),
            sample("TIC-101", Signal::Op, 5_000, 31.0),
        ];
        let outcome = store.insert_samples(&batch).await.unwrap();
        assert_eq!((outcome.inserted, outcome.duplicates), (1, 1));
        assert_eq!(
            store
                .samples("TIC-101", Signal::Op, 0, 10_000)
                .await
                .unwrap(),
            [(5_000, 30.0)]
        );
    }

    #[tokio::test]
    async fn a_batch_larger_than_one_statement_is_stored_whole_and_in_order() {
        let (_dir, store) = fresh_store().await;
        let n = 3 * ROWS_PER_STATEMENT + 17;
        let mut batch = ramp("TIC-101", Signal::Pv, 0, n);
        batch.extend(ramp("FIC-205", Signal::Sp, 0, n));
        let outcome = store.insert_samples(&batch).await.unwrap();
        assert_eq!(outcome.inserted, 2 * n as u64);
        let back = store
            .samples("FIC-205", Signal::Sp, 0, i64::MAX)
            .await
            .unwrap();
        let expected: Vec<(i64, f64)> = ramp("FIC-205", Signal::Sp, 0, n)
            .iter()
            .map(|s| (s.ts_ms, s.value))
            .collect();
        assert_eq!(back, expected);
    }

    #[tokio::test]
    async fn samples_reads_an_inclusive_range_of_one_signal_only() {
        let (_dir, store) = fresh_store().await;
        let mut batch = ramp("TIC-101", Signal::Pv, 0, 10);
        batch.extend(ramp("TIC-101", Signal::Op, 0, 10));
        batch.extend(ramp("TIC-102", Signal::Pv, 0, 10));
        store.insert_samples(&batch).await.unwrap();
        let got = store
            .samples("TIC-101", Signal::Pv, 2_000, 4_000)
            .await
            .unwrap();
        assert_eq!(got, [(2_000, 1.0), (3_000, 1.5), (4_000, 2.0)]);
        assert!(
            store
                .samples("TIC-999", Signal::Pv, 0, i64::MAX)
                .await
                .unwrap()
                .is_empty()
        );
    }

    #[tokio::test]
    async fn loop_rows_take_the_values_in_force_from_before_the_range() {
        let (_dir, store) = fresh_store().await;
        // SP and OP were last written at 1 s and 2 s; the PV every second.
        let mut batch = ramp("TIC-101", Signal::Pv, 0, 10);
        batch.extend([
            sample("TIC-101", Signal::Sp, 0, 40.0),
            sample("TIC-101", Signal::Sp, 1_000, 50.0),
            sample("TIC-101", Signal::Op, 2_000, 30.0),
            sample("TIC-101", Signal::Op, 7_000, 35.0),
        ]);
        store.insert_samples(&batch).await.unwrap();
        let (rows, has_mode) = store.loop_rows("TIC-101", 5_000, 8_000).await.unwrap();
        assert!(!has_mode);
        let got: Vec<(f64, f64, f64)> = rows.iter().map(|r| (r.time_s, r.sp, r.op)).collect();
        assert_eq!(
            got,
            [
                (5.0, 50.0, 30.0),
                (6.0, 50.0, 30.0),
                (7.0, 50.0, 35.0),
                (8.0, 50.0, 35.0)
            ]
        );
    }

    #[tokio::test]
    async fn non_finite_values_are_counted_and_not_stored() {
        let (_dir, store) = fresh_store().await;
        let batch = [
            sample("TIC-101", Signal::Pv, 0, f64::NAN),
            sample("TIC-101", Signal::Pv, 1_000, f64::INFINITY),
            sample("TIC-101", Signal::Pv, 2_000, 7.0),
        ];
        let outcome = store.insert_samples(&batch).await.unwrap();
        assert_eq!(
            outcome,
            InsertOutcome {
                inserted: 1,
                duplicates: 0,
                non_finite: 2
            }
        );
        assert_eq!(store.sample_count().await.unwrap(), 1);
    }

    #[tokio::test]
    async fn a_second_handle_on_the_same_file_finds_the_existing_series() {
        let (dir, store) = fresh_store().await;
        store
            .insert_samples(&ramp("TIC-101", Signal::Pv, 0, 3))
            .await
            .unwrap();
        store
            .insert_samples(&ramp("TIC-101", Signal::Op, 0, 3))
            .await
            .unwrap();
        // A new handle starts with an empty series cache, as after a restart.
        let other = Store::open(&dir.path().join("headroom.db")).await.unwrap();
        other
            .insert_samples(&ramp("TIC-101", Signal::Pv, 3_000, 3))
            .await
            .unwrap();
        assert_eq!(
            other
                .samples("TIC-101", Signal::Pv, 0, i64::MAX)
                .await
                .unwrap()
                .len(),
            6
        );
        assert_eq!(
            other
                .samples("TIC-101", Signal::Op, 0, i64::MAX)
                .await
                .unwrap()
                .len(),
            3
        );
        let series: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM series")
            .fetch_one(&other.pool)
            .await
            .unwrap();
        assert_eq!(series, 2);
    }

    #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
    async fn two_tasks_inserting_at_once_both_succeed() {
        let (_dir, store) = fresh_store().await;
        // Both tasks create series as they go (so each transaction starts by reading and
        // writing `series`) and share one series, the case a deferred transaction gets wrong.
        let task = |tag: &'static str| {
            let store = store.clone();
            tokio::spawn(async move {
                let mut total = 0;
                for round in 0..40i64 {
                    let mut batch = Vec::new();
                    for k in 0..25 {
                        let own = format!("{tag}-{}", (round * 25 + k) % 60);
                        batch.push(sample(&own, Signal::Pv, round * 1_000, k as f64));
                    }
                    let shared_ts = round * 1_000 + if tag == "A" { 0 } else { 500 };
                    batch.push(sample("SHARED", Signal::Pv, shared_ts, 1.0));
                    total += store.insert_samples(&batch).await?.inserted;
                }
                Ok::<u64, crate::store::Error>(total)
            })
        };
        let (a, b) = (task("A"), task("B"));
        let (a, b) = (a.await.unwrap(), b.await.unwrap());
        assert_eq!(a.unwrap() + b.unwrap(), 2 * 40 * 26);
        assert_eq!(store.sample_count().await.unwrap(), 2 * 40 * 26);
    }

    async fn prune_keeps_episode_windows(slice_rows: i64) {
        let (_dir, store) = fresh_store().await;
        // Two loops, one sample per second for 1,000 s.
        let mut batch = ramp("TIC-101", Signal::Pv, 0, 1_000);
        batch.extend(ramp("TIC-102", Signal::Pv, 0, 1_000));
        store.insert_samples(&batch).await.unwrap();
        // TIC-101 has an episode from 300 s to 400 s; kept with 50 s before it.
        store
            .upsert_episode(
                "TIC-101",
                &episode_result(Verdict::Met, Some(60.0)),
                300_000,
                400_000,
                true,
                1,
            )
            .await
            .unwrap();
        let deleted = store
            .prune_in_slices(600_000, 50_000, slice_rows)
            .await
            .unwrap();

        let kept_101: Vec<i64> = store
            .samples("TIC-101", Signal::Pv, 0, i64::MAX)
            .await
            .unwrap()
            .into_iter()
            .map(|(t, _)| t)
            .collect();
        let expected_101: Vec<i64> = (250..=400).chain(600..1_000).map(|s| s * 1_000).collect();
        assert_eq!(kept_101, expected_101);
        // The episode of TIC-101 protects nothing of TIC-102.
        let kept_102 = store
            .samples("TIC-102", Signal::Pv, 0, i64::MAX)
            .await
            .unwrap();
        assert_eq!(kept_102.first().map(|p| p.0), Some(600_000));
        assert_eq!(kept_102.len(), 400);
        assert_eq!(deleted, (600 - 151) + 600);
        assert_eq!(store.sample_count().await.unwrap(), 2_000 - deleted);
    }

    #[tokio::test]
    async fn pruning_keeps_episode_windows_and_their_lead_in() {
        prune_keeps_episode_windows(PRUNE_SLICE_ROWS).await;
    }

    #[tokio::test]
    async fn pruning_in_many_small_slices_deletes_the_same_rows() {
        // 7 does not divide the 600 old samples, so slices end at odd places, some inside the
        // protected window.
        prune_keeps_episode_windows(7).await;
    }

    #[tokio::test]
    async fn pruning_an_empty_store_deletes_nothing() {
        let (_dir, store) = fresh_store().await;
        assert_eq!(store.prune_samples(i64::MAX, 0).await.unwrap(), 0);
    }
}
