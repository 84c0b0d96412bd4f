-- Rows written once (SQLite). A version names the event that approved it, so that the
-- publisher can check the version's fields against the hash that event recorded; and the
-- tables whose rows must never change after they are written refuse UPDATE and DELETE, as
-- the event record does.

ALTER TABLE versions ADD COLUMN approval_seq INTEGER NOT NULL DEFAULT 0;
UPDATE versions SET approval_seq = COALESCE((
    SELECT e.seq FROM events e
    WHERE e.action = 'version.approved'
      AND e.subject = 'metric:' || (SELECT m.key FROM metrics m WHERE m.id = versions.metric_id)
      AND json_extract(e.payload, '$.version') = versions.number
), 0);

CREATE TRIGGER revisions_no_update BEFORE UPDATE ON revisions
BEGIN SELECT RAISE(ABORT, 'revisions are written once and never changed'); END;
CREATE TRIGGER revisions_no_delete BEFORE DELETE ON revisions
BEGIN SELECT RAISE(ABORT, 'revisions are written once and never changed'); END;
CREATE TRIGGER reviews_no_update BEFORE UPDATE ON reviews
BEGIN SELECT RAISE(ABORT, 'reviews are written once and never changed'); END;
CREATE TRIGGER reviews_no_delete BEFORE DELETE ON reviews
BEGIN SELECT RAISE(ABORT, 'reviews are written once and never changed'); END;
CREATE TRIGGER signoffs_no_update BEFORE UPDATE ON signoffs
BEGIN SELECT RAISE(ABORT, 'sign-offs are written once and never changed'); END;
CREATE TRIGGER signoffs_no_delete BEFORE DELETE ON signoffs
BEGIN SELECT RAISE(ABORT, 'sign-offs are written once and never changed'); END;
CREATE TRIGGER comments_no_update BEFORE UPDATE ON comments
BEGIN SELECT RAISE(ABORT, 'comments are written once and never changed'); END;
CREATE TRIGGER comments_no_delete BEFORE DELETE ON comments
BEGIN SELECT RAISE(ABORT, 'comments are written once and never changed'); END;
CREATE TRIGGER versions_no_update BEFORE UPDATE ON versions
BEGIN SELECT RAISE(ABORT, 'versions are written once and never changed'); END;
CREATE TRIGGER versions_no_delete BEFORE DELETE ON versions
BEGIN SELECT RAISE(ABORT, 'versions are written once and never changed'); END;
