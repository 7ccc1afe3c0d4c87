//! The store: one SQLite file holding samples, episodes, models, alerts and rejection counters.
//!
//! This is the only module that writes SQL. Everything goes through [`Store`], a cheap-to-clone
//! handle over a small sqlx pool. The schema lives in `migrations/` and is embedded at compile
//! time; [`Store::open`] applies whatever is missing, so a daemon start is also an upgrade.
//!
//! Choices worth knowing before changing anything here:
//! - Runtime `sqlx::query` functions, not the `query!` macros: the macros need a live database
//!   (or committed offline data) at build time. Every query is covered by the tests below, which
//!   run against a fresh temp-file database migrated by the same embedded migrations.
//! - Every multi-statement write begins with `BEGIN IMMEDIATE`. A deferred `BEGIN` that reads
//!   before it writes gets "database is locked" at once when another writer is active, without
//!   waiting out the busy timeout.
//! - Samples are written with multi-row `INSERT OR IGNORE ... VALUES` statements: sqlx pays a
//!   round trip to its SQLite worker thread per statement, so one row per statement is slow.
//! - The file runs in WAL mode with `synchronous = NORMAL`: readers never block the writer, and a
//!   power cut can lose the last commits but never corrupts the file.
//!
//! Times are milliseconds since the Unix epoch on the data's time axis (see `migrations/`).

mod alerts;
mod episodes;
mod error;
mod gaps;
mod rejections;
mod report;
mod samples;

pub use alerts::{Acknowledgement, AlertInput, AlertRow, AlertState};
pub use episodes::{EpisodeRow, LoopRow, ModelRow};
pub use error::{Error, Result};
pub use gaps::GapRow;
pub use rejections::RejectionRow;
pub use report::{KeptReport, SeriesCoverage};
pub use samples::InsertOutcome;

use crate::sample::Signal;
use sqlx::migrate::Migrator;
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use std::collections::HashMap;
use std::path::Path;
use std::sync::{Arc, Mutex, MutexGuard, PoisonError};
use std::time::Duration;

/// The schema, embedded from `migrations/` (src/build.rs makes a change there rebuild the crate).
static MIGRATOR: Migrator = sqlx::migrate!();

/// Connections of a read-write store. SQLite has one writer at a time anyway; the rest serve
/// readers (the live queries and the reports) while a write transaction is open.
const POOL_CONNECTIONS: u32 = 4;

/// Connections of a read-only store, used by the short-lived query commands.
const READ_ONLY_CONNECTIONS: u32 = 2;

/// How long a writer waits for another writer's transaction before giving up with
/// [`Error::Busy`]. Batches commit in milliseconds, so 5 s means something is wrong.
const BUSY_TIMEOUT: Duration = Duration::from_secs(5);

/// Series ids by (loop tag, signal), filled as series are seen. Shared by all clones of a store.
type SeriesCache = HashMap<(Arc<str>, Signal), i64>;

/// A handle to the store. Clones share the pool and the series cache.
#[derive(Debug, Clone)]
pub struct Store {
    pool: SqlitePool,
    path: Arc<Path>,
    /// Holds only ids of committed series rows (see `insert_samples`). A std mutex: it is never
    /// held across an await, only for a batch's worth of hash lookups.
    series_ids: Arc<Mutex<SeriesCache>>,
}

