/**
 * The PostgreSQL ingest write path (server/store/postgres/responses.ts, pool.ts writeLocked): BEGIN and the
 * experiment's row lock in one message, one lookup and one write statement under the lock. A lock that cannot be
 * had leaves the pooled connection usable; a group whose write fails is redone request by request, so only the
 * failing request is refused and dataVersion moves by exactly one per stored request.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ExperimentRecord, IngestOutcome, ValidResponse } from '../../../server/store/types.js';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { StoreUnavailableError } from '../../../server/store/postgres/pool.js';
import { openPostgresStore, type PostgresStore } from '../../../server/store/postgres/store.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from './pg-test-db.js';

const available = await postgresAvailable('the PostgreSQL write-path tests');
const NOW = '2027-03-01T12:00:00.000Z';

function answer(e: ExperimentRecord, id: string, condition: 0 | 1, score: number, price: number): ValidResponse {
  const c = e.conditions[condition];
  return {
    responseId: id,
    generated: false,
    conditionKey: c.key,
    respondent: null,
    submittedAt: NOW,
    values: new Map([
      [e.measures[0].key, score],
      [e.measures[1].key, price],
    ]),
    weight: null,
    contentHash: contentHash(c.id, null, [
      ['score', score],
      ['price', price],
    ]),
  };
}

async function experiment(store: PostgresStore, slug: string): Promise<ExperimentRecord> {
  const r = await store.experiments.create({
    id: slug,
    title: 'Invented survey',
    conditions: [
      { id: 'a', label: 'A' },
      { id: 'b', label: 'B' },
    ],
    measures: [
      { id: 'score', label: 'Score', min: 0, max: 10, integer: true, required: true },
      { id: 'price', label: 'Price', min: 0, max: 200, integer: false, required: true },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (r.kind !== 'created') throw new Error(r.kind);
  return r.experiment;
}

describe.skipIf(!available)('PostgreSQL ingest write path', () => {
  let test: TestDatabase;
  let store: PostgresStore;

  beforeAll(async () => {
    test = await createTestDatabase();
    store = await openPostgresStore(test.url, { pool: { poolSize: 1, statementTimeoutMs: 400 } });
  });

  afterAll(async () => {
    await store?.close();
    await test?.drop();
  });

  it('a row lock held elsewhere: 503 after the statement timeout, and the one pooled connection is usable again', async () => {
    const e = await experiment(store, 'held');
    const admin = await test.admin();
    await admin.query('BEGIN');
    await admin.query('SELECT 1 FROM experiments WHERE id = $1 FOR UPDATE', [e.key]);
    try {
      await expect(store.responses.ingest(e.key, [answer(e, 'x1', 0, 1, 1), answer(e, 'x2', 1, 2, 2)], NOW, null)).rejects.toBeInstanceOf(StoreUnavailableError);
      await expect(store.responses.ingest(e.key, [answer(e, 'x3', 0, 1, 1)], NOW, null)).rejects.toBeInstanceOf(StoreUnavailableError);
    } finally {
      await admin.query('ROLLBACK');
    }
    // The same (only) connection: no transaction left open or aborted on it.
    expect((await store.database.query<{ s: string }>(`SELECT current_setting('transaction_isolation') AS s`)).rows[0].s).toBe('read committed');
    const ok = await store.responses.ingest(e.key, [answer(e, 'x1', 0, 1, 1), answer(e, 'x2', 1, 2, 2)], NOW, null);
    expect(ok).toMatchObject({ kind: 'stored', created: 2, dataVersion: 1 });
    expect((await store.experiments.getBySlug('held'))!.conditions.map((c) => c.responses)).toEqual([1, 1]);
  });

  it('a group with one failing request: only that one is refused, the others are stored with one dataVersion each', async () => {
    const e = await experiment(store, 'group');
    const good = Array.from({ length: 12 }, (_, i) => answer(e, `g${i}`, (i % 2) as 0 | 1, i % 11, i * 1.5));
    const bad: ValidResponse = { ...answer(e, 'bad', 0, 3, 3), conditionKey: 987_654_321 }; // no such condition
    const repeat = answer(e, 'g0', 0, 0, 0); // the same content as g0: a repeat inside the same group
    const conflict = answer(e, 'g1', 0, 9, 9); // another content under g1's id: a conflict inside the same group
    const sent = [...good.slice(0, 6), bad, ...good.slice(6), repeat, conflict];
    const settled = await Promise.allSettled(sent.map((x) => store.responses.ingest(e.key, [x], NOW, null)));
    const outcomes = settled.map((s) => (s.status === 'fulfilled' ? s.value : null));
    expect(settled[6].status).toBe('rejected');
    const stored = outcomes.filter((o): o is Extract<IngestOutcome, { kind: 'stored' }> => o?.kind === 'stored');
    expect(stored.filter((o) => o.created === 1)).toHaveLength(12);
    expect(outcomes[13]).toMatchObject({ kind: 'stored', created: 0, repeated: 1 });
    expect(outcomes[14]).toMatchObject({ kind: 'conflict', conflicts: [{ index: 0, responseId: 'g1' }] });
    // dataVersion: one per request that stored something, each request its own number.
    expect(new Set(stored.filter((o) => o.created === 1).map((o) => o.dataVersion))).toEqual(new Set(Array.from({ length: 12 }, (_, i) => i + 1)));
    expect(await store.experiments.getDataVersion(e.key)).toBe(12);
    const counts = await store.responses.getCounts(e.measures[0].key, e.conditions[0].key, false);
    expect(counts.reduce((a, b) => a + b, 0)).toBe(6);
    expect((await store.responses.getSortedValues(e.measures[1].key, e.conditions[1].key, false)).length).toBe(6);
    const report = await store.check();
    expect(report.ok).toBe(true);
  });

  it('a connection reset while a transaction runs: 503 for that request, the process stays up, the pool goes on', async () => {
    const e = await experiment(store, 'reset');
    const failed = store.database.write(async (c) => {
      // What a server restarting in immediate mode does to a connection that is lent out: a reset socket.
      const socket = (c as unknown as { connection: { stream: { destroy(err: Error): void } } }).connection.stream;
      setTimeout(() => socket.destroy(Object.assign(new Error('read ECONNRESET'), { code: 'ECONNRESET' })), 50);
      await c.query('SELECT pg_sleep(1)');
    });
    await expect(failed).rejects.toBeInstanceOf(StoreUnavailableError);
    const ok = await store.responses.ingest(e.key, [answer(e, 'r1', 0, 1, 1)], NOW, null);
    expect(ok).toMatchObject({ kind: 'stored', created: 1, dataVersion: 1 });
  });
});
