-- 0002_exclusions_audit: the audit trail of exclusions, restorations and erasures.
--
-- One row per change an admin made to the stored responses outside ingest:
--   exclude  a response was left out of comparisons (response_id and reason set);
--   restore  an excluded response was taken back in (response_id set, reason = the reason it had been excluded for);
--   erase    every response of one respondent was deleted on a data-protection request: ONLY the number of
--            responses deleted and the time are kept (no respondent id, no response ids, no values).
-- When a respondent is erased, earlier exclude/restore rows of the erased responses lose their response_id
-- (set to NULL, redacted = 1), so that the audit trail cannot be used to find what was erased.
-- Written in the same transaction as the change itself; rows are never updated otherwise and never deleted.
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE audit_log (
  id            INTEGER PRIMARY KEY,
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  action        TEXT    NOT NULL CHECK (action IN ('exclude', 'restore', 'erase')),
  -- The client's responseId for exclude/restore; NULL for erase and after redaction.
  response_id   TEXT,
  reason        TEXT,
  -- Responses affected: 1 for exclude/restore, the number erased for erase (0 when the respondent had none).
  count         INTEGER NOT NULL CHECK (count >= 0),
  -- The API key that made the change (who). Keys are revoked, never deleted.
  api_key_id    INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
  at            TEXT    NOT NULL,
  -- The experiment's dataVersion after the change (unchanged for an erase of 0 responses).
  data_version  INTEGER NOT NULL CHECK (data_version >= 0),
  redacted      INTEGER NOT NULL DEFAULT 0 CHECK (redacted IN (0, 1)),
  CHECK (action = 'erase' OR response_id IS NOT NULL OR redacted = 1)
) STRICT;

CREATE INDEX audit_log_by_experiment ON audit_log (experiment_id, id);
CREATE INDEX audit_log_by_response ON audit_log (experiment_id, response_id) WHERE response_id IS NOT NULL;
