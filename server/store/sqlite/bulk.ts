/**
 * Bulk reads and writes for exports and imports (SQLite). They implement the port's BulkRepository
 * (store.bulk, made by sqliteBulk below), so no SQL or better-sqlite3 type leaves server/store/sqlite/.
 *
 *  - exportResponsePages(): every stored response of one experiment with its values, condition, times and
 *    exclusion state, in storage order, as pages of `pageSize` rows. Keyset paging on responses.id: each page is
 *    one short read transaction, so a slow client never holds the connection (better-sqlite3 cannot run other
 *    statements while an iterator is open) and other requests keep being served between pages. Responses stored
 *    after the export began are not included (the highest id is fixed at the start). Cost: O(n) rows read,
 *    O(pageSize × measures) memory.
 *  - beginBulkImport(): one write transaction (BEGIN IMMEDIATE) across many calls of the repository's ingest
 *    transaction, which better-sqlite3 runs as a SAVEPOINT inside it. So an import of a million rows inserted in
 *    chunks of 10,000 is still all or nothing, while the per-response bookkeeping (idempotency, counts,
 *    dataVersion) stays in the one place that keeps it, SqliteResponseRepository. dataVersion moves by one per
 *    chunk, all committed together.
 */
import { exportRow, STORED_RESPONSE_COLUMNS, type StoredResponseRow } from '../response-rows.js';
import type { SqliteDatabase } from './open.js';
import { forEachPacked } from './packed-values.js';
import type { SqliteResponseRepository } from './responses.js';
import type { BulkImport, BulkRepository, ExportRow } from '../types.js';

/** The parts of the SQLite store the bulk operations use (an open SqliteStore is one). */
export interface SqliteBulkParts {
  db: SqliteDatabase;
  responses: SqliteResponseRepository;
}

const statements = new WeakMap<object, ReturnType<typeof prepareExport>>();

function prepareExport(store: SqliteBulkParts) {
  const { db } = store;
  return {
    maxId: db.prepare<[number], number | null>(`SELECT max(id) FROM responses WHERE experiment_id = ?`).pluck(),
    page: db.prepare<[number, number, number, number], StoredResponseRow>(
      `SELECT ${STORED_RESPONSE_COLUMNS}
       FROM responses r JOIN conditions c ON c.id = r.condition_id
       WHERE r.experiment_id = ? AND r.id > ? AND r.id <= ?
       ORDER BY r.id LIMIT ?`,
    ),
    // The values of a page from the responses' packed copies (migration 0008): the same rowid range as the page.
    values: db
      .prepare<[number, number, number], [number, string]>(
        `SELECT id, packed_values FROM responses WHERE experiment_id = ? AND id BETWEEN ? AND ?`,
      )
      .raw(),
  };
}

/**
 * Pages of exported responses (storage order). The generator reads one page per step; between steps the
 * caller may await I/O freely.
 */
export async function* exportResponsePages(
  store: SqliteBulkParts,
  experimentKey: number,
  measureKeys: readonly number[],
  pageSize = 1000,
): AsyncGenerator<ExportRow[], void, undefined> {
  const s = store;
  let st = statements.get(s.db);
  if (!st) {
    st = prepareExport(s);
    statements.set(s.db, st);
  }
  const stmts = st;
  const last = stmts.maxId.get(experimentKey) ?? 0;
  const column = new Map<number, number>(measureKeys.map((k, i) => [k, i]));
  let after = 0;
  const readPage = s.db.transaction((from: number): ExportRow[] => {
    const rows = stmts.page.all(experimentKey, from, last, pageSize);
    if (rows.length === 0) return [];
    const byId = new Map<number, ExportRow>();
    const out: ExportRow[] = rows.map((r) => {
      const row = exportRow(r, measureKeys.length);
      byId.set(r.id, row);
      return row;
    });
    for (const [responseRowId, packed] of stmts.values.all(experimentKey, rows[0].id, rows[rows.length - 1].id)) {
      const row = byId.get(responseRowId);
      if (row === undefined) continue;
      forEachPacked(packed, (measureKey, value) => {
        const i = column.get(measureKey);
        if (i !== undefined) row.values[i] = value;
      });
    }
    after = rows[rows.length - 1].id;
    return out;
  });
  while (after < last) {
    const page = readPage(after);
    if (page.length === 0) return;
    yield page;
  }
}

/**
 * Begin one write transaction for a bulk import. While it is open every statement on this connection belongs to
 * it: the HTTP route therefore calls add() for all chunks without awaiting anything in between, and the CLI owns
 * its connection alone. The write lock is taken at once (BEGIN IMMEDIATE); other processes' writers wait.
 */
export function beginBulkImport(store: SqliteBulkParts, experimentKey: number, receivedAt: string, apiKeyId: number | null): BulkImport {
  const s = store;
  if (s.db.inTransaction) throw new Error('a bulk import cannot start inside another transaction');
  s.db.prepare('BEGIN IMMEDIATE').run();
  let open = true;
  return {
    add(items) {
      if (!open) throw new Error('the import transaction is closed');
      // The repository's one implementation of ingest bookkeeping, as a SAVEPOINT inside our transaction.
      return s.responses.ingestWithinTransaction(experimentKey, items, receivedAt, apiKeyId);
    },
    commit() {
      if (!open) throw new Error('the import transaction is closed');
      open = false;
      s.db.prepare('COMMIT').run();
    },
    rollback() {
      if (!open) return;
      open = false;
      if (s.db.inTransaction) s.db.prepare('ROLLBACK').run();
    },
    get open() {
      return open;
    },
  };
}

/** The store's BulkRepository (`store.bulk`). */
export function sqliteBulk(store: SqliteBulkParts): BulkRepository {
  return {
    exportResponsePages: (experimentKey, measureKeys, pageSize) => exportResponsePages(store, experimentKey, measureKeys, pageSize),
    beginImport: (experimentKey, receivedAt, apiKeyId) => beginBulkImport(store, experimentKey, receivedAt, apiKeyId),
  };
}
