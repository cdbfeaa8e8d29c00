-- 0003_looks_assignments: interim monitoring and balanced assignment.
--
--  interim_looks      one row per recorded group-sequential look (POST /v1/experiments/{id}/looks): the boundary is
--                     computed when the look is recorded, from the fractions of the earlier looks of the same
--                     sequence, and stored as it was; later looks never change it.
--  anytime_history    the always-valid p and confidence sequence of a comparison, recorded once per dataVersion,
--                     so that the running minimum of p and the running intersection of the intervals can be reported.
--  assignment_state   the current permuted block of each experiment (never exposed by the API).
--  assignments        one row per respondent: sticky assignment to a condition.
--
-- Pairs of conditions are stored in key order (condition_lo < condition_hi); values for a − b are stored for
-- lo − hi and flipped by the reader when the caller asks for hi − lo.
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE interim_looks (
  id                    INTEGER PRIMARY KEY,
  experiment_id         INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id            INTEGER NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_lo          INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  condition_hi          INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  -- 1, 2, … within (experiment, measure, pair)
  number                INTEGER NOT NULL CHECK (number >= 1),
  recorded_at           TEXT    NOT NULL,
  data_version          INTEGER NOT NULL CHECK (data_version >= 0),
  fraction              REAL    NOT NULL CHECK (fraction > 0 AND fraction <= 1),
  n_lo                  INTEGER NOT NULL CHECK (n_lo >= 0),
  n_hi                  INTEGER NOT NULL CHECK (n_hi >= 0),
  planned_per_condition INTEGER NOT NULL CHECK (planned_per_condition > 0),
  spending              TEXT    NOT NULL CHECK (spending IN ('obrien-fleming', 'pocock')),
  alpha                 REAL    NOT NULL CHECK (alpha > 0 AND alpha < 1),
  cumulative_alpha      REAL    NOT NULL,
  alpha_spent           REAL    NOT NULL,
  -- NULL: the look spends no alpha and cannot reject
  boundary_z            REAL,
  welch_t               REAL    NOT NULL,
  welch_df              REAL    NOT NULL,
  -- for condition_lo − condition_hi
  observed_z            REAL    NOT NULL,
  api_key_id            INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
  CHECK (condition_lo < condition_hi),
  UNIQUE (experiment_id, measure_id, condition_lo, condition_hi, number)
) STRICT;

CREATE TABLE anytime_history (
  experiment_id          INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id             INTEGER NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_lo           INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  condition_hi           INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  alpha                  REAL    NOT NULL,
  target_per_condition   REAL    NOT NULL,
  data_version           INTEGER NOT NULL,
  recorded_at            TEXT    NOT NULL,
  n_lo                   INTEGER NOT NULL,
  n_hi                   INTEGER NOT NULL,
  p                      REAL    NOT NULL,
  -- confidence sequence for condition_lo − condition_hi
  lower                  REAL    NOT NULL,
  upper                  REAL    NOT NULL,
  CHECK (condition_lo < condition_hi),
  PRIMARY KEY (experiment_id, measure_id, condition_lo, condition_hi, alpha, target_per_condition, data_version)
) STRICT, WITHOUT ROWID;

CREATE TABLE assignment_state (
  experiment_id INTEGER PRIMARY KEY REFERENCES experiments (id) ON DELETE CASCADE,
  -- blocks started so far (the current block's number)
  block_number  INTEGER NOT NULL CHECK (block_number >= 1),
  -- the template the block was drawn from (condition keys with repeats, sorted), as JSON: a changed allocation
  -- starts a new block
  template      TEXT    NOT NULL CHECK (json_valid(template)),
  -- the current block: condition keys in the drawn order, as JSON
  block         TEXT    NOT NULL CHECK (json_valid(block)),
  -- index of the next free slot in block
  position      INTEGER NOT NULL CHECK (position >= 0)
) STRICT;

CREATE TABLE assignments (
  id            INTEGER PRIMARY KEY,
  experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  respondent    TEXT    NOT NULL CHECK (length(respondent) BETWEEN 1 AND 256),
  condition_id  INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  block_number  INTEGER NOT NULL CHECK (block_number >= 1),
  assigned_at   TEXT    NOT NULL,
  api_key_id    INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
  UNIQUE (experiment_id, respondent)
) STRICT;