impl Store {
    /// Opens the store at `path` for reading and writing, creating the file if it is missing,
    /// and brings its schema up to date.
    pub async fn open(path: &Path) -> Result<Store> {
        if !path.exists()
            && let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty())
            && !dir.is_dir()
        {
            return Err(Error::NoDirectory {
                path: path.to_path_buf(),
                dir: dir.to_path_buf(),
            });
        }
        let options = SqliteConnectOptions::new()
            .filename(path)
            .create_if_missing(true)
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Normal)
            .busy_timeout(BUSY_TIMEOUT)
            .foreign_keys(true);
        let pool = connect(options, POOL_CONNECTIONS, path).await?;
        if let Err(cause) = MIGRATOR.run(&pool).await {
            pool.close().await;
            return Err(Error::Migrate {
                path: path.to_path_buf(),
                cause,
            });
        }
        tracing::debug!(path = %path.display(), "store open");
        Ok(Store::from_pool(pool, path))
    }

    /// Opens an existing store for the query commands. Nothing is created or migrated; a file
    /// that is missing, not a headroom store, or of another schema version is refused with a
    /// message that says so.
    pub async fn open_read_only(path: &Path) -> Result<Store> {
        if !path.exists() {
            return Err(Error::NotFound {
                path: path.to_path_buf(),
            });
        }
        let options = SqliteConnectOptions::new()
            .filename(path)
            .read_only(true)
            .busy_timeout(BUSY_TIMEOUT);
        let pool = connect(options, READ_ONLY_CONNECTIONS, path).await?;
        if let Err(e) = check_schema(&pool, path).await {
            pool.close().await;
            return Err(e);
        }
        Ok(Store::from_pool(pool, path))
    }

    fn from_pool(pool: SqlitePool, path: &Path) -> Store {
        Store {
            pool,
            path: Arc::from(path),
            series_ids: Arc::default(),
        }
    }

    /// The file this store was opened from.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Waits for running operations to finish and closes every connection. Operations started
    /// afterwards (on any clone) fail.
    pub async fn close(&self) {
        self.pool.close().await;
    }

    /// Checks the file: SQLite's own consistency check, plus samples that belong to no known
    /// series (the schema leaves that link unchecked for speed, see `migrations/`). Returns
    /// `"ok"` when all is well, otherwise the problems found, one per line. Reads every page,
    /// so it takes a while on a large store.
    pub async fn integrity_check(&self) -> Result<String> {
        const DOING: &str = "checking the file's integrity";
        let mut lines: Vec<String> = sqlx::query_scalar("PRAGMA integrity_check")
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        let orphans: i64 = sqlx::query_scalar(
            "SELECT COUNT(*) FROM (SELECT DISTINCT series_id FROM samples)
             WHERE series_id NOT IN (SELECT id FROM series)",
        )
        .fetch_one(&self.pool)
        .await
        .map_err(self.fail(DOING))?;
        if orphans > 0 {
            if lines == ["ok"] {
                lines.clear();
            }
            let ids = crate::units::count(
                usize::try_from(orphans).unwrap_or(usize::MAX),
                "series id",
                "series ids",
            );
            lines.push(format!(
                "samples refer to {ids} missing from the series table"
            ));
        }
        Ok(lines.join("\n"))
    }

    /// Turns a sqlx error into an [`Error`] naming this store and what it was doing.
    fn fail(&self, doing: &'static str) -> impl FnOnce(sqlx::Error) -> Error + '_ {
        move |cause| Error::from_sqlx(&self.path, doing, cause)
    }

    fn bad_value(&self, doing: &'static str, detail: impl std::fmt::Display) -> Error {
        Error::BadValue {
            path: self.path.to_path_buf(),
            doing,
            detail: detail.to_string(),
        }
    }

    fn series_cache(&self) -> MutexGuard<'_, SeriesCache> {
        // The map is only ever extended with committed ids, so a panic elsewhere while the
        // lock was held cannot leave it wrong.
        self.series_ids
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
    }
}

/// Refuses a file whose schema is not exactly the one this build knows: reading an older
/// schema would fail later with an obscure "no such column", a newer one could be misread.
async fn check_schema(pool: &SqlitePool, path: &Path) -> Result<()> {
    let schema_error = |detail: &str| Error::Schema {
        path: path.to_path_buf(),
        detail: detail.to_string(),
    };
    let applied: Option<i64> =
        match sqlx::query_scalar("SELECT MAX(version) FROM _sqlx_migrations WHERE success")
            .fetch_one(pool)
            .await
        {
            Ok(v) => v,
            Err(sqlx::Error::Database(e)) if e.message().contains("no such table") => {
                return Err(schema_error(
                    "it has no headroom schema (is it another program's database?)",
                ));
            }
            Err(sqlx::Error::Database(e)) if e.message().contains("not a database") => {
                return Err(schema_error("it is not an SQLite database"));
            }
            Err(cause) => return Err(Error::from_sqlx(path, "reading its schema version", cause)),
        };
    let known = MIGRATOR.iter().map(|m| m.version).max();
    match (applied, known) {
        (a, k) if a == k => Ok(()),
        (Some(a), Some(k)) if a > k => Err(schema_error(&format!(
            "it was written by a newer version of headroom (schema {a}, this version knows up to \
             {k}); use that version"
        ))),
        _ => Err(schema_error(
            "it was written by an older version of headroom; start the daemon (headroom run) \
             once to upgrade it",
        )),
    }
}

