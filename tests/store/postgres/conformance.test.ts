/**
 * The store conformance suite (tests/store/conformance.ts) against the PostgreSQL store, on a fresh database
 * of the test server (see pg-test-db.ts; skipped with a notice when the server is unreachable, failing with CI=true).
 */
import { describe, it } from 'vitest';
import type { IngestOutcome, Store } from '../../../server/store/types.js';
import { loadPostgresMigrations, pgChecksumOf } from '../../../server/store/postgres/migrate.js';
import { openPostgresStore, type PostgresStore } from '../../../server/store/postgres/store.js';
import { defineStoreConformance, type EngineHarness } from '../conformance.js';
import { defineWeightsConformance } from '../conformance-weights.js';
import { createTestDatabase, postgresAvailable } from './pg-test-db.js';

const available = await postgresAvailable('the PostgreSQL store conformance suite');

const harness: EngineHarness = {
  name: 'PostgreSQL',
  async newDatabase() {
    const test = await createTestDatabase();
    const open: PostgresStore[] = [];
    return {
      async open(migrations) {
        const s = await openPostgresStore(test.url, { migrations, pool: { poolSize: 4 } });
        open.push(s);
        return s;
      },
      migrations: () => loadPostgresMigrations(),
      checksum: pgChecksumOf,
      async check(store: Store) {
        const r = await (store as PostgresStore).check();
        return { ok: r.ok, problems: r.problems };
      },
      async tamperCount(_store, measureKey, conditionKey, value) {
        const c = await test.admin();
        await c.query(
          `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES ($1, $2, 0, $3, 1)
           ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + 1`,
          [measureKey, conditionKey, value],
        );
      },
      async *exportPages(store, experimentKey, measureKeys, pageSize) {
        for await (const page of store.bulk.exportResponsePages(experimentKey, measureKeys, pageSize)) {
          yield page.map((r) => ({ responseId: r.responseId, excluded: r.excluded, values: r.values }));
        }
      },
      async importChunks(store, experimentKey, chunks, receivedAt, commit) {
        const writer = await store.bulk.beginImport(experimentKey, receivedAt, null);
        const outs: IngestOutcome[] = [];
        try {
          for (const c of chunks) outs.push(await writer.add(c));
        } catch (err) {
          await writer.rollback();
          throw err;
        }
        if (commit) await writer.commit();
        else await writer.rollback();
        return outs;
      },
      async drop() {
        for (const s of open) await s.close();
        await test.drop();
      },
    };
  },
};

if (available) {
  defineStoreConformance(harness);
  defineWeightsConformance(harness);
}
else describe.skip('Store conformance: PostgreSQL (server unreachable)', () => it('skipped', () => undefined));
