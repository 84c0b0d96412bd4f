-- The agreement workflow (SQLite): proposals and their revisions, reviews, sign-offs,
-- comments, the approved versions of each metric, and the approval policy.

CREATE TABLE settings (
    name TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
INSERT INTO settings (name, value) VALUES ('reviewers_required', '1');

CREATE TABLE proposals (
    id INTEGER PRIMARY KEY,
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    state TEXT NOT NULL CHECK (state IN ('draft', 'in_review', 'approved', 'sent_back', 'rejected', 'withdrawn')),
    author_id INTEGER NOT NULL REFERENCES users(id),
    created_at TEXT NOT NULL,
    updated_at TEXT NOT NULL,
    -- The revision that was sent back: resubmitting needs a later one.
    sent_back_revision INTEGER,
    closed_at TEXT,
    close_reason TEXT NOT NULL DEFAULT '',
    version_number INTEGER
);
CREATE INDEX proposals_metric ON proposals(metric_id, id);
-- One open proposal per metric, enforced by the database as well as by the workflow.
CREATE UNIQUE INDEX proposals_one_open ON proposals(metric_id)
    WHERE state IN ('draft', 'in_review', 'sent_back');

CREATE TABLE revisions (
    id INTEGER PRIMARY KEY,
    proposal_id INTEGER NOT NULL REFERENCES proposals(id),
    number INTEGER NOT NULL,
    direction TEXT NOT NULL,
    cut_1 REAL NOT NULL,
    cut_2 REAL NOT NULL,
    cut_3 REAL NOT NULL,
    cut_4 REAL NOT NULL,
    shades INTEGER NOT NULL,
    unit TEXT NOT NULL,
    effective_from TEXT,
    rationale TEXT NOT NULL,
    canonical_text TEXT NOT NULL,
    content_hash TEXT NOT NULL,
    diff_from_previous TEXT NOT NULL,
    -- The latest approved version when this revision was saved, and the diff from it.
    base_version INTEGER,
    diff_from_base TEXT NOT NULL,
    note TEXT NOT NULL,
    author_id INTEGER NOT NULL REFERENCES users(id),
    created_at TEXT NOT NULL,
    UNIQUE (proposal_id, number)
);

CREATE TABLE reviews (
    id INTEGER PRIMARY KEY,
    proposal_id INTEGER NOT NULL REFERENCES proposals(id),
    revision_number INTEGER NOT NULL,
    revision_hash TEXT NOT NULL,
    reviewer_id INTEGER NOT NULL REFERENCES users(id),
    verdict TEXT NOT NULL CHECK (verdict IN ('approve', 'send_back')),
    comment TEXT NOT NULL,
    created_at TEXT NOT NULL
);
CREATE INDEX reviews_proposal ON reviews(proposal_id, id);

CREATE TABLE signoffs (
    id INTEGER PRIMARY KEY,
    proposal_id INTEGER NOT NULL REFERENCES proposals(id),
    revision_number INTEGER NOT NULL,
    revision_hash TEXT NOT NULL,
    signer_id INTEGER NOT NULL REFERENCES users(id),
    signer_name TEXT NOT NULL,
    meaning TEXT NOT NULL,
    created_at TEXT NOT NULL
);
CREATE INDEX signoffs_proposal ON signoffs(proposal_id, id);

CREATE TABLE comments (
    id INTEGER PRIMARY KEY,
    proposal_id INTEGER NOT NULL REFERENCES proposals(id),
    revision_number INTEGER NOT NULL,
    author_id INTEGER NOT NULL REFERENCES users(id),
    cut TEXT,
    body TEXT NOT NULL,
    created_at TEXT NOT NULL
);
CREATE INDEX comments_proposal ON comments(proposal_id, id);

CREATE TABLE versions (
    id INTEGER PRIMARY KEY,
    metric_id INTEGER NOT NULL REFERENCES metrics(id),
    number INTEGER NOT NULL,
    proposal_id INTEGER NOT NULL REFERENCES proposals(id),
    revision_number INTEGER NOT NULL,
    revision_hash TEXT NOT NULL,
    direction TEXT NOT NULL,
    cut_1 REAL NOT NULL,
    cut_2 REAL NOT NULL,
    cut_3 REAL NOT NULL,
    cut_4 REAL NOT NULL,
    shades INTEGER NOT NULL,
    unit TEXT NOT NULL,
    effective_from TEXT NOT NULL,
    approved_at TEXT NOT NULL,
    rationale TEXT NOT NULL,
    canonical_text TEXT NOT NULL,
    -- Display names frozen at approval: a JSON array, and the signatory's name or NULL.
    approvers TEXT NOT NULL,
    signatory TEXT,
    UNIQUE (metric_id, number)
);
CREATE INDEX versions_effective ON versions(metric_id, effective_from);
CREATE INDEX versions_published ON versions(approved_at, effective_from);
