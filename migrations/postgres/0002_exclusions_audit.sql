-- 0002_exclusions_audit (PostgreSQL): the audit trail of exclusions, restorations and erasures.
-- Same meaning as migrations/0002_exclusions_audit.sql:
--   exclude  a response was left out of comparisons (response_id and reason set);
--   restore  an excluded response was taken back in (reason = the reason it had been excluded for);
--   erase    every response of one respondent was deleted: ONLY the number deleted and the time are kept.
-- An erasure redacts earlier exclude/restore rows of the erased responses (response_id NULL, redacted true).
-- Written in the same transaction as the change itself. Append-only: never edit this file once applied.

CREATE TABLE audit_log (
  id            bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id bigint  NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  action        text    NOT NULL CHECK (action IN ('exclude', 'restore', 'erase')),
  response_id   text,
  reason        text,
  count         bigint  NOT NULL CHECK (count >= 0),
  api_key_id    bigint  REFERENCES api_keys (id) ON DELETE SET NULL,
  at            text    NOT NULL,
  data_version  bigint  NOT NULL CHECK (data_version >= 0),
  redacted      boolean NOT NULL DEFAULT false,
  CHECK (action = 'erase' OR response_id IS NOT NULL OR redacted)
);

CREATE INDEX audit_log_by_experiment ON audit_log (experiment_id, id);
CREATE INDEX audit_log_by_response ON audit_log (experiment_id, response_id) WHERE response_id IS NOT NULL;
