-- Histories (SQLite). A metric's observations belong to one of its histories; exactly one is
-- live at a time. An upload builds a new history beside the live one, in short transactions,
-- and then makes it live with one small update, so that however large the upload is, other
-- writers wait at most for one of those short transactions. Retired histories, and histories
-- whose upload died half way, are deleted a short transaction at a time.

CREATE TABLE histories (
    id INTEGER PRIMARY KEY,
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    state TEXT NOT NULL CHECK (state IN ('building', 'live', 'retired')),
    -- Observations in the history (kept when it becomes live).
    rows INTEGER NOT NULL DEFAULT 0,
    -- While building: the last time the upload wrote to it; an older one was abandoned.
    touched_at TEXT NOT NULL
);
CREATE UNIQUE INDEX histories_live ON histories(metric_id) WHERE state = 'live';
CREATE INDEX histories_state ON histories(state, touched_at);

INSERT INTO histories (metric_id, state, rows, touched_at)
SELECT metric_id, 'live', COUNT(*), '1970-01-01T00:00:00.000000Z'
FROM observations GROUP BY metric_id;

ALTER TABLE observations RENAME TO observations_by_metric;

CREATE TABLE observations (
    history_id INTEGER NOT NULL REFERENCES histories(id),
    period_start TEXT NOT NULL,
    value REAL NOT NULL,
    PRIMARY KEY (history_id, period_start)
) WITHOUT ROWID;

INSERT INTO observations (history_id, period_start, value)
SELECT h.id, o.period_start, o.value
FROM observations_by_metric o JOIN histories h ON h.metric_id = o.metric_id AND h.state = 'live';

DROP TABLE observations_by_metric;
DROP TABLE observation_staging;
