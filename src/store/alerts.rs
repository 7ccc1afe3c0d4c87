//! Alerts.
//!
//! An alert is about one setpoint change (keyed by its loop and the change's start: the
//! provisional alert becomes the final one in place) or about one spell of a loop-wide
//! condition such as a stale tag (at most one followed, "ongoing", per loop and kind). Its
//! state goes active → returned (the condition has gone) → acknowledged (a person has seen
//! it, recorded with who and when); an active alert can be acknowledged directly. See
//! [`crate::alerts`] for what each condition means and what happens when it comes back.

use super::{Result, Store};
use serde::Serialize;
use sqlx::Row;
use sqlx::sqlite::SqliteRow;

/// Where an alert stands. Stored and serialised in snake_case; [`AlertState::label`] is what
/// people read.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum AlertState {
    /// The condition is present and no one has acknowledged the alert yet.
    Active,
    /// The condition has gone by itself (data flows again; a provisional miss turned out not
    /// to be one); no one has acknowledged it yet.
    Returned,
    /// A person has seen it. Its condition may still be present: an acknowledged outage still
    /// gets its end recorded.
    Acknowledged,
}

impl AlertState {
    pub const ALL: [AlertState; 3] = [
        AlertState::Active,
        AlertState::Returned,
        AlertState::Acknowledged,
    ];

    /// The stored and JSON spelling.
    pub fn as_str(self) -> &'static str {
        match self {
            AlertState::Active => "active",
            AlertState::Returned => "returned",
            AlertState::Acknowledged => "acknowledged",
        }
    }

    /// The spelling people read: plain words, which for a state are the stored ones.
    pub fn label(self) -> &'static str {
        self.as_str()
    }

    pub fn parse(s: &str) -> Option<AlertState> {
        AlertState::ALL.into_iter().find(|x| x.as_str() == s)
    }
}

/// A sighting of an alert condition, as the daemon reports it.
#[derive(Debug, Clone, Serialize)]
pub struct AlertInput {
    pub loop_tag: String,
    /// What kind of condition (a miss's verdict such as `actuator_limited`, or `stale_tag`).
    /// A change's alert takes the kind of its latest sighting.
    pub kind: String,
    /// One sentence for the person reading the alert; the latest sighting's wording is kept.
    pub message: String,
    /// The numbers behind the alert; the latest sighting's evidence is kept.
    pub evidence: serde_json::Value,
    /// Data time of the sighting (ms since the epoch): the alert's span reaches at least here.
    pub seen_ms: i64,
    /// When the condition began, if before the sighting (an outage began at the newest sample
    /// before the silence); `None` for "at the sighting". An alert's start only moves earlier.
    pub since_ms: Option<i64>,
    /// The start of the setpoint change the alert is about; `None` for a condition of the loop
    /// as a whole.
    pub change_start_ms: Option<i64>,
}

/// A stored alert.
#[derive(Debug, Clone, Serialize)]
pub struct AlertRow {
    pub id: i64,
    pub loop_tag: String,
    pub kind: String,
    pub state: AlertState,
    /// Whether the condition is present as far as headroom knows: sightings update this alert,
    /// and its end will be recorded.
    pub ongoing: bool,
    /// The setpoint change it is about, if it is about one.
    pub change_start_ms: Option<i64>,
    /// The span of the condition (see [`AlertInput::since_ms`] and [`AlertInput::seen_ms`]).
    pub first_seen_ms: i64,
    pub last_seen_ms: i64,
    /// When the daemon raised it, on the data's clock.
    pub raised_ms: i64,
    /// When the condition went, if it has and that was recorded.
    pub returned_ms: Option<i64>,
    /// Occurrences of the condition folded into this alert: 1 (one change, one outage), more
    /// for alerts stored before alerts were kept per change.
    pub count: u64,
    pub message: String,
    pub evidence: serde_json::Value,
    /// When it was acknowledged (wall-clock ms since the epoch).
    pub acked_ms: Option<i64>,
    /// Who acknowledged it (unknown for alerts acknowledged before this was recorded).
    pub acked_by: Option<String>,
    /// Set by [`Store::raise_alert`] when that call opened the alert (so the caller announces
    /// it); `false` for an update and for every row a query returns.
    #[serde(skip)]
    pub is_new: bool,
}

