-- 0004_values_epoch: one counter that moves whenever a stored value changes or disappears, so that a reader
-- holding values in memory (the sorted-values cache of continuous measures, server/sorted-values-cache.ts) knows
-- when it may merge only the newer rows (responses.id above the last one it saw) and when it must read again.
--
-- New responses never move it: they get ids above every existing one (INTEGER PRIMARY KEY is max(id) + 1 while no
-- row was deleted, and a deletion moves the epoch). Exclusion and restoration (UPDATE OF excluded), a change of
-- condition, erasure and any other deletion of responses (also a cascade from a deleted experiment), and a deleted
-- measure move it, through the triggers below, whoever the writer is (the service, the CLI, an import).
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE values_epoch (
  id    INTEGER PRIMARY KEY CHECK (id = 1),
  epoch INTEGER NOT NULL CHECK (epoch >= 0)
) STRICT;

INSERT INTO values_epoch (id, epoch) VALUES (1, 0);

CREATE TRIGGER values_epoch_on_exclusion AFTER UPDATE OF excluded, condition_id ON responses
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
END;

CREATE TRIGGER values_epoch_on_value_change AFTER UPDATE OF value, excluded, condition_id, measure_id, response_id ON response_values
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
END;

CREATE TRIGGER values_epoch_on_response_delete AFTER DELETE ON responses
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
END;

CREATE TRIGGER values_epoch_on_measure_delete AFTER DELETE ON measures
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
END;
