/**
 * Bulk reads and writes for exports and imports (PostgreSQL).
 *
 *  - exportPages(): every stored response of one experiment with its values, in storage order, as pages of
 *    `pageSize` rows. Keyset paging on responses.id (index responses_by_experiment); each page is one short
 *    REPEATABLE READ transaction, so a slow client never holds a connection. Responses stored after the export
 *    began are not included (the highest id is fixed at the start; ids of one experiment grow in commit order).
 *    Cost: O(n) rows read, O(pageSize × measures) memory.
 *  - beginImport(): ONE write transaction on a dedicated pooled connection, holding the experiment's row lock from
 *    the start, across many add() calls; each chunk goes through the same ingest bookkeeping as a request
 *    (ingestLocked, as a SAVEPOINT), so an import is all or nothing and dataVersion moves by one per stored chunk,
 *    all committed together. Other writers of the same experiment wait; other experiments are not affected.
 */
import type { BulkImport, BulkRepository, ExportRow, IngestOutcome, ValidResponse } from '../types.js';
import { ingestLocked, type ExperimentLockState } from './responses.js';
import { guardLentClient, lockExperiments, mapError, type PostgresDatabase } from './pool.js';
import { exportRow, STORED_RESPONSE_COLUMNS, type StoredResponseRow } from '../response-rows.js';

/** One exported response (the port's ExportRow). */
export type PgExportRow = ExportRow;


/** An open all-or-nothing import transaction. add() each chunk, then exactly one of commit() or rollback(). */
export interface PgBulkImport extends BulkImport {
  add(items: ValidResponse[]): Promise<IngestOutcome>;
  commit(): Promise<void>;
  rollback(): Promise<void>;
}

export async function* exportResponsePagesPostgres(
  db: PostgresDatabase,
  experimentKey: number,
  measureKeys: readonly number[],
  pageSize = 1000,
): AsyncGenerator<PgExportRow[], void, undefined> {
  const last = (await db.query<{ last: number | null }>(`SELECT max(id) AS last FROM responses WHERE experiment_id = $1`, [experimentKey])).rows[0].last ?? 0;
  const column = new Map<number, number>(measureKeys.map((k, i) => [k, i]));
  let after = 0;
  while (after < last) {
    const page = await db.snapshot(async (c) => {
      const rows = (
        await c.query<StoredResponseRow>(
          `SELECT ${STORED_RESPONSE_COLUMNS}
           FROM responses r JOIN conditions c ON c.id = r.condition_id
           WHERE r.experiment_id = $1 AND r.id > $2 AND r.id <= $3 ORDER BY r.id LIMIT $4`,
          [experimentKey, after, last, pageSize],
        )
      ).rows;
      if (rows.length === 0) return [];
      const byId = new Map<number, PgExportRow>();
      const out = rows.map((r) => {
        const row = exportRow(r, measureKeys.length);
        byId.set(r.id, row);
        return row;
      });
      const values = await c.query<[number, number, number]>({
        text: `SELECT response_id, measure_id, value FROM response_values WHERE response_id = ANY($1::bigint[])`,
        values: [rows.map((r) => r.id)],
        rowMode: 'array',
      });
      for (const [rid, measureKey, value] of values.rows) {
        const row = byId.get(rid);
        const i = column.get(measureKey);
        if (row !== undefined && i !== undefined) row.values[i] = value;
      }
      after = rows[rows.length - 1].id;
      return out;
    });
    if (page.length === 0) return;
    yield page;
  }
}

export async function beginBulkImportPostgres(db: PostgresDatabase, experimentKey: number, receivedAt: string, apiKeyId: number | null): Promise<PgBulkImport> {
  let client;
  try {
    client = await db.pool.connect();
  } catch (err) {
    throw mapError(err, db.options.retryAfterSeconds);
  }
  const c = client;
  const lent = guardLentClient(c); // lent out for the whole import: a reset connection must not end the process
  let state: ExperimentLockState | undefined;
  try {
    await c.query('BEGIN ISOLATION LEVEL READ COMMITTED');
    state = (await lockExperiments(c, [experimentKey])).get(experimentKey);
  } catch (err) {
    await c.query('ROLLBACK').catch(() => undefined);
    lent.markBroken(err as Error);
    lent.release();
    throw mapError(err, db.options.retryAfterSeconds);
  }
  let open = true;
  let busy: Promise<unknown> = Promise.resolve();
  const finish = async (sql: 'COMMIT' | 'ROLLBACK') => {
    open = false;
    await busy.catch(() => undefined);
    try {
      await c.query(sql);
    } catch (err) {
      lent.markBroken(err as Error);
      if (sql === 'COMMIT') throw mapError(err, db.options.retryAfterSeconds);
    } finally {
      lent.release();
    }
  };
  return {
    async add(items) {
      if (!open) throw new Error('the import transaction is closed');
      const run = (async () => {
        await c.query('SAVEPOINT import_chunk');
        try {
          const outcome = await ingestLocked(c, experimentKey, state, items, receivedAt, apiKeyId);
          await c.query('RELEASE SAVEPOINT import_chunk');
          return outcome;
        } catch (err) {
          await c.query('ROLLBACK TO SAVEPOINT import_chunk').catch(() => undefined);
          throw mapError(err, db.options.retryAfterSeconds);
        }
      })();
      busy = run;
      return run;
    },
    commit: () => finish('COMMIT'),
    async rollback() {
      if (!open) return;
      await finish('ROLLBACK');
    },
    get open() {
      return open;
    },
  };
}

/** The store's BulkRepository (`store.bulk`): export pages and the async import of this engine. */
export function postgresBulk(db: PostgresDatabase): BulkRepository {
  return {
    exportResponsePages: (experimentKey, measureKeys, pageSize) => exportResponsePagesPostgres(db, experimentKey, measureKeys, pageSize),
    beginImport: (experimentKey, receivedAt, apiKeyId) => beginBulkImportPostgres(db, experimentKey, receivedAt, apiKeyId),
  };
}
