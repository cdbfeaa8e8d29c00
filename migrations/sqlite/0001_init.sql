-- 0001_init: experiments, their conditions and measures, responses with one row per answered value,
-- the per-value counts that comparisons read for integer measures, rejected-value counters and API keys.
--
-- Conventions: integer surrogate keys inside (id INTEGER PRIMARY KEY), slugs outside (experiments.slug,
-- conditions.slug, measures.slug, responses.response_id). Times are ISO 8601 UTC strings with milliseconds
-- written by the application. STRICT tables, so a wrong type is an error, not a silent conversion.
-- Append-only: never edit this file once a database has applied it; add 0002_... instead.

CREATE TABLE experiments (
  id                    INTEGER PRIMARY KEY,
  slug                  TEXT    NOT NULL UNIQUE CHECK (length(slug) BETWEEN 1 AND 64),
  title                 TEXT    NOT NULL,
  status                TEXT    NOT NULL DEFAULT 'open' CHECK (status IN ('open', 'closed')),
  planned_per_condition INTEGER CHECK (planned_per_condition IS NULL OR planned_per_condition > 0),
  alpha                 REAL    NOT NULL CHECK (alpha > 0 AND alpha < 1),
  thank_you_url         TEXT,
  -- Options that later features add to a definition (flagThresholds, monitoring, allocation, ...), as JSON.
  options               TEXT    NOT NULL DEFAULT '{}' CHECK (json_valid(options)),
  -- Moves forward with every committed change to the data (accepted responses, exclusions, erasures).
  data_version          INTEGER NOT NULL DEFAULT 0 CHECK (data_version >= 0),
  created_at            TEXT    NOT NULL,
  updated_at            TEXT    NOT NULL
) STRICT;

CREATE TABLE conditions (
  id            INTEGER PRIMARY KEY,
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  slug          TEXT    NOT NULL CHECK (length(slug) BETWEEN 1 AND 64),
  label         TEXT    NOT NULL,
  position      INTEGER NOT NULL CHECK (position >= 0),
  -- Maintained inside the ingest (and later exclusion/erasure) transactions: stored responses, and how many
  -- of them are excluded. A reader never counts rows to answer "how many per condition".
  response_count INTEGER NOT NULL DEFAULT 0 CHECK (response_count >= 0),
  excluded_count INTEGER NOT NULL DEFAULT 0 CHECK (excluded_count >= 0),
  UNIQUE (experiment_id, slug),
  UNIQUE (experiment_id, position)
) STRICT;

CREATE TABLE measures (
  id            INTEGER PRIMARY KEY,
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  slug          TEXT    NOT NULL CHECK (length(slug) BETWEEN 1 AND 64),
  label         TEXT    NOT NULL,
  min           REAL    NOT NULL,
  max           REAL    NOT NULL,
  is_integer    INTEGER NOT NULL CHECK (is_integer IN (0, 1)),
  required      INTEGER NOT NULL CHECK (required IN (0, 1)),
  position      INTEGER NOT NULL CHECK (position >= 0),
  CHECK (min < max),
  UNIQUE (experiment_id, slug),
  UNIQUE (experiment_id, position)
) STRICT;

CREATE TABLE api_keys (
  id            INTEGER PRIMARY KEY,
  -- SHA-256 of the secret; the secret itself is never stored.
  hash          BLOB    NOT NULL UNIQUE CHECK (length(hash) = 32),
  scope         TEXT    NOT NULL CHECK (scope IN ('admin', 'ingest', 'read')),
  experiment_id INTEGER REFERENCES experiments (id) ON DELETE CASCADE,
  label         TEXT    NOT NULL DEFAULT '',
  -- cli: `splitballot keys create`; bootstrap: printed once at the first start; environment: SPLITBALLOT_ADMIN_KEY.
  origin        TEXT    NOT NULL CHECK (origin IN ('cli', 'bootstrap', 'environment')),
  created_at    TEXT    NOT NULL,
  revoked_at    TEXT,
  last_used_at  TEXT
) STRICT;

CREATE TABLE responses (
  id              INTEGER PRIMARY KEY,
  experiment_id   INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  -- The client's responseId, or one generated at ingest.
  response_id     TEXT    NOT NULL,
  condition_id    INTEGER NOT NULL REFERENCES conditions (id),
  respondent      TEXT,
  submitted_at    TEXT    NOT NULL,
  received_at     TEXT    NOT NULL,
  excluded        INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
  excluded_reason TEXT,
  -- SHA-256 of the canonical content (condition, respondent, values): a retry with the same responseId and the
  -- same hash is the same response; a different hash is a conflict.
  content_hash    BLOB    NOT NULL CHECK (length(content_hash) = 32),
  api_key_id      INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
  UNIQUE (experiment_id, response_id)
) STRICT;

CREATE INDEX responses_by_respondent ON responses (experiment_id, respondent) WHERE respondent IS NOT NULL;

-- One row per answered value. condition_id and excluded are copied from the response so that one measure of
-- one condition can be scanned in value order straight from the index below.
CREATE TABLE response_values (
  response_id  INTEGER NOT NULL REFERENCES responses (id) ON DELETE CASCADE,
  measure_id   INTEGER NOT NULL REFERENCES measures (id),
  condition_id INTEGER NOT NULL REFERENCES conditions (id),
  excluded     INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
  value        REAL    NOT NULL,
  PRIMARY KEY (response_id, measure_id)
) STRICT, WITHOUT ROWID;

CREATE INDEX response_values_scan ON response_values (measure_id, condition_id, excluded, value);

-- Per-value counts of integer measures, maintained inside the ingest transaction (and later exclusion/erasure
-- transactions), so that comparisons of bounded integer items never read raw rows.
CREATE TABLE value_counts (
  measure_id   INTEGER NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_id INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  excluded     INTEGER NOT NULL CHECK (excluded IN (0, 1)),
  value        REAL    NOT NULL,
  count        INTEGER NOT NULL CHECK (count >= 0),
  PRIMARY KEY (measure_id, condition_id, excluded, value)
) STRICT, WITHOUT ROWID;

-- Values refused at ingest, per known measure and reason (an unknown measure id is not counted).
CREATE TABLE rejected_value_counts (
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id    INTEGER NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  reason        TEXT    NOT NULL CHECK (reason IN ('out_of_range', 'not_integer', 'not_a_number', 'not_finite', 'too_many_digits')),
  count         INTEGER NOT NULL CHECK (count >= 0),
  PRIMARY KEY (experiment_id, measure_id, reason)
) STRICT, WITHOUT ROWID;
