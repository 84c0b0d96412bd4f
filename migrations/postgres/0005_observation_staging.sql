-- Rows of a history upload on their way in (postgres): written in short transactions outside the
-- event record's write lock, then moved into observations by one statement inside it, so a
-- long upload holds up other writers only for that move. An upload that dies half way
-- leaves rows here; the next upload removes those older than a day.

CREATE TABLE observation_staging (
    upload TEXT NOT NULL,
    period_start TEXT NOT NULL,
    value DOUBLE PRECISION NOT NULL,
    created_at TEXT NOT NULL,
    PRIMARY KEY (upload, period_start)
);
