-- 0003_looks_assignments (PostgreSQL): interim monitoring and balanced assignment.
-- Same meaning as migrations/0003_looks_assignments.sql. Pairs of conditions are stored in key order
-- (condition_lo < condition_hi); signed quantities are for lo − hi and flipped by the reader.
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE interim_looks (
  id                    bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id         bigint  NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id            bigint  NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_lo          bigint  NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  condition_hi          bigint  NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  number                integer NOT NULL CHECK (number >= 1),
  recorded_at           text    NOT NULL,
  data_version          bigint  NOT NULL CHECK (data_version >= 0),
  fraction              double precision NOT NULL CHECK (fraction > 0 AND fraction <= 1),
  n_lo                  bigint  NOT NULL CHECK (n_lo >= 0),
  n_hi                  bigint  NOT NULL CHECK (n_hi >= 0),
  planned_per_condition bigint  NOT NULL CHECK (planned_per_condition > 0),
  spending              text    NOT NULL CHECK (spending IN ('obrien-fleming', 'pocock')),
  alpha                 double precision NOT NULL CHECK (alpha > 0 AND alpha < 1),
  cumulative_alpha      double precision NOT NULL,
  alpha_spent           double precision NOT NULL,
  -- NULL: the look spends no alpha and cannot reject
  boundary_z            double precision,
  welch_t               double precision NOT NULL,
  welch_df              double precision NOT NULL,
  observed_z            double precision NOT NULL,
  api_key_id            bigint  REFERENCES api_keys (id) ON DELETE SET NULL,
  CHECK (condition_lo < condition_hi),
  UNIQUE (experiment_id, measure_id, condition_lo, condition_hi, number)
);

CREATE TABLE anytime_history (
  experiment_id        bigint NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  measure_id           bigint NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
  condition_lo         bigint NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  condition_hi         bigint NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  alpha                double precision NOT NULL,
  target_per_condition double precision NOT NULL,
  data_version         bigint NOT NULL,
  recorded_at          text   NOT NULL,
  n_lo                 bigint NOT NULL,
  n_hi                 bigint NOT NULL,
  p                    double precision NOT NULL,
  lower                double precision NOT NULL,
  upper                double precision NOT NULL,
  CHECK (condition_lo < condition_hi),
  PRIMARY KEY (experiment_id, measure_id, condition_lo, condition_hi, alpha, target_per_condition, data_version)
);

CREATE TABLE assignment_state (
  experiment_id bigint  PRIMARY KEY REFERENCES experiments (id) ON DELETE CASCADE,
  block_number  integer NOT NULL CHECK (block_number >= 1),
  -- the template the block was drawn from (condition keys with repeats, sorted)
  template      jsonb   NOT NULL,
  -- the current block: condition keys in the drawn order
  block         jsonb   NOT NULL,
  -- index of the next free slot in block
  position      integer NOT NULL CHECK (position >= 0)
);

CREATE TABLE assignments (
  id            bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
  experiment_id bigint  NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  respondent    text    NOT NULL CHECK (length(respondent) BETWEEN 1 AND 256),
  condition_id  bigint  NOT NULL REFERENCES conditions (id) ON DELETE CASCADE,
  block_number  integer NOT NULL CHECK (block_number >= 1),
  assigned_at   text    NOT NULL,
  api_key_id    bigint  REFERENCES api_keys (id) ON DELETE SET NULL,
  UNIQUE (experiment_id, respondent)
);
