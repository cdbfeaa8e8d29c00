-- 0004_values_epoch (PostgreSQL): one counter that moves whenever a stored value changes or disappears, so that a
-- reader holding sorted values in memory knows when it may merge only newer rows and when it must read again.
-- Same meaning as migrations/0004_values_epoch.sql. New responses never move it: every writer of an experiment
-- holds that experiment's row lock (SELECT … FOR NO KEY UPDATE) before it draws response ids, so within one
-- experiment ids grow in commit order. Exclusion, restoration, a change of condition, any deletion of responses
-- and a deleted measure move it, through the statement-level triggers below, whoever the writer is.
-- Append-only: never edit this file once a database has applied it.

CREATE TABLE values_epoch (
  id    integer PRIMARY KEY CHECK (id = 1),
  epoch bigint  NOT NULL CHECK (epoch >= 0)
);

INSERT INTO values_epoch (id, epoch) VALUES (1, 0);

CREATE FUNCTION values_epoch_bump() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
  UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1;
  RETURN NULL;
END;
$$;

CREATE TRIGGER values_epoch_on_exclusion AFTER UPDATE OF excluded, condition_id ON responses
  FOR EACH STATEMENT EXECUTE FUNCTION values_epoch_bump();

CREATE TRIGGER values_epoch_on_value_change AFTER UPDATE OF value, excluded, condition_id, measure_id, response_id ON response_values
  FOR EACH STATEMENT EXECUTE FUNCTION values_epoch_bump();

CREATE TRIGGER values_epoch_on_response_delete AFTER DELETE ON responses
  FOR EACH STATEMENT EXECUTE FUNCTION values_epoch_bump();

CREATE TRIGGER values_epoch_on_measure_delete AFTER DELETE ON measures
  FOR EACH STATEMENT EXECUTE FUNCTION values_epoch_bump();
