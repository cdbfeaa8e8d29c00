-- 0005_weights (PostgreSQL): survey weights and covariates. Same numbering and meaning as
-- migrations/sqlite/0005_weights.sql; types are PostgreSQL's own.
--
--  responses.weight          the response's survey (sampling) weight: NULL when it carries none; otherwise a finite
--                            number > 0 (the upper limit is a definition option, checked at ingest).
--  value_counts              per value of an integer measure (per condition and excluded flag), beside the count of
--                            all answers: weighted_count, the answers whose response carries a weight, and the sum of
--                            their weights (weight_sum) and of their squared weights (weight_square_sum), kept in the
--                            same transactions as count. When weighted_count is 0 both sums are 0. Ingest adds to the
--                            sums; exclusion, restoration, erasure and clean-up recompute the sums of the rows they
--                            touch from the response rows (never by subtraction).
--  measures.role             'outcome' (default), 'covariate' (asked before the treatment; used for adjustment) or
--                            'process' (time spent, device type: compared, never in the adjusted family).
--  rejected_weight_counts    weights refused at ingest, per experiment and reason (like rejected_value_counts).
--
-- Converting an existing database: every stored response had no weight (NULL), so every existing value_counts row
-- has weighted_count = 0 and zero sums, which the column defaults give; every existing measure is an outcome.
-- Append-only: never edit this file once a database has applied it.

ALTER TABLE responses ADD COLUMN weight double precision CHECK (weight IS NULL OR weight > 0);

ALTER TABLE value_counts
  ADD COLUMN weighted_count    bigint           NOT NULL DEFAULT 0 CHECK (weighted_count >= 0),
  ADD COLUMN weight_sum        double precision NOT NULL DEFAULT 0 CHECK (weight_sum >= 0),
  ADD COLUMN weight_square_sum double precision NOT NULL DEFAULT 0 CHECK (weight_square_sum >= 0);

ALTER TABLE measures ADD COLUMN role text NOT NULL DEFAULT 'outcome' CHECK (role IN ('outcome', 'covariate', 'process'));

CREATE TABLE rejected_weight_counts (
  experiment_id bigint NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
  reason        text   NOT NULL CHECK (reason IN ('out_of_range', 'not_a_number', 'not_finite', 'too_many_digits', 'not_allowed', 'missing')),
  count         bigint NOT NULL CHECK (count >= 0),
  PRIMARY KEY (experiment_id, reason)
);
