-- Observations (PostgreSQL): each metric's history, one value per period start, as evidence
-- for agreeing its thresholds. Uploads are recorded in the event record (count and SHA-256).

CREATE TABLE observations (
    metric_id BIGINT NOT NULL REFERENCES metrics(id),
    period_start TEXT NOT NULL,
    value DOUBLE PRECISION NOT NULL,
    PRIMARY KEY (metric_id, period_start)
);
