-- Publication (PostgreSQL): each version keeps the metric's name as it was at approval, so the
-- published set changes only when its versions do; and the registry of signing keys (public
-- halves only; private keys live in files named by configuration).

ALTER TABLE versions ADD COLUMN metric_name TEXT NOT NULL DEFAULT '';
UPDATE versions SET metric_name = (SELECT name FROM metrics WHERE metrics.id = versions.metric_id);

CREATE TABLE signing_keys (
    key_id TEXT PRIMARY KEY,
    algorithm TEXT NOT NULL CHECK (algorithm = 'Ed25519'),
    public_key TEXT NOT NULL UNIQUE,
    created_at TEXT NOT NULL,
    retired_at TEXT
);
