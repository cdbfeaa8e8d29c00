-- 0001_init (PostgreSQL): experiments, their conditions and measures, responses with one row per answered value,
-- the per-value counts that comparisons read for integer measures, rejected-value counters and API keys.
-- Same numbering and meaning as migrations/0001_init.sql (the SQLite schema); types are PostgreSQL's own.
--
-- Conventions: bigint identity keys inside, slugs outside. Times are ISO 8601 UTC strings with milliseconds
-- written by the application (text, as in the SQLite schema, so both engines return them byte for byte).
-- Flags that take part in sums and keys (excluded) are smallint 0/1; other flags are boolean.
-- Append-only: never edit this file once a database has applied it; add 0005_... instead.

CREATE TABLE experiments (
  id                    bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  slug                  text    NOT NULL UNIQUE CHECK (length(slug) BETWEEN 1 AND 64),
  title                 text    NOT NULL,
  status                text    NOT NULL DEFAULT 'open' CHECK (status IN ('open', 'closed')),
  planned_per_condition bigint  CHECK (planned_per_condition IS NULL OR planned_per_condition > 0),
  alpha                 double precision NOT NULL CHECK (alpha > 0 AND alpha < 1),
  thank_you_url         text,
  -- Options that later features add to a definition (flagThresholds, monitoring, allocation, ...).
  options               jsonb   NOT NULL DEFAULT '{}'::jsonb,
  -- Moves forward by one with every committed change to the data (accepted responses, exclusions, erasures).
  data_version          bigint  NOT NULL DEFAULT 0 CHECK (data_version >= 0),
  created_at            text    NOT NULL,
  updated_at            text    NOT NULL
);

CREATE TABLE conditions (
  id             bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id  bigint  NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  slug           text    NOT NULL CHECK (length(slug) BETWEEN 1 AND 64),
  label          text    NOT NULL,
  position       integer NOT NULL CHECK (position >= 0),
  -- Maintained inside the ingest, exclusion and erasure transactions.
  response_count bigint  NOT NULL DEFAULT 0 CHECK (response_count >= 0),
  excluded_count bigint  NOT NULL DEFAULT 0 CHECK (excluded_count >= 0),
  UNIQUE (experiment_id, slug),
  UNIQUE (experiment_id, position)
);

CREATE TABLE measures (
  id            bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id bigint  NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  slug          text    NOT NULL CHECK (length(slug) BETWEEN 1 AND 64),
  label         text    NOT NULL,
  min           double precision NOT NULL,
  max           double precision NOT NULL,
  is_integer    boolean NOT NULL,
  required      boolean NOT NULL,
  position      integer NOT NULL CHECK (position >= 0),
  CHECK (min < max),
  UNIQUE (experiment_id, slug),
  UNIQUE (experiment_id, position)
);

CREATE TABLE api_keys (
  id            bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  -- SHA-256 of the secret; the secret itself is never stored.
  hash          bytea   NOT NULL UNIQUE CHECK (octet_length(hash) = 32),
  scope         text    NOT NULL CHECK (scope IN ('admin', 'ingest', 'read')),
  experiment_id bigint  REFERENCES experiments (id) ON DELETE CASCADE,
  label         text    NOT NULL DEFAULT '',
  origin        text    NOT NULL CHECK (origin IN ('cli', 'bootstrap', 'environment')),
  created_at    text    NOT NULL,
  revoked_at    text,
  last_used_at  text
);

CREATE TABLE responses (
  id              bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id   bigint   NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  -- The client's responseId, or one generated at ingest.
  response_id     text     NOT NULL,
  condition_id    bigint   NOT NULL REFERENCES conditions (id),
  respondent      text,
  submitted_at    text     NOT NULL,
  received_at     text     NOT NULL,
  excluded        smallint NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
  excluded_reason text,
  -- SHA-256 of the canonical content: same responseId and same hash = the same response; another hash = a conflict.
  content_hash    bytea    NOT NULL CHECK (octet_length(content_hash) = 32),
  api_key_id      bigint   REFERENCES api_keys (id) ON DELETE SET NULL,
  UNIQUE (experiment_id, response_id)
);

CREATE INDEX responses_by_respondent ON responses (experiment_id, respondent) WHERE respondent IS NOT NULL;
-- Per-experiment storage order: export paging and the last response id a sorted-values cache has seen.
CREATE INDEX responses_by_experiment ON responses (experiment_id, id);

-- One row per answered value; condition_id and excluded are copied from the response so that one measure of one
-- condition can be read in value order straight from the index below.
CREATE TABLE response_values (
  response_id  bigint   NOT NULL REFERENCES responses (id) ON DELETE CASCADE,
  measure_id   bigint   NOT NULL REFERENCES measures (id),
  condition_id bigint   NOT NULL REFERENCES conditions (id),
  excluded     smallint NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
  value        double precision NOT NULL,
  PRIMARY KEY (response_id, measure_id)
);

CREATE INDEX response_values_scan ON response_values (measure_id, condition_id, excluded, value);

-- Per-value counts of integer measures, maintained by INSERT … ON CONFLICT inside the writing transactions.
CREATE TABLE value_counts (
  measure_id   bigint   NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_id bigint   NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  excluded     smallint NOT NULL CHECK (excluded IN (0, 1)),
  value        double precision NOT NULL,
  count        bigint   NOT NULL CHECK (count >= 0),
  PRIMARY KEY (measure_id, condition_id, excluded, value)
);

-- Values refused at ingest, per known measure and reason.
CREATE TABLE rejected_value_counts (
  experiment_id bigint NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id    bigint NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  reason        text   NOT NULL CHECK (reason IN ('out_of_range', 'not_integer', 'not_a_number', 'not_finite', 'too_many_digits')),
  count         bigint NOT NULL CHECK (count >= 0),
  PRIMARY KEY (experiment_id, measure_id, reason)
);
