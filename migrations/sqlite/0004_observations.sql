-- Observations (SQLite): each metric's history, one value per period start, as evidence for
-- agreeing its thresholds. Uploads are recorded in the event record (count and SHA-256).

CREATE TABLE observations (
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    period_start TEXT NOT NULL,
    value REAL NOT NULL,
    PRIMARY KEY (metric_id, period_start)
) WITHOUT ROWID;
