-- The alert lifecycle: one alert per setpoint change (a provisional alert is updated in place
-- when the change is final) or per spell of a loop-wide condition (a stale tag's outage), and
-- the states active → returned (the condition has gone) → acknowledged (by whom, when).
--
-- SQLite cannot change a CHECK constraint in place, so the table is rebuilt. Existing rows keep
-- their meaning:
-- - `open` becomes `active`, still followed (`ongoing` = 1): a new sighting of its loop and
--   kind updates it, as before.
-- - `acknowledged` stays, no longer followed (`ongoing` = 0): before this version the next
--   sighting after an acknowledgement opened a new alert. When its condition ended was never
--   recorded, so `returned_ms` stays NULL; who acknowledged it was never recorded either.
-- - `raised_ms` is the old `first_seen_ms`, which was the first sighting; no old row is about
--   one change (`change_start_ms` NULL): they folded every change of a kind together.
CREATE TABLE alerts_lifecycle (
    id              INTEGER PRIMARY KEY,
    loop_tag        TEXT    NOT NULL,
    kind            TEXT    NOT NULL,
    state           TEXT    NOT NULL CHECK (state IN ('active', 'returned', 'acknowledged')),
    -- 1 while the condition is present as far as headroom knows: sightings update this alert,
    -- and its end is recorded when it goes. An acknowledged alert can still be ongoing.
    ongoing         INTEGER NOT NULL CHECK (ongoing IN (0, 1)),
    -- The setpoint change the alert is about (its start on the data's time axis); NULL for a
    -- condition of the loop as a whole, such as a stale tag.
    change_start_ms INTEGER,
    -- The span of the condition: a change's start to its latest window end; an outage from the
    -- newest sample before the silence to the first sample after it.
    first_seen_ms   INTEGER NOT NULL,
    last_seen_ms    INTEGER NOT NULL CHECK (last_seen_ms >= first_seen_ms),
    -- When the daemon raised it, on the data's clock (after the stale limit, for an outage).
    raised_ms       INTEGER NOT NULL,
    -- When the condition went (NULL while ongoing, or never recorded).
    returned_ms     INTEGER,
    count           INTEGER NOT NULL CHECK (count >= 1),
    message         TEXT    NOT NULL,
    evidence        TEXT    NOT NULL,    -- JSON
    acked_ms        INTEGER,             -- wall clock; NULL until acknowledged
    acked_by        TEXT,                -- NULL until acknowledged, and for old rows
    CHECK ((state = 'acknowledged') = (acked_ms IS NOT NULL)),
    CHECK (state <> 'returned' OR ongoing = 0)
);

INSERT INTO alerts_lifecycle (id, loop_tag, kind, state, ongoing, change_start_ms,
                              first_seen_ms, last_seen_ms, raised_ms, returned_ms, count,
                              message, evidence, acked_ms, acked_by)
SELECT id, loop_tag, kind,
       CASE state WHEN 'open' THEN 'active' ELSE state END,
       CASE state WHEN 'open' THEN 1 ELSE 0 END,
       NULL, first_seen_ms, MAX(first_seen_ms, last_seen_ms), first_seen_ms, NULL, count,
       message, evidence,
       -- Every acknowledgement recorded its time; the last sighting stands in should one not.
       CASE state WHEN 'acknowledged' THEN COALESCE(acked_ms, last_seen_ms) END, NULL
FROM alerts;

DROP TABLE alerts;
ALTER TABLE alerts_lifecycle RENAME TO alerts;

-- One alert per setpoint change.
CREATE UNIQUE INDEX alerts_one_per_change ON alerts (loop_tag, change_start_ms)
    WHERE change_start_ms IS NOT NULL;
-- At most one followed alert per loop and kind for a loop-wide condition.
CREATE UNIQUE INDEX alerts_one_ongoing ON alerts (loop_tag, kind)
    WHERE change_start_ms IS NULL AND ongoing = 1;
