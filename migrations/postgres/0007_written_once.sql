-- Rows written once (PostgreSQL). A version names the event that approved it, so that the
-- publisher can check the version's fields against the hash that event recorded; and the
-- tables whose rows must never change after they are written refuse UPDATE, DELETE and
-- TRUNCATE, as the event record does.

ALTER TABLE versions ADD COLUMN approval_seq BIGINT NOT NULL DEFAULT 0;
UPDATE versions SET approval_seq = COALESCE((
    SELECT e.seq FROM events e
    WHERE e.action = 'version.approved'
      AND e.subject = 'metric:' || (SELECT m.key FROM metrics m WHERE m.id = versions.metric_id)
      AND (e.payload::jsonb ->> 'version')::bigint = versions.number
), 0);

CREATE FUNCTION rows_written_once() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION '% rows are written once and never changed', TG_TABLE_NAME;
END;
$$;

CREATE TRIGGER revisions_no_change BEFORE UPDATE OR DELETE ON revisions
FOR EACH ROW EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER revisions_no_truncate BEFORE TRUNCATE ON revisions
FOR EACH STATEMENT EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER reviews_no_change BEFORE UPDATE OR DELETE ON reviews
FOR EACH ROW EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER reviews_no_truncate BEFORE TRUNCATE ON reviews
FOR EACH STATEMENT EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER signoffs_no_change BEFORE UPDATE OR DELETE ON signoffs
FOR EACH ROW EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER signoffs_no_truncate BEFORE TRUNCATE ON signoffs
FOR EACH STATEMENT EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER comments_no_change BEFORE UPDATE OR DELETE ON comments
FOR EACH ROW EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER comments_no_truncate BEFORE TRUNCATE ON comments
FOR EACH STATEMENT EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER versions_no_change BEFORE UPDATE OR DELETE ON versions
FOR EACH ROW EXECUTE FUNCTION rows_written_once();
CREATE TRIGGER versions_no_truncate BEFORE TRUNCATE ON versions
FOR EACH STATEMENT EXECUTE FUNCTION rows_written_once();