#[cfg(test)]
pub(crate) mod testing {
    //! Shared by the store's tests: every test gets its own migrated temp-file database.

    use super::Store;
    use crate::analysis::segment::{ChangeShape, WindowEnd};
    use crate::analysis::{EpisodeResult, Verdict};
    use crate::sample::{Sample, Signal};

    /// A fresh store in a temp directory; keep the directory alive as long as the store.
    pub(crate) async fn fresh_store() -> (tempfile::TempDir, Store) {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = Store::open(&dir.path().join("headroom.db"))
            .await
            .expect("open a fresh store");
        (dir, store)
    }

    /// An episode result with plausible numbers; tests change the fields they care about.
    pub(crate) fn episode_result(verdict: Verdict, settling_time_s: Option<f64>) -> EpisodeResult {
        EpisodeResult {
            start_s: 100.0,
            end_s: 400.0,
            sp_from: 50.0,
            sp_to: 60.0,
            shape: ChangeShape::Step,
            window_end: WindowEnd::EndOfData,
            samples: 300,
            settling_time_s,
            overshoot_pct: 4.5,
            rise_time_s: Some(40.0),
            iae_per_delta_s: 30.0,
            saturation_duty: 0.25,
            pv_smoothing_samples: 1,
            op_start: 45.0,
            op_headroom: 55.0,
            peak_op: 100.0,
            min_settling_time_s: Some(95.0),
            reach: Some(27.5),
            required_op_limit: Some(130.0),
            capacity_ratio: Some(1.3),
            verdict,
            reason: "the actuator cannot deliver the spec".into(),
            start_pv: None,
            pv_moving: false,
            confidence: None,
            confidence_reasons: Vec::new(),
            min_settling_time_range_s: None,
            reach_range: None,
            capacity_ratio_range: None,
            bound_beaten: false,
            quality: Vec::new(),
            deciding_step: None,
        }
    }

    pub(crate) fn sample(tag: &str, signal: Signal, ts_ms: i64, value: f64) -> Sample {
        Sample {
            loop_tag: tag.into(),
            signal,
            ts_ms,
            value,
        }
    }
}

/// A pool of `connections` connections with `options`; a failure names the file.
async fn connect(
    options: SqliteConnectOptions,
    connections: u32,
    path: &Path,
) -> Result<SqlitePool> {
    SqlitePoolOptions::new()
        .max_connections(connections)
        .connect_with(options)
        .await
        .map_err(|cause| Error::Open {
            path: path.to_path_buf(),
            cause,
        })
}

#[cfg(test)]
mod tests {
    use super::testing::{fresh_store, sample};
    use super::*;

    #[tokio::test]
    async fn a_fresh_store_has_every_table_and_the_wanted_settings() {
        let (_dir, store) = fresh_store().await;
        let tables: Vec<String> = sqlx::query_scalar(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE '\\_%' ESCAPE '\\' ORDER BY name",
        )
        .fetch_all(&store.pool)
        .await
        .unwrap();
        assert_eq!(
            tables,
            [
                "alerts",
                "episodes",
                "gaps",
                "models",
                "rejections",
                "reports",
                "samples",
                "series"
            ]
        );
        let mut conn = store.pool.acquire().await.unwrap();
        let journal: String = sqlx::query_scalar("PRAGMA journal_mode")
            .fetch_one(&mut *conn)
            .await
            .unwrap();
        assert_eq!(journal, "wal");
        let mut numbers = Vec::new();
        for name in ["synchronous", "busy_timeout", "foreign_keys"] {
            let value: i64 = sqlx::query_scalar(sqlx::AssertSqlSafe(format!("PRAGMA {name}")))
                .fetch_one(&mut *conn)
                .await
                .unwrap();
            numbers.push(value);
        }
        assert_eq!(numbers, [1, 5000, 1]);
    }

