-- A PostgreSQL role for running `cutpoints serve`, with no power to change the event record.
--
-- Run migrations as the database owner (`cutpoints migrate --database-url postgres://owner@...`),
-- then run this as the owner, and serve as the app role:
--   cutpoints serve --skip-migrations --database-url postgres://cutpoints_app@host/cutpoints
-- The app role may read everything and write every table except the events table and the
-- tables whose rows are written once (revisions, reviews, sign-offs, comments, versions),
-- where it may only add rows: it cannot UPDATE, DELETE or TRUNCATE them, nor drop their
-- triggers (only the owner can). Rename cutpoints_app throughout to suit your naming.

CREATE ROLE cutpoints_app LOGIN;
GRANT USAGE ON SCHEMA public TO cutpoints_app;
GRANT SELECT, INSERT, UPDATE, DELETE ON ALL TABLES IN SCHEMA public TO cutpoints_app;
GRANT USAGE, SELECT ON ALL SEQUENCES IN SCHEMA public TO cutpoints_app;
REVOKE UPDATE, DELETE, TRUNCATE ON events, revisions, reviews, signoffs, comments, versions FROM cutpoints_app;
REVOKE INSERT, UPDATE, DELETE, TRUNCATE ON _sqlx_migrations FROM cutpoints_app;
