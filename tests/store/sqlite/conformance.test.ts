/**
 * The store conformance suite (tests/store/conformance.ts) against the SQLite store.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { checkDatabase } from '../../../server/store/sqlite/check.js';
import { checksumOf, loadMigrations } from '../../../server/store/sqlite/migrate.js';
import { openSqliteStore, type SqliteStore } from '../../../server/store/sqlite/store.js';
import { isPromise, type IngestOutcome, type Store } from '../../../server/store/types.js';
import { defineStoreConformance, type EngineHarness } from '../conformance.js';
import { defineWeightsConformance } from '../conformance-weights.js';

const harness: EngineHarness = {
  name: 'SQLite',
  async newDatabase() {
    const dir = mkdtempSync(join(tmpdir(), 'sb-conformance-'));
    const path = join(dir, 'store.db');
    const open: SqliteStore[] = [];
    return {
      async open(migrations) {
        const s = openSqliteStore(path, migrations ? { migrations } : {});
        open.push(s);
        return s;
      },
      migrations: () => loadMigrations(),
      checksum: checksumOf,
      async check(store: Store) {
        const r = checkDatabase((store as SqliteStore).db);
        return { ok: r.ok, problems: r.problems };
      },
      async tamperCount(store, measureKey, conditionKey, value) {
        (store as SqliteStore).db
          .prepare(
            `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, 0, ?, 1)
             ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = count + 1`,
          )
          .run(measureKey, conditionKey, value);
      },
      async *exportPages(store, experimentKey, measureKeys, pageSize) {
        for await (const page of store.bulk.exportResponsePages(experimentKey, measureKeys, pageSize)) {
          yield page.map((r) => ({ responseId: r.responseId, excluded: r.excluded, values: r.values }));
        }
      },
      async importChunks(store, experimentKey, chunks, receivedAt, commit) {
        // Synchronous on SQLite (see BulkImport in store/types.ts): no await between BEGIN and COMMIT.
        const writer = store.bulk.beginImport(experimentKey, receivedAt, null);
        if (isPromise(writer)) throw new Error('the SQLite import must begin synchronously');
        const outs: IngestOutcome[] = [];
        try {
          for (const c of chunks) {
            const out = writer.add(c);
            if (isPromise(out)) throw new Error('the SQLite import must add synchronously');
            outs.push(out);
          }
        } catch (err) {
          writer.rollback();
          throw err;
        }
        if (commit) writer.commit();
        else writer.rollback();
        return outs;
      },
      async drop() {
        for (const s of open) await s.close();
        rmSync(dir, { recursive: true, force: true });
      },
    };
  },
};

defineStoreConformance(harness);
defineWeightsConformance(harness);
