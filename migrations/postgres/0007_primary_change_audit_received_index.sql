-- 0007_primary_change_audit_received_index (PostgreSQL): the primary outcome's changes in the audit trail; an index
-- for counts by arrival time. Same meaning as migrations/sqlite/0007_primary_change_audit_received_index.sql:
--
--  audit_log.action 'primary-change'  the primary outcome was changed after answers existed (dataVersion above 0),
--                                     written in the same transaction as the definition update; from_measure /
--                                     to_measure hold the measure ids before and after (NULL: none); response_id is
--                                     NULL; count is the number of stored responses at the time; data_version the
--                                     experiment's dataVersion at the time.
--  audit_log.from_measure, .to_measure  NULL for every other action.
--  responses_by_received_at           (experiment_id, received_at COLLATE "C"): the counts of responses received
--                                     since a time (team overview) and the clean-up's time window compare received_at
--                                     under COLLATE "C" (ISO 8601 times sort bytewise), and an index serves such a
--                                     comparison only when it is built with the same collation.
--
-- PostgreSQL changes the CHECK constraints in place (their generated names: audit_log_action_check for the column's,
-- audit_log_check for the table's); the two columns are added at the end, as in the rebuilt SQLite table, so that
-- both tables keep the same columns in the same order (`splitballot copy-to-postgres` relies on it).
-- Append-only: never edit this file once a database has applied it.

ALTER TABLE audit_log DROP CONSTRAINT audit_log_action_check;
ALTER TABLE audit_log DROP CONSTRAINT audit_log_check;
ALTER TABLE audit_log ADD COLUMN from_measure text;
ALTER TABLE audit_log ADD COLUMN to_measure text;
ALTER TABLE audit_log ADD CONSTRAINT audit_log_action_check CHECK (action IN ('exclude', 'restore', 'erase', 'primary-change'));
ALTER TABLE audit_log ADD CONSTRAINT audit_log_check CHECK (action IN ('erase', 'primary-change') OR response_id IS NOT NULL OR redacted);
ALTER TABLE audit_log ADD CONSTRAINT audit_log_measures_check CHECK (action = 'primary-change' OR (from_measure IS NULL AND to_measure IS NULL));
ALTER TABLE audit_log ADD CONSTRAINT audit_log_primary_change_check
  CHECK (action <> 'primary-change' OR (response_id IS NULL AND from_measure IS DISTINCT FROM to_measure));

CREATE INDEX responses_by_received_at ON responses (experiment_id, received_at COLLATE "C");
