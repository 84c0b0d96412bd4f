-- cutpoints foundation schema (SQLite). Times are fixed-width RFC 3339 UTC text
-- (YYYY-MM-DDTHH:MM:SS.ffffffZ), so text order is time order. Booleans are INTEGER 0/1.

CREATE TABLE users (
    id INTEGER PRIMARY KEY,
    username TEXT NOT NULL UNIQUE,
    display_name TEXT NOT NULL,
    roles TEXT NOT NULL,
    password_hash TEXT NOT NULL,
    active INTEGER NOT NULL DEFAULT 1,
    created_at TEXT NOT NULL,
    updated_at TEXT NOT NULL
);

CREATE TABLE sessions (
    id_hash TEXT PRIMARY KEY,
    user_id INTEGER NOT NULL REFERENCES users(id),
    csrf_token TEXT NOT NULL,
    created_at TEXT NOT NULL,
    last_seen_at TEXT NOT NULL,
    expires_at TEXT NOT NULL
);
CREATE INDEX sessions_user ON sessions(user_id);

CREATE TABLE api_tokens (
    id INTEGER PRIMARY KEY,
    user_id INTEGER NOT NULL REFERENCES users(id),
    token_hash TEXT NOT NULL UNIQUE,
    prefix TEXT NOT NULL,
    scope TEXT NOT NULL CHECK (scope IN ('read', 'write')),
    label TEXT NOT NULL,
    created_at TEXT NOT NULL,
    expires_at TEXT,
    revoked_at TEXT,
    last_used_at TEXT
);

CREATE TABLE signin_throttle (
    scope TEXT NOT NULL CHECK (scope IN ('account', 'address')),
    subject TEXT NOT NULL,
    window_start TEXT NOT NULL,
    failures INTEGER NOT NULL,
    locked_until TEXT,
    refused INTEGER NOT NULL DEFAULT 0,
    PRIMARY KEY (scope, subject)
);

CREATE TABLE metrics (
    id INTEGER PRIMARY KEY,
    key TEXT NOT NULL UNIQUE,
    name TEXT NOT NULL,
    description TEXT NOT NULL,
    unit TEXT NOT NULL,
    data_source TEXT NOT NULL,
    review_cadence_months INTEGER,
    created_at TEXT NOT NULL,
    updated_at TEXT NOT NULL
);

CREATE TABLE metric_owners (
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    user_id INTEGER NOT NULL REFERENCES users(id),
    position INTEGER NOT NULL,
    PRIMARY KEY (metric_id, user_id)
);
CREATE INDEX metric_owners_user ON metric_owners(user_id);

CREATE TABLE metric_tags (
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    tag TEXT NOT NULL,
    position INTEGER NOT NULL,
    PRIMARY KEY (metric_id, tag)
);
CREATE INDEX metric_tags_tag ON metric_tags(tag);

-- The event record. Rows are only ever inserted; triggers refuse UPDATE and DELETE.
CREATE TABLE events (
    seq INTEGER PRIMARY KEY,
    at TEXT NOT NULL,
    actor TEXT NOT NULL,
    action TEXT NOT NULL,
    subject TEXT NOT NULL,
    payload TEXT NOT NULL,
    prev_hash TEXT NOT NULL,
    hash TEXT NOT NULL
);
CREATE INDEX events_subject ON events(subject, seq);

CREATE TRIGGER events_no_update BEFORE UPDATE ON events
BEGIN
    SELECT RAISE(ABORT, 'the event record is append-only');
END;

CREATE TRIGGER events_no_delete BEFORE DELETE ON events
BEGIN
    SELECT RAISE(ABORT, 'the event record is append-only');
END;

-- The head of the chain: the last event's seq and hash. Every write transaction locks this
-- one row first, which serialises writers.
CREATE TABLE chain_head (
    id INTEGER PRIMARY KEY CHECK (id = 1),
    seq INTEGER NOT NULL,
    hash TEXT NOT NULL,
    at TEXT NOT NULL
);
INSERT INTO chain_head (id, seq, hash, at)
VALUES (1, 0, '0000000000000000000000000000000000000000000000000000000000000000',
        '1970-01-01T00:00:00.000000Z');
