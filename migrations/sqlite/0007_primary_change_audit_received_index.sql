-- 0007_primary_change_audit_received_index: the primary outcome's changes in the audit trail; an index for counts by
-- arrival time.
--
--  audit_log.action 'primary-change'  the primary outcome was changed after answers existed (the experiment's
--                                     dataVersion was above 0). Written in the same transaction as the definition
--                                     update. from_measure / to_measure hold the measure ids before and after (NULL:
--                                     no primary outcome); response_id is NULL; count is the number of stored
--                                     responses (excluded ones included) at the time; data_version is the experiment's
--                                     dataVersion at the time (a definition change does not move it).
--  audit_log.from_measure, .to_measure  NULL for every other action.
--  responses_by_received_at           (experiment_id, received_at): "answers today / this week" on the team overview
--                                     (count of one experiment's responses received since a time) and the bulk
--                                     clean-up's time window read a range of this index instead of every response of
--                                     the experiment.
--
-- A CHECK constraint cannot change in place in SQLite, so audit_log is rebuilt: a new table with the new constraints,
-- every row copied with its id, the old table dropped, the new one renamed and both indexes made again under their
-- names. Nothing refers to audit_log (it refers to experiments and api_keys), so no other table changes; rows that
-- existed keep their ids, actions, redaction and key, and get NULL in the two new columns.
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE audit_log_0007 (
  id            INTEGER PRIMARY KEY,
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  action        TEXT    NOT NULL CHECK (action IN ('exclude', 'restore', 'erase', 'primary-change')),
  -- The client's responseId for exclude/restore; NULL for erase, primary-change and after redaction.
  response_id   TEXT,
  reason        TEXT,
  -- exclude/restore: 1; erase: the number erased (0 when the respondent had none); primary-change: the responses
  -- stored at the time.
  count         INTEGER NOT NULL CHECK (count >= 0),
  api_key_id    INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
  at            TEXT    NOT NULL,
  data_version  INTEGER NOT NULL CHECK (data_version >= 0),
  redacted      INTEGER NOT NULL DEFAULT 0 CHECK (redacted IN (0, 1)),
  -- primary-change only: the primary measure's id before and after (NULL: none).
  from_measure  TEXT,
  to_measure    TEXT,
  CHECK (action IN ('erase', 'primary-change') OR response_id IS NOT NULL OR redacted = 1),
  CHECK (action = 'primary-change' OR (from_measure IS NULL AND to_measure IS NULL)),
  CHECK (action <> 'primary-change' OR (response_id IS NULL AND from_measure IS NOT to_measure))
) STRICT;

INSERT INTO audit_log_0007 (id, experiment_id, action, response_id, reason, count, api_key_id, at, data_version, redacted)
  SELECT id, experiment_id, action, response_id, reason, count, api_key_id, at, data_version, redacted FROM audit_log ORDER BY id;

DROP TABLE audit_log;
ALTER TABLE audit_log_0007 RENAME TO audit_log;

CREATE INDEX audit_log_by_experiment ON audit_log (experiment_id, id);
CREATE INDEX audit_log_by_response ON audit_log (experiment_id, response_id) WHERE response_id IS NOT NULL;

CREATE INDEX responses_by_received_at ON responses (experiment_id, received_at);
