/**
 * One experiment's definition by its id (slug) in ONE prepared statement: the experiment row, its conditions and
 * its measures in definition order, each built as json by the server. Every request that names an experiment
 * reads it (the comparison routes before their cache check), so this is one round trip where a REPEATABLE READ
 * transaction with three SELECTs took five. A single statement sees one snapshot, so the row, the per-condition
 * counters and the measures still belong to one moment. Nothing is kept in memory: every call asks the database.
 *
 * The same statement reads the experiment's comparison stamp (dataVersion, refused values, recorded looks: what
 * every cached comparison is checked against), so a comparison request needs no second statement for it: the
 * stamp is handed to getComparisonStamp(key, record) with the record it was read with, once, and only while no
 * I/O has happened since (it expires at the next turn of the event loop: a request that reads the definition and
 * asks for the stamp right after, as the comparison routes do, uses it; anything that wrote, waited or read in
 * between reads the stamp afresh). Either way the stamp was read from the database after the request arrived, in
 * the same snapshot as the definition the cache key is built from.
 *
 * Rows come back as json (row_to_json keeps every column under its own name), so the statement's result type
 * does not change when a migration adds a column, and the same row-to-record mapping as the other reads applies
 * (store/experiment-rows.ts). row_to_json prints double precision with its own output function (the shortest text
 * that reads back to the same double), so min, max and alpha arrive exactly; bigint keys and counters stay far
 * below 2^53.
 */
import type { ComparisonStamp, ExperimentRecord } from '../types.js';
import { experimentRecord, type ConditionRow, type ExperimentRow, type MeasureRow } from '../experiment-rows.js';
import type { PostgresDatabase, PreparedStatement } from './pool.js';

const DEFINITION_BY_SLUG: PreparedStatement = {
  name: 'sb_definition_by_slug',
  text: `SELECT row_to_json(e) AS experiment,
                (SELECT coalesce(sum(r.count), 0) FROM rejected_value_counts r WHERE r.experiment_id = e.id) AS rejected,
                (SELECT count(*) FROM interim_looks l WHERE l.experiment_id = e.id) AS looks,
                (SELECT coalesce(json_agg(row_to_json(c) ORDER BY c.position), '[]'::json) FROM conditions c WHERE c.experiment_id = e.id) AS conditions,
                (SELECT coalesce(json_agg(row_to_json(m) ORDER BY m.position), '[]'::json) FROM measures m WHERE m.experiment_id = e.id) AS measures
         FROM experiments e WHERE e.slug = $1`,
};

interface DefinitionRow {
  experiment: ExperimentRow<Record<string, unknown>>;
  rejected: number;
  looks: number;
  conditions: ConditionRow[];
  measures: MeasureRow[];
}

/** Stamps read with a record, until taken or until the next turn of the event loop. */
const stampsReadWith = new WeakMap<ExperimentRecord, ComparisonStamp>();

/** The experiment with this slug, its conditions and measures, or null. */
export async function readDefinitionBySlug(db: PostgresDatabase, slug: string): Promise<ExperimentRecord | null> {
  const row = (await db.prepared<DefinitionRow>(DEFINITION_BY_SLUG, [slug])).rows[0];
  if (!row) return null;
  const record = experimentRecord(row.experiment, row.conditions, row.measures);
  stampsReadWith.set(record, { dataVersion: record.dataVersion, rejectedTotal: row.rejected, looks: row.looks });
  setImmediate(() => stampsReadWith.delete(record));
  return record;
}

/** The stamp read in the same statement as `record`, if it is still fresh (see the header); at most once. */
export function takeStampReadWith(record: ExperimentRecord | undefined, experimentKey: number): ComparisonStamp | null {
  if (record === undefined || record.key !== experimentKey) return null;
  const stamp = stampsReadWith.get(record);
  if (stamp === undefined) return null;
  stampsReadWith.delete(record);
  return stamp;
}
