-- headroom's store: the samples of every watched signal, the scored setpoint changes, the
-- identified models, alerts, counters of rejected input and recorded holes in the data.
--
-- All times are milliseconds since the Unix epoch (UTC) on the data's own time axis, except
-- `updated_ms` and `acked_ms`, which are when headroom wrote or a person acknowledged a row.
-- Never edit this file once released: sqlx checks each applied migration's checksum at start-up.

-- One row per (loop, signal). Samples refer to it by a small integer so that the big table
-- does not repeat the tag text on every row.
CREATE TABLE series (
    id       INTEGER PRIMARY KEY,
    loop_tag TEXT    NOT NULL,
    signal   TEXT    NOT NULL,   -- 'sp', 'pv', 'op' or 'mode'
    UNIQUE (loop_tag, signal)
);

-- The measured values. The key (series, time) makes inserts idempotent: a redelivered message
-- is ignored by INSERT OR IGNORE. WITHOUT ROWID stores each row once, in key order, so a time
-- range of one series is one contiguous read.
-- `series_id` deliberately has no REFERENCES clause: the foreign-key check on every inserted
-- row halved the insert rate (measured). The store only ever writes ids of committed `series`
-- rows, and its integrity check looks for samples of unknown series instead.
CREATE TABLE samples (
    series_id INTEGER NOT NULL,
    ts_ms     INTEGER NOT NULL,
    value     REAL    NOT NULL,
    PRIMARY KEY (series_id, ts_ms)
) WITHOUT ROWID;

-- One row per setpoint change. The live tracker writes a provisional row while the response
-- is still running and overwrites it with the final one; `detail` is the complete episode
-- result as JSON (the same object `analyze --json` prints), the other columns are the parts
-- that queries filter or sort on.
CREATE TABLE episodes (
    loop_tag            TEXT    NOT NULL,
    start_ms            INTEGER NOT NULL,
    end_ms              INTEGER NOT NULL,
    final               INTEGER NOT NULL CHECK (final IN (0, 1)),
    verdict             TEXT    NOT NULL,
    settling_time_s     REAL,            -- NULL: never settled
    overshoot_pct       REAL    NOT NULL,
    min_settling_time_s REAL,            -- NULL: no model, or the setpoint is unreachable
    detail              TEXT    NOT NULL,
    updated_ms          INTEGER NOT NULL,
    PRIMARY KEY (loop_tag, start_ms)
);

CREATE INDEX episodes_by_start ON episodes (start_ms);

-- Every identification of a loop's process model, oldest first; the latest one per loop is
-- the one in use. `identified_ms` is the data time of the newest sample the fit used.
CREATE TABLE models (
    id              INTEGER PRIMARY KEY,
    loop_tag        TEXT    NOT NULL,
    identified_ms   INTEGER NOT NULL,
    gain            REAL    NOT NULL,
    time_constant_s REAL    NOT NULL,
    dead_time_s     REAL    NOT NULL,
    fit_r2          REAL    NOT NULL,
    episodes_used   INTEGER NOT NULL,
    points_used     INTEGER NOT NULL
);

CREATE INDEX models_by_loop ON models (loop_tag, identified_ms);

-- Alerts. A repeat of an open alert bumps its count instead of adding a row; once a person
-- acknowledges it, the next occurrence opens a new one.
CREATE TABLE alerts (
    id            INTEGER PRIMARY KEY,
    loop_tag      TEXT    NOT NULL,
    kind          TEXT    NOT NULL,
    state         TEXT    NOT NULL CHECK (state IN ('open', 'acknowledged')),
    first_seen_ms INTEGER NOT NULL,
    last_seen_ms  INTEGER NOT NULL,
    count         INTEGER NOT NULL CHECK (count >= 1),
    message       TEXT    NOT NULL,
    evidence      TEXT    NOT NULL,    -- JSON
    acked_ms      INTEGER              -- NULL while open
);

-- At most one open alert per loop and kind.
CREATE UNIQUE INDEX alerts_one_open ON alerts (loop_tag, kind) WHERE state = 'open';

-- How much input was turned away, why, and from where (an MQTT topic or a Modbus device).
CREATE TABLE rejections (
    reason        TEXT    NOT NULL,
    source        TEXT    NOT NULL,
    count         INTEGER NOT NULL CHECK (count >= 0),
    first_seen_ms INTEGER NOT NULL,
    last_seen_ms  INTEGER NOT NULL,
    PRIMARY KEY (reason, source)
) WITHOUT ROWID;

-- Holes in a signal's data: no sample from `from_ms` until `to_ms`.
CREATE TABLE gaps (
    loop_tag TEXT    NOT NULL,
    signal   TEXT    NOT NULL,
    from_ms  INTEGER NOT NULL,
    to_ms    INTEGER NOT NULL CHECK (to_ms >= from_ms),
    PRIMARY KEY (loop_tag, signal, from_ms)
) WITHOUT ROWID;
