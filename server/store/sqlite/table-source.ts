/**
 * Rows of an embedded database, table by table, for `splitballot copy-to-postgres` (the PostgreSQL side,
 * store/postgres/copy.ts, reads them through its engine-neutral TableSource). Read in primary-key order inside
 * one read transaction, so the copy sees the file at one moment. O(1) memory per row (iterate()).
 */
import type { SqliteDatabase } from './open.js';

const TABLE_NAME = /^[a-z_]+$/;

/**
 * Columns the embedded engine keeps for its own layout and does not copy: responses.packed_values (migration 0008)
 * is a packed copy of the response's values, which PostgreSQL keeps in response_values alone.
 */
export const ENGINE_ONLY_COLUMNS: Readonly<Record<string, readonly string[]>> = { responses: ['packed_values'] };

export interface SqliteTableSource {
  columns(table: string): string[];
  count(table: string): number;
  rows(table: string): Iterable<unknown[]>;
  /** End the read transaction. */
  close(): void;
}

export function sqliteTableSource(db: SqliteDatabase): SqliteTableSource {
  const check = (table: string) => {
    if (!TABLE_NAME.test(table)) throw new RangeError(`not a table name: ${table}`);
  };
  const copiedColumns = (table: string): string[] => {
    const own = ENGINE_ONLY_COLUMNS[table] ?? [];
    return (db.prepare(`PRAGMA table_info(${table})`).all() as { name: string }[]).map((c) => c.name).filter((name) => !own.includes(name));
  };
  // One snapshot for every table read (WAL: writers of other processes go on meanwhile).
  db.prepare('BEGIN').run();
  return {
    columns(table) {
      check(table);
      return copiedColumns(table);
    },
    count(table) {
      check(table);
      return db.prepare(`SELECT count(*) FROM ${table}`).pluck().get() as number;
    },
    *rows(table) {
      check(table);
      const pk = (db.prepare(`PRAGMA table_info(${table})`).all() as { name: string; pk: number }[])
        .filter((c) => c.pk > 0)
        .sort((a, b) => a.pk - b.pk)
        .map((c) => c.name);
      const order = pk.length > 0 ? ` ORDER BY ${pk.join(', ')}` : '';
      yield* db.prepare(`SELECT ${copiedColumns(table).join(', ')} FROM ${table}${order}`).raw().iterate() as Iterable<unknown[]>;
    },
    close() {
      if (db.inTransaction) db.prepare('COMMIT').run();
    },
  };
}
