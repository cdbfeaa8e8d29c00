-- 0008_values_clustered: response_values stored in the order comparisons read it, and a packed copy of each
-- response's values on its response row.
--
-- Before: response_values was clustered on (response_id, measure_id) with a second index
-- response_values_scan (measure_id, condition_id, excluded, value), and REFERENCES to responses, measures and
-- conditions. Every answer cost two B-tree inserts and three foreign-key probes.
-- After: ONE B-tree, clustered on (measure_id, condition_id, excluded, value, response_id) (WITHOUT ROWID), no
-- second index and no REFERENCES. The ordered read of one run (measure, condition, excluded) is a range of the
-- table itself; each answer is one B-tree insert. The columns keep their names and order (response_id,
-- measure_id, condition_id, excluded, value), so `splitballot copy-to-postgres` sees the same table as before.
--
-- What used to find a response's values through the old primary key (exclusion, restoration, erasure, the stored
-- response, exports, check) reads responses.packed_values instead: "measureKey=value" pairs joined by ",", values
-- written so that they read back as the same double (JavaScript's shortest round-trip form at ingest; '%!.17g'
-- here). With the response's condition and excluded flag that gives each value row's full key, so a change to one
-- response touches its rows by primary key. Ingest, exclusion and erasure keep the two in the same transaction;
-- `splitballot check` compares them. The referential rules the REFERENCES enforced (a value's response, measure and
-- condition exist, in the same experiment) are checked by ingest once per batch and by `splitballot check`;
-- responses are deleted only by erasure, which deletes their values by key first.
--
-- Converting an existing database: every value row is copied in the new key order, the packed copies are built
-- from them, the old table (with its index and trigger) is dropped and the trigger of 0004 that watched it is
-- created again on the new table. O(n log n) in the number of values, in the migration's one transaction.
-- Append-only: never edit this file once a database has applied it.

ALTER TABLE responses ADD COLUMN packed_values TEXT NOT NULL DEFAULT '';

UPDATE responses SET packed_values = coalesce(
  (SELECT group_concat(v.measure_id || '=' || printf('%!.17g', v.value), ',' ORDER BY v.measure_id)
   FROM response_values v WHERE v.response_id = responses.id),
  '');

CREATE TABLE response_values_clustered (
  response_id  INTEGER NOT NULL,
  measure_id   INTEGER NOT NULL,
  condition_id INTEGER NOT NULL,
  excluded     INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
  value        REAL    NOT NULL,
  PRIMARY KEY (measure_id, condition_id, excluded, value, response_id)
) STRICT, WITHOUT ROWID;

INSERT INTO response_values_clustered (response_id, measure_id, condition_id, excluded, value)
SELECT response_id, measure_id, condition_id, excluded, value FROM response_values
ORDER BY measure_id, condition_id, excluded, value, response_id;

DROP TABLE response_values;

ALTER TABLE response_values_clustered RENAME TO response_values;

CREATE TRIGGER values_epoch_on_value_change AFTER UPDATE OF value, excluded, condition_id, measure_id, response_id ON response_values
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
END;
