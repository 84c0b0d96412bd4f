-- Lookups whose cost does not grow with the record: events found by action, by actor and by
-- time use an index of their own (the audit filters, the exceptions, the chain's head at a
-- time), and the audit checkpoint keeps how far the chain has been verified, so that a check
-- reads only what came after it.

CREATE INDEX events_action ON events(action, seq);
CREATE INDEX events_actor ON events(actor, seq);
CREATE INDEX events_at ON events(at, seq);

-- The last event through which the chain was verified (seq 0: nothing yet). Advanced by every
-- successful check; never moved back.
CREATE TABLE audit_checkpoint (
    id INTEGER PRIMARY KEY CHECK (id = 1),
    seq BIGINT NOT NULL,
    hash TEXT NOT NULL,
    checked_at TEXT
);
INSERT INTO audit_checkpoint (id, seq, hash, checked_at)
VALUES (1, 0, '0000000000000000000000000000000000000000000000000000000000000000', NULL);

-- Full checks (the whole chain and a replay of every event against the audited tables), run
-- in the background: who asked, when, how far it got, and what it found (a JSON verification).
CREATE TABLE audit_full_checks (
    id BIGSERIAL PRIMARY KEY,
    requested_by TEXT NOT NULL,
    started_at TEXT NOT NULL,
    finished_at TEXT,
    events_total BIGINT NOT NULL,
    events_done BIGINT NOT NULL,
    result TEXT
);

-- The exceptions, found without reading the rest of the record: revisions that made earlier
-- approvals stale, and versions approved without a sign-off. The payload is canonical JSON
-- (no spaces, quotes inside strings escaped), so only a `revision.saved` event's key can read
-- `"made_stale":[{`, and only when its list is not empty.
CREATE INDEX events_made_stale ON events(seq) WHERE payload LIKE '%"made_stale":[{%';
CREATE INDEX versions_unsigned ON versions(metric_id, number) WHERE signatory IS NULL;