/// What an acknowledgement did.
#[derive(Debug, Clone)]
pub enum Acknowledgement {
    /// The alert is now acknowledged.
    Done(AlertRow),
    /// It had been acknowledged before; the first acknowledgement stands, unchanged.
    Already(AlertRow),
    /// No alert has this id.
    Unknown,
}

const ALERT_COLUMNS: &str = "id, loop_tag, kind, state, ongoing, change_start_ms, first_seen_ms, \
     last_seen_ms, raised_ms, returned_ms, count, message, evidence, acked_ms, acked_by";

/// The followed alert an input is about: its change's, or its loop's of its kind.
const TARGET: &str = "loop_tag = ?1 AND CASE WHEN ?2 IS NULL
         THEN (change_start_ms IS NULL AND kind = ?3 AND ongoing = 1)
         ELSE change_start_ms = ?2 END";

impl Store {
    /// Records a sighting of an alert condition: updates the alert it belongs to (its change's
    /// alert; its loop's followed alert of the kind) in place — kind, message, evidence, span —
    /// or opens a new alert. A returned alert whose condition is seen again is active again;
    /// an acknowledged one stays acknowledged. The returned row says which (`is_new`).
    pub async fn raise_alert(&self, alert: AlertInput) -> Result<AlertRow> {
        const DOING: &str = "recording an alert";
        let evidence =
            serde_json::to_string(&alert.evidence).map_err(|e| self.bad_value(DOING, e))?;
        let first_ms = alert.since_ms.unwrap_or(alert.seen_ms).min(alert.seen_ms);
        let mut tx = self
            .pool
            .begin_with("BEGIN IMMEDIATE")
            .await
            .map_err(self.fail(DOING))?;
        let existing: Option<i64> = sqlx::query_scalar(sqlx::AssertSqlSafe(format!(
            "SELECT id FROM alerts WHERE {TARGET}"
        )))
        .bind(&alert.loop_tag)
        .bind(alert.change_start_ms)
        .bind(&alert.kind)
        .fetch_optional(&mut *tx)
        .await
        .map_err(self.fail(DOING))?;
        let sql = match existing {
            Some(_) => format!(
                "UPDATE alerts SET kind = ?2, message = ?3, evidence = ?4,
                     first_seen_ms = MIN(first_seen_ms, ?5),
                     last_seen_ms = MAX(last_seen_ms, ?6),
                     ongoing = 1, returned_ms = NULL,
                     state = CASE state WHEN 'returned' THEN 'active' ELSE state END
                 WHERE id = ?1 AND loop_tag = ?7 AND change_start_ms IS ?8
                 RETURNING {ALERT_COLUMNS}"
            ),
            None => format!(
                "INSERT INTO alerts (id, kind, message, evidence, first_seen_ms, last_seen_ms,
                                     loop_tag, change_start_ms, raised_ms, state, ongoing, count)
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?6, 'active', 1, 1)
                 RETURNING {ALERT_COLUMNS}"
            ),
        };
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(existing)
            .bind(&alert.kind)
            .bind(&alert.message)
            .bind(evidence)
            .bind(first_ms)
            .bind(alert.seen_ms)
            .bind(&alert.loop_tag)
            .bind(alert.change_start_ms)
            .fetch_one(&mut *tx)
            .await
            .map_err(self.fail(DOING))?;
        tx.commit().await.map_err(self.fail(DOING))?;
        let mut row = self.alert_row(&row, DOING)?;
        row.is_new = existing.is_none();
        Ok(row)
    }

    /// Records that the condition of the alert an input is about has gone at `alert.seen_ms`
    /// (data flows again; a change's final verdict is no miss after all): the alert stops being
    /// followed, its span ends there, it keeps the input's message and evidence, and an active
    /// alert becomes returned (an acknowledged one stays acknowledged). `None` when no followed
    /// alert is about it.
    pub async fn return_alert(&self, alert: AlertInput) -> Result<Option<AlertRow>> {
        const DOING: &str = "recording that an alert's condition has gone";
        let evidence =
            serde_json::to_string(&alert.evidence).map_err(|e| self.bad_value(DOING, e))?;
        let sql = format!(
            "UPDATE alerts SET ongoing = 0, returned_ms = ?4,
                 last_seen_ms = MAX(first_seen_ms, ?4), message = ?5, evidence = ?6,
                 state = CASE state WHEN 'active' THEN 'returned' ELSE state END
             WHERE {TARGET} AND ongoing = 1
             RETURNING {ALERT_COLUMNS}"
        );
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(&alert.loop_tag)
            .bind(alert.change_start_ms)
            .bind(&alert.kind)
            .bind(alert.seen_ms)
            .bind(&alert.message)
            .bind(evidence)
            .fetch_optional(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        row.map(|r| self.alert_row(&r, DOING)).transpose()
    }

    /// Acknowledges an alert, recording who (`None`: not known) and when (wall clock). An alert
    /// acknowledged before keeps its first acknowledgement.
    pub async fn ack_alert(
        &self,
        id: i64,
        by: Option<&str>,
        now_ms: i64,
    ) -> Result<Acknowledgement> {
        const DOING: &str = "acknowledging an alert";
        let sql = format!(
            "UPDATE alerts SET state = 'acknowledged', acked_ms = ?2, acked_by = ?3
             WHERE id = ?1 AND state <> 'acknowledged'
             RETURNING {ALERT_COLUMNS}"
        );
        let done = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(id)
            .bind(now_ms)
            .bind(by)
            .fetch_optional(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        if let Some(row) = done {
            return Ok(Acknowledgement::Done(self.alert_row(&row, DOING)?));
        }
        Ok(match self.alert(id).await? {
            Some(row) => Acknowledgement::Already(row),
            None => Acknowledgement::Unknown,
        })
    }

    /// The alert with this id.
    pub async fn alert(&self, id: i64) -> Result<Option<AlertRow>> {
        const DOING: &str = "reading an alert";
        let sql = format!("SELECT {ALERT_COLUMNS} FROM alerts WHERE id = ?1");
        let row = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(id)
            .fetch_optional(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        row.map(|r| self.alert_row(&r, DOING)).transpose()
    }

    /// Alerts, most recently seen first; only the unacknowledged ones (active or returned)
    /// when `unacknowledged_only`.
    pub async fn alerts(&self, unacknowledged_only: bool) -> Result<Vec<AlertRow>> {
        const DOING: &str = "reading alerts";
        let sql = format!(
            "SELECT {ALERT_COLUMNS} FROM alerts
             WHERE NOT ?1 OR state <> 'acknowledged'
             ORDER BY last_seen_ms DESC, id DESC"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(unacknowledged_only)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.alert_row(r, DOING)).collect()
    }

    /// The followed alerts of a loop-wide condition of this kind, by loop: what a restarted
    /// daemon picks up again (an outage that began before the restart still ends when data
    /// flows).
    pub async fn ongoing_alerts(&self, kind: &str) -> Result<Vec<AlertRow>> {
        const DOING: &str = "reading ongoing alerts";
        let sql = format!(
            "SELECT {ALERT_COLUMNS} FROM alerts
             WHERE kind = ?1 AND change_start_ms IS NULL AND ongoing = 1
             ORDER BY loop_tag"
        );
        let rows = sqlx::query(sqlx::AssertSqlSafe(sql))
            .bind(kind)
            .fetch_all(&self.pool)
            .await
            .map_err(self.fail(DOING))?;
        rows.iter().map(|r| self.alert_row(r, DOING)).collect()
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
            ongoing: r.try_get("ongoing").map_err(get)?,
            change_start_ms: r.try_get("change_start_ms").map_err(get)?,
            first_seen_ms: r.try_get("first_seen_ms").map_err(get)?,
            last_seen_ms: r.try_get("last_seen_ms").map_err(get)?,
            raised_ms: r.try_get("raised_ms").map_err(get)?,
            returned_ms: r.try_get("returned_ms").map_err(get)?,
            count: count.max(0) as u64,
            message: r.try_get("message").map_err(get)?,
            evidence: serde_json::from_str(&evidence)
                .map_err(|e| self.bad_value(doing, format!("alert evidence: {e}")))?,
            acked_ms: r.try_get("acked_ms").map_err(get)?,
            acked_by: r.try_get("acked_by").map_err(get)?,
            is_new: false,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::super::testing::fresh_store;
    use super::*;
    use serde_json::json;

    /// A sighting of a missed change starting at `start_ms`, seen at `seen_ms`.
    fn missed(kind: &str, start_ms: i64, seen_ms: i64, settling_s: f64) -> AlertInput {
        AlertInput {
            loop_tag: "TIC-101".into(),
            kind: kind.into(),
            message: format!("settled in {settling_s} s, spec 120 s"),
            evidence: json!({ "settling_time_s": settling_s }),
            seen_ms,
            since_ms: Some(start_ms),
            change_start_ms: Some(start_ms),
        }
    }

    /// A sighting of an outage of the loop's PV that began at `since_ms`.
    fn outage(since_ms: i64, seen_ms: i64) -> AlertInput {
        AlertInput {
            loop_tag: "TIC-101".into(),
            kind: "stale_tag".into(),
            message: "no pv sample".into(),
            evidence: json!({ "pv": { "last_sample": since_ms } }),
            seen_ms,
            since_ms: Some(since_ms),
            change_start_ms: None,
        }
    }

    fn states(rows: &[AlertRow]) -> Vec<(i64, AlertState, bool)> {
        rows.iter().map(|a| (a.id, a.state, a.ongoing)).collect()
    }

    #[tokio::test]
    async fn a_provisional_alert_becomes_the_final_one_in_place() {
        let (_dir, store) = fresh_store().await;
        let provisional = store
            .raise_alert(missed("tuning_limited", 1_000, 121_000, 150.0))
            .await
            .unwrap();
        assert!(provisional.is_new);
        assert_eq!(
            (
                provisional.state,
                provisional.first_seen_ms,
                provisional.raised_ms
            ),
            (AlertState::Active, 1_000, 121_000)
        );
        let last = store
            .raise_alert(missed("actuator_limited", 1_000, 400_000, 170.0))
            .await
            .unwrap();
        assert!(!last.is_new);
        assert_eq!(last.id, provisional.id);
        assert_eq!(last.kind, "actuator_limited");
        assert_eq!(last.message, "settled in 170 s, spec 120 s");
        assert_eq!(last.evidence, json!({ "settling_time_s": 170.0 }));
        assert_eq!(
            (
                last.first_seen_ms,
                last.last_seen_ms,
                last.raised_ms,
                last.count
            ),
            (1_000, 400_000, 121_000, 1)
        );
        // The next change is another alert.
        let next = store
            .raise_alert(missed("actuator_limited", 500_000, 700_000, 160.0))
            .await
            .unwrap();
        assert!(next.is_new);
        assert_eq!(store.alerts(false).await.unwrap().len(), 2);
    }

    #[tokio::test]
    async fn a_provisional_miss_that_is_no_miss_in_the_end_returns() {
        let (_dir, store) = fresh_store().await;
        let raised = store
            .raise_alert(missed("tuning_limited", 1_000, 121_000, 150.0))
            .await
            .unwrap();
        let mut cleared = missed("tuning_limited", 1_000, 300_000, 118.0);
        cleared.message = "final verdict: met".into();
        let back = store.return_alert(cleared.clone()).await.unwrap().unwrap();
        assert_eq!(back.id, raised.id);
        assert_eq!(
            (
                back.state,
                back.ongoing,
                back.returned_ms,
                back.last_seen_ms
            ),
            (AlertState::Returned, false, Some(300_000), 300_000)
        );
        assert_eq!(back.message, "final verdict: met");
        // Returning it again finds nothing followed; a change with no alert has none to return.
        assert!(store.return_alert(cleared).await.unwrap().is_none());
        let other = missed("tuning_limited", 9_000, 9_500, 1.0);
        assert!(store.return_alert(other).await.unwrap().is_none());
        // A returned alert stays listed until a person acknowledges it.
        assert_eq!(
            states(&store.alerts(true).await.unwrap()),
            [(raised.id, AlertState::Returned, false)]
        );
        // Seen to miss again (a later, longer look at the same change): active again, same alert.
        let again = store
            .raise_alert(missed("tuning_limited", 1_000, 400_000, 160.0))
            .await
            .unwrap();
        assert_eq!(
            (again.id, again.state, again.returned_ms),
            (raised.id, AlertState::Active, None)
        );
    }

    #[tokio::test]
    async fn an_outage_spans_the_silence_and_returns_when_data_flows() {
        let (_dir, store) = fresh_store().await;
        // Silent since 10 s, found stale at 70 s, still silent at 100 s, data back at 130 s.
        let raised = store.raise_alert(outage(10_000, 70_000)).await.unwrap();
        assert!(raised.is_new);
        assert_eq!(
            (raised.first_seen_ms, raised.last_seen_ms, raised.raised_ms),
            (10_000, 70_000, 70_000)
        );
        let still = store.raise_alert(outage(10_000, 100_000)).await.unwrap();
        assert!(!still.is_new);
        assert_eq!(
            (still.id, still.first_seen_ms, still.last_seen_ms),
            (raised.id, 10_000, 100_000)
        );
        let back = store
            .return_alert(outage(10_000, 130_000))
            .await
            .unwrap()
            .unwrap();
        assert_eq!(
            (
                back.id,
                back.state,
                back.first_seen_ms,
                back.last_seen_ms,
                back.returned_ms
            ),
            (
                raised.id,
                AlertState::Returned,
                10_000,
                130_000,
                Some(130_000)
            )
        );
        // Silent again later: a new outage, a new alert; the first keeps its span.
        let second = store.raise_alert(outage(200_000, 260_000)).await.unwrap();
        assert!(second.is_new);
        let all = store.alerts(false).await.unwrap();
        assert_eq!(
            states(&all),
            [
                (second.id, AlertState::Active, true),
                (raised.id, AlertState::Returned, false)
            ]
        );
        assert_eq!(all[1].returned_ms, Some(130_000));
    }

    #[tokio::test]
    async fn an_acknowledgement_records_who_and_when_and_the_first_one_stands() {
        let (_dir, store) = fresh_store().await;
        let a = store.raise_alert(outage(10_000, 70_000)).await.unwrap();
        let Acknowledgement::Done(acked) =
            store.ack_alert(a.id, Some("ann"), 99_000).await.unwrap()
        else {
            panic!("not acknowledged");
        };
        assert_eq!(
            (
                acked.state,
                acked.acked_by.as_deref(),
                acked.acked_ms,
                acked.ongoing
            ),
            (AlertState::Acknowledged, Some("ann"), Some(99_000), true)
        );
        let Acknowledgement::Already(first) =
            store.ack_alert(a.id, Some("bob"), 120_000).await.unwrap()
        else {
            panic!("acknowledged twice");
        };
        assert_eq!(
            (first.acked_by.as_deref(), first.acked_ms),
            (Some("ann"), Some(99_000))
        );
        assert!(matches!(
            store.ack_alert(a.id + 100, Some("ann"), 1).await.unwrap(),
            Acknowledgement::Unknown
        ));
        assert!(store.alerts(true).await.unwrap().is_empty());

        // The acknowledged outage goes on, then ends: still acknowledged, its end recorded.
        let on = store.raise_alert(outage(10_000, 150_000)).await.unwrap();
        assert_eq!(
            (on.id, on.state, on.last_seen_ms),
            (a.id, AlertState::Acknowledged, 150_000)
        );
        let back = store
            .return_alert(outage(10_000, 180_000))
            .await
            .unwrap()
            .unwrap();
        assert_eq!(
            (back.state, back.returned_ms, back.acked_by.as_deref()),
            (AlertState::Acknowledged, Some(180_000), Some("ann"))
        );
        // A returned alert can be acknowledged too.
        let b = store.raise_alert(outage(300_000, 360_000)).await.unwrap();
        store.return_alert(outage(300_000, 400_000)).await.unwrap();
        let Acknowledgement::Done(b) = store.ack_alert(b.id, Some("cy"), 500_000).await.unwrap()
        else {
            panic!("not acknowledged");
        };
        assert_eq!(
            (b.state, b.returned_ms),
            (AlertState::Acknowledged, Some(400_000))
        );
    }

    #[tokio::test]
    async fn a_restarted_daemon_finds_the_ongoing_outage_and_ends_it() {
        let (dir, store) = fresh_store().await;
        let path = store.path().to_path_buf();
        let a = store.raise_alert(outage(10_000, 70_000)).await.unwrap();
        let change = store
            .raise_alert(missed("unreachable", 1_000, 5_000, 1.0))
            .await
            .unwrap();
        store.close().await;

        let store = Store::open(&path).await.unwrap();
        let ongoing = store.ongoing_alerts("stale_tag").await.unwrap();
        assert_eq!(states(&ongoing), [(a.id, AlertState::Active, true)]);
        assert!(
            store
                .ongoing_alerts("unreachable")
                .await
                .unwrap()
                .is_empty(),
            "a change's alert is not loop-wide"
        );
        // The silence goes on across the restart (a later sighting starts no earlier).
        let on = store.raise_alert(outage(80_000, 90_000)).await.unwrap();
        assert_eq!((on.id, on.first_seen_ms, on.is_new), (a.id, 10_000, false));
        let back = store
            .return_alert(outage(80_000, 95_000))
            .await
            .unwrap()
            .unwrap();
        assert_eq!((back.id, back.state), (a.id, AlertState::Returned));
        assert!(store.ongoing_alerts("stale_tag").await.unwrap().is_empty());
        assert_eq!(
            store.alert(change.id).await.unwrap().unwrap().state,
            AlertState::Active
        );
        drop(dir);
    }

    #[tokio::test]
    async fn alerts_of_different_kinds_or_loops_are_separate() {
        let (_dir, store) = fresh_store().await;
        let a = store.raise_alert(outage(1_000, 9_000)).await.unwrap();
        let mut other_kind = outage(1_000, 9_000);
        other_kind.kind = "oscillating".into();
        let b = store.raise_alert(other_kind).await.unwrap();
        let mut other_loop = outage(1_000, 9_000);
        other_loop.loop_tag = "TIC-102".into();
        let c = store.raise_alert(other_loop).await.unwrap();
        let mut other_loop_change = missed("tuning_limited", 1_000, 9_000, 150.0);
        other_loop_change.loop_tag = "TIC-102".into();
        let d = store.raise_alert(other_loop_change).await.unwrap();
        let e = store
            .raise_alert(missed("tuning_limited", 1_000, 9_000, 150.0))
            .await
            .unwrap();
        assert!(a.is_new && b.is_new && c.is_new && d.is_new && e.is_new);
        assert_eq!(store.alerts(true).await.unwrap().len(), 5);
    }

    #[tokio::test]
    async fn the_schema_itself_refuses_two_followed_alerts_of_a_kind_and_two_per_change() {
        let (_dir, store) = fresh_store().await;
        let insert = "INSERT INTO alerts (loop_tag, kind, state, ongoing, change_start_ms,
                          first_seen_ms, last_seen_ms, raised_ms, count, message, evidence,
                          acked_ms)
                      VALUES ('TIC-101', 'stale_tag', ?1, ?2, ?3, 0, 0, 0, 1, 'm', '{}', ?4)";
        let add = async |state: &str, ongoing: bool, change: Option<i64>, acked: Option<i64>| {
            sqlx::query(insert)
                .bind(state)
                .bind(ongoing)
                .bind(change)
                .bind(acked)
                .execute(&store.pool)
                .await
        };
        add("active", true, None, None).await.unwrap();
        add("returned", false, None, None)
            .await
            .expect("past outages of a kind may pile up");
        add("acknowledged", false, None, Some(1))
            .await
            .expect("past outages of a kind may pile up");
        assert!(
            add("acknowledged", true, None, Some(1)).await.is_err(),
            "a second followed outage"
        );
        add("active", true, Some(5), None).await.unwrap();
        assert!(
            add("returned", false, Some(5), None).await.is_err(),
            "a second alert for a change"
        );
        assert!(
            add("returned", true, Some(6), None).await.is_err(),
            "a returned alert still followed"
        );
        assert!(
            add("acknowledged", false, Some(7), None).await.is_err(),
            "acknowledged, but not when"
        );
    }

    /// State, ongoing, first and last seen, count, returned and acknowledged times.
    type Migrated = (String, bool, i64, i64, i64, Option<i64>, Option<i64>);

    #[tokio::test]
    async fn alerts_stored_before_the_lifecycle_keep_their_meaning() {
        use sqlx::sqlite::SqlitePoolOptions;
        let pool = SqlitePoolOptions::new()
            .max_connections(1)
            .connect("sqlite::memory:")
            .await
            .unwrap();
        for before in [
            include_str!("../../migrations/20261202000000_initial.sql"),
            include_str!("../../migrations/20261215000000_reports.sql"),
            include_str!("../../migrations/20261220000000_model_family.sql"),
        ] {
            sqlx::raw_sql(before).execute(&pool).await.unwrap();
        }
        sqlx::raw_sql(
            "INSERT INTO alerts (loop_tag, kind, state, first_seen_ms, last_seen_ms, count,
                                 message, evidence, acked_ms) VALUES
             ('TIC-1', 'tuning_limited', 'open', 100, 900, 3, 'm', '{}', NULL),
             ('TIC-1', 'stale_tag', 'acknowledged', 200, 300, 1, 'm', '{}', 5000),
             ('TIC-1', 'stale_tag', 'acknowledged', 400, 500, 2, 'm', '{}', 6000),
             ('TIC-1', 'stale_tag', 'open', 700, 800, 1, 'm', '{}', NULL)",
        )
        .execute(&pool)
        .await
        .unwrap();
        sqlx::raw_sql(include_str!(
            "../../migrations/20261228000000_alert_lifecycle.sql"
        ))
        .execute(&pool)
        .await
        .unwrap();
        let rows: Vec<Migrated> = sqlx::query_as(
            "SELECT state, ongoing, first_seen_ms, last_seen_ms, count, returned_ms, acked_ms
             FROM alerts ORDER BY id",
        )
        .fetch_all(&pool)
        .await
        .unwrap();
        assert_eq!(
            rows,
            [
                ("active".into(), true, 100, 900, 3, None, None),
                ("acknowledged".into(), false, 200, 300, 1, None, Some(5000)),
                ("acknowledged".into(), false, 400, 500, 2, None, Some(6000)),
                ("active".into(), true, 700, 800, 1, None, None),
            ]
        );
    }
}