    #[tokio::test]
    async fn reopening_a_store_keeps_its_data_and_applies_nothing_twice() {
        let (dir, store) = fresh_store().await;
        store
            .insert_samples(&[sample("TIC-101", Signal::Pv, 1_000, 42.0)])
            .await
            .unwrap();
        store.close().await;
        let again = Store::open(&dir.path().join("headroom.db")).await.unwrap();
        assert_eq!(again.sample_count().await.unwrap(), 1);
        let applied: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM _sqlx_migrations")
            .fetch_one(&again.pool)
            .await
            .unwrap();
        assert_eq!(applied, MIGRATOR.iter().count() as i64);
    }

    #[tokio::test]
    async fn integrity_check_of_a_sound_store_says_ok() {
        let (_dir, store) = fresh_store().await;
        store
            .insert_samples(&[sample("TIC-101", Signal::Sp, 0, 50.0)])
            .await
            .unwrap();
        assert_eq!(store.integrity_check().await.unwrap(), "ok");
    }

    #[tokio::test]
    async fn integrity_check_reports_samples_of_an_unknown_series() {
        let (_dir, store) = fresh_store().await;
        store
            .insert_samples(&[sample("TIC-101", Signal::Sp, 0, 50.0)])
            .await
            .unwrap();
        sqlx::query("INSERT INTO samples (series_id, ts_ms, value) VALUES (4242, 0, 1.0)")
            .execute(&store.pool)
            .await
            .unwrap();
        let report = store.integrity_check().await.unwrap();
        assert!(report.contains("1 series id missing"), "{report}");
    }

    #[tokio::test]
    async fn opening_a_missing_file_read_only_fails_naming_the_path() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("nowhere.db");
        let err = Store::open_read_only(&path).await.unwrap_err();
        assert!(matches!(err, Error::NotFound { .. }), "{err:?}");
        let message = err.to_string();
        assert!(message.contains(&path.display().to_string()), "{message}");
        assert!(!path.exists(), "a read-only open must not create the file");
    }

    #[tokio::test]
    async fn opening_in_a_missing_directory_names_the_directory() {
        let dir = tempfile::tempdir().unwrap();
        let missing = dir.path().join("no-such-dir");
        let err = Store::open(&missing.join("headroom.db")).await.unwrap_err();
        assert!(matches!(err, Error::NoDirectory { .. }), "{err:?}");
        assert!(
            err.to_string().contains(&missing.display().to_string()),
            "{err}"
        );
    }

    #[tokio::test]
    async fn a_read_only_store_answers_queries_and_refuses_writes() {
        let (dir, store) = fresh_store().await;
        store
            .insert_samples(&[sample("TIC-101", Signal::Pv, 1_000, 42.0)])
            .await
            .unwrap();
        let reader = Store::open_read_only(&dir.path().join("headroom.db"))
            .await
            .unwrap();
        assert_eq!(
            reader
                .samples("TIC-101", Signal::Pv, 0, 2_000)
                .await
                .unwrap(),
            [(1_000, 42.0)]
        );
        let err = reader
            .insert_samples(&[sample("TIC-101", Signal::Pv, 2_000, 43.0)])
            .await
            .unwrap_err();
        assert!(matches!(err, Error::ReadOnly { .. }), "{err:?}");
    }

    #[tokio::test]
    async fn a_file_of_another_program_is_refused_read_only() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("other.db");
        let other = SqlitePoolOptions::new()
            .connect_with(
                SqliteConnectOptions::new()
                    .filename(&path)
                    .create_if_missing(true),
            )
            .await
            .unwrap();
        sqlx::query("CREATE TABLE t (x INTEGER)")
            .execute(&other)
            .await
            .unwrap();
        other.close().await;
        let err = Store::open_read_only(&path).await.unwrap_err();
        assert!(matches!(err, Error::Schema { .. }), "{err:?}");
        assert!(err.to_string().contains("no headroom schema"), "{err}");
    }

    #[tokio::test]
    async fn a_store_with_a_newer_schema_is_refused_read_only() {
        let (dir, store) = fresh_store().await;
        sqlx::query(
            "INSERT INTO _sqlx_migrations (version, description, success, checksum, execution_time)
             VALUES (99991231000000, 'from the future', 1, x'00', 0)",
        )
        .execute(&store.pool)
        .await
        .unwrap();
        store.close().await;
        let err = Store::open_read_only(&dir.path().join("headroom.db"))
            .await
            .unwrap_err();
        assert!(err.to_string().contains("newer version"), "{err}");
    }
}
