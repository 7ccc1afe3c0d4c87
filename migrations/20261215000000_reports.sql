-- Weekly loop-health summaries that headroom generated, kept so that a team can look back at
-- what it decided from. One row per period and format; generating the same period again
-- replaces the row (the newer report saw at least as much data).
-- Times as in the first migration: `from_ms`/`to_ms` on the data's time axis, `generated_ms`
-- when headroom wrote the row.
CREATE TABLE reports (
    id           INTEGER PRIMARY KEY,
    label        TEXT    NOT NULL,   -- e.g. '2026-W48', or 'from … to …' for a free period
    from_ms      INTEGER NOT NULL,
    to_ms        INTEGER NOT NULL CHECK (to_ms > from_ms),
    format       TEXT    NOT NULL CHECK (format IN ('html', 'md', 'json')),
    generated_ms INTEGER NOT NULL,
    content      TEXT    NOT NULL,
    UNIQUE (from_ms, to_ms, format)
);
