/**
 * `splitballot copy-to-postgres`: write every table of an embedded (SQLite) database into an EMPTY PostgreSQL
 * database of this schema, keeping every row's id, so responses keep their ids and times, keys their hashes, and
 * looks, assignments, the audit trail and the anytime history stay attached to the same experiments.
 *
 * The two engines' migrations create the same tables with the same columns in the same order (the copy refuses
 * when they do not). The source is read table by table in key order and written in ONE transaction with
 * multi-row INSERTs of at most COPY_ROWS_PER_STATEMENT rows (OVERRIDING SYSTEM VALUE keeps the ids); identity
 * sequences then continue after the largest copied id. All or nothing: a failure leaves the database empty.
 * Values are converted only where the column types differ: SQLite 0/1 → boolean, JSON text → jsonb (as text),
 * BLOB → bytea. Cost: O(rows) time, O(COPY_ROWS_PER_STATEMENT) memory.
 *
 * The source is engine-neutral here (TableSource), so this folder needs nothing of SQLite.
 */
import type { PostgresDatabase, Queryable } from './pool.js';

/** Tables in the order foreign keys allow (parents first); schema_migrations and values_epoch are the target's own. */
export const COPIED_TABLES = [
  'experiments',
  'conditions',
  'measures',
  'api_keys',
  'responses',
  'response_values',
  'value_counts',
  'rejected_value_counts',
  'rejected_weight_counts',
  'audit_log',
  'interim_looks',
  'anytime_history',
  'assignment_state',
  'assignments',
] as const;

export const COPY_ROWS_PER_STATEMENT = 2000;

/** Where the rows come from (the SQLite side implements it: store/sqlite/table-source.ts). */
export interface TableSource {
  columns(table: string): string[];
  count(table: string): number;
  /** Every row of the table, in primary-key order, values in columns() order. */
  rows(table: string): Iterable<unknown[]>;
}

export interface CopyProgress {
  table: string;
  rows: number;
  total: number;
}

/** Copy every table of `source` into the (empty) database; returns the rows copied per table. */
export async function copyTablesInto(db: PostgresDatabase, source: TableSource, onProgress: (p: CopyProgress) => void = () => undefined): Promise<Record<string, number>> {
  return db.write(async (c) => {
    // No other writer while the copy runs (a node started too early waits, then sees the copied data).
    await c.query(`LOCK TABLE experiments, api_keys IN EXCLUSIVE MODE`);
    const nonEmpty: string[] = [];
    for (const t of COPIED_TABLES) {
      const r = await c.query<{ n: string }>(`SELECT count(*) AS n FROM (SELECT 1 FROM ${t} LIMIT 1) x`);
      if (Number(r.rows[0].n) > 0) nonEmpty.push(t);
    }
    if (nonEmpty.length > 0) throw new CopyRefused(`the PostgreSQL database is not empty (rows in ${nonEmpty.join(', ')}); copy into a new, empty database`);
    const copied: Record<string, number> = {};
    for (const table of COPIED_TABLES) {
      const types = await columnTypes(c, table);
      const columns = source.columns(table);
      const target = [...types.keys()];
      if (columns.join(',') !== target.join(',')) {
        throw new CopyRefused(`table ${table} has other columns in the two databases (embedded: ${columns.join(', ')}; PostgreSQL: ${target.join(', ')}); run "splitballot migrate" on both first`);
      }
      const convert = columns.map((name) => converter(types.get(name)!));
      const total = source.count(table);
      const identity = await hasIdentity(c, table);
      let batch: unknown[][] = [];
      let done = 0;
      const flush = async () => {
        if (batch.length === 0) return;
        const params: unknown[] = [];
        const tuples = batch.map((row) => `(${row.map((v, i) => (params.push(convert[i](v)), `$${params.length}`)).join(', ')})`);
        await c.query(`INSERT INTO ${table} (${columns.join(', ')}) ${identity ? 'OVERRIDING SYSTEM VALUE ' : ''}VALUES ${tuples.join(', ')}`, params);
        done += batch.length;
        batch = [];
        onProgress({ table, rows: done, total });
      };
      const perStatement = Math.max(1, Math.min(COPY_ROWS_PER_STATEMENT, Math.floor(60_000 / columns.length)));
      for (const row of source.rows(table)) {
        batch.push(row);
        if (batch.length >= perStatement) await flush();
      }
      await flush();
      if (done === 0) onProgress({ table, rows: 0, total });
      if (identity) await c.query(`SELECT setval(pg_get_serial_sequence($1, 'id'), GREATEST((SELECT max(id) FROM ${table}), 1), (SELECT max(id) FROM ${table}) IS NOT NULL)`, [table]);
      copied[table] = done;
    }
    // Every cached sorted run of any node is stale now.
    await c.query(`UPDATE values_epoch SET epoch = epoch + 1 WHERE id = 1`);
    return copied;
  });
}

/** The copy cannot go ahead (the target is not empty, the schemas differ). One line, for the CLI. */
export class CopyRefused extends Error {
  override name = 'CopyRefused';
}

async function columnTypes(c: Queryable, table: string): Promise<Map<string, string>> {
  const r = await c.query<{ column_name: string; data_type: string }>(
    `SELECT column_name, data_type FROM information_schema.columns WHERE table_schema = current_schema() AND table_name = $1 ORDER BY ordinal_position`,
    [table],
  );
  return new Map(r.rows.map((x) => [x.column_name, x.data_type]));
}

async function hasIdentity(c: Queryable, table: string): Promise<boolean> {
  const r = await c.query(`SELECT 1 FROM information_schema.columns WHERE table_schema = current_schema() AND table_name = $1 AND column_name = 'id' AND is_identity = 'YES'`, [table]);
  return (r.rowCount ?? 0) > 0;
}

function converter(type: string): (v: unknown) => unknown {
  switch (type) {
    case 'boolean':
      return (v) => (v === null || v === undefined ? null : Boolean(v));
    case 'bytea':
      return (v) => (v === null || v === undefined ? null : Buffer.from(v as Uint8Array));
    case 'bigint':
    case 'integer':
    case 'smallint':
      return (v) => (typeof v === 'bigint' ? v.toString() : v);
    default:
      return (v) => v;
  }
}
