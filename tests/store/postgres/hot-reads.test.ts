/**
 * The reads every request makes on PostgreSQL, each one prepared statement outside a transaction: the definition by
 * slug (server/store/postgres/definition-read.ts), the comparison stamp and the key by hash. They must return exactly
 * what the snapshot reads return, keep working on connections that prepared them before a migration added a column,
 * and never answer from memory: a change committed through another pool (another node) is seen by the next call.
 * The stamp read in the same statement as a definition is used only by the stamp call that follows it at once.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ExperimentRecord, ValidResponse } from '../../../server/store/types.js';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { hashSecret } from '../../../server/services/keys.js';
import { openPostgresStore, type PostgresStore } from '../../../server/store/postgres/store.js';
import { readDefinitionBySlug } from '../../../server/store/postgres/definition-read.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from './pg-test-db.js';

const available = await postgresAvailable('the PostgreSQL hot-read tests');
const NOW = '2027-03-01T12:00:00.000Z';

function answer(e: ExperimentRecord, id: string, condition: 0 | 1, value: number): ValidResponse {
  const c = e.conditions[condition];
  const m = e.measures[0];
  return { responseId: id, generated: false, conditionKey: c.key, respondent: null, submittedAt: NOW, values: new Map([[m.key, value]]), weight: null, contentHash: contentHash(c.id, null, [[m.id, value]]) };
}

describe.skipIf(!available)('PostgreSQL hot reads', () => {
  let test: TestDatabase;
  let nodeA: PostgresStore;
  let nodeB: PostgresStore;

  beforeAll(async () => {
    test = await createTestDatabase();
    nodeA = await openPostgresStore(test.url, { pool: { poolSize: 2 } });
    nodeB = await openPostgresStore(test.url, { pool: { poolSize: 2 } });
  });

  afterAll(async () => {
    await nodeA?.close();
    await nodeB?.close();
    await test?.drop();
  });

  it('the one-statement definition equals the snapshot read, awkward doubles, options and definition order included', async () => {
    const created = await nodeA.experiments.create({
      id: 'hot-definition',
      title: 'Invented tariff survey',
      conditions: [
        { id: 'zeta', label: 'Shown first' },
        { id: 'alpha', label: 'Shown second' },
        { id: 'mid', label: 'Shown third' },
      ],
      measures: [
        { id: 'tiny', label: 'Tiny range', min: 0.1, max: 0.30000000000000004, integer: false, required: true },
        { id: 'huge', label: 'Huge range', min: -1.7976931348623157e308, max: 1e300, integer: false, required: false, role: 'covariate' },
        { id: 'score', label: 'Score', min: -5, max: 5, integer: true, required: true },
      ],
      plannedPerCondition: 250,
      alpha: 0.049999999999999996,
      thankYouUrl: 'https://example.org/thanks',
      options: { monitoring: { spending: 'obrien-fleming' }, note: 'ü → ✓' },
    });
    if (created.kind !== 'created') throw new Error(created.kind);
    const fast = await nodeB.experiments.getBySlug('hot-definition');
    const [slow] = await nodeB.experiments.list(created.experiment.key);
    expect(fast).toEqual(slow);
    expect(fast).toEqual(created.experiment);
    expect(fast!.measures.map((m) => [m.min, m.max])).toEqual([
      [0.1, 0.30000000000000004],
      [-1.7976931348623157e308, 1e300],
      [-5, 5],
    ]);
    expect(fast!.conditions.map((c) => c.id)).toEqual(['zeta', 'alpha', 'mid']);
    expect(await nodeB.experiments.getBySlug('no-such-experiment')).toBeNull();
  });

  it('a write through another node is seen by the next definition read and stamp (nothing answered from memory)', async () => {
    const created = await nodeA.experiments.create({
      id: 'hot-stamp',
      title: 'Invented survey',
      conditions: [
        { id: 'a', label: 'A' },
        { id: 'b', label: 'B' },
      ],
      measures: [{ id: 'price', label: 'Price', min: 0, max: 100, integer: false, required: true }],
      plannedPerCondition: null,
      alpha: 0.05,
      thankYouUrl: null,
    });
    if (created.kind !== 'created') throw new Error(created.kind);
    const e = created.experiment;
    const before = await nodeB.responses.getComparisonStamp(e.key);
    expect(before).toEqual({ dataVersion: 0, rejectedTotal: 0, looks: 0 });
    for (let i = 0; i < 3; i++) {
      const stored = await nodeA.responses.ingest(e.key, [answer(e, `r${i}`, (i % 2) as 0 | 1, 10 + i)], NOW, null);
      if (stored.kind !== 'stored') throw new Error(stored.kind);
      // Acknowledged by node A: node B's very next reads see it.
      expect((await nodeB.responses.getComparisonStamp(e.key))!.dataVersion).toBe(stored.dataVersion);
      const seen = (await nodeB.experiments.getBySlug('hot-stamp'))!;
      expect(seen.dataVersion).toBe(stored.dataVersion);
      expect(seen.conditions.reduce((n, c) => n + c.responses, 0)).toBe(i + 1);
    }
    await nodeA.responses.recordRejected(e.key, [{ measureKey: e.measures[0].key, reason: 'out_of_range', count: 2 }]);
    expect((await nodeB.responses.getComparisonStamp(e.key))!.rejectedTotal).toBe(2);
    const updated = await nodeA.experiments.update(e.key, { title: 'Renamed', status: 'closed' }, '2027-03-02T00:00:00.000Z');
    if (updated.kind !== 'updated') throw new Error(updated.kind);
    const seen = (await nodeB.experiments.getBySlug('hot-stamp'))!;
    expect([seen.title, seen.status, seen.updatedAt]).toEqual(['Renamed', 'closed', '2027-03-02T00:00:00.000Z']);
    expect(await nodeB.responses.getComparisonStamp(99_999_999)).toBeNull();
  });

  it('connections that prepared the statements keep working after a migration adds columns', async () => {
    const key = await nodeB.apiKeys.create({ hash: hashSecret('hot-secret'), scope: 'read', experimentKey: null, label: 'hot', origin: 'cli', createdAt: NOW });
    // Prepare everything on every connection of node B's pool (two connections, used concurrently).
    for (let i = 0; i < 3; i++) {
      await Promise.all([nodeB.experiments.getBySlug('hot-stamp'), nodeB.experiments.getBySlug('hot-definition'), nodeB.apiKeys.findByHash(hashSecret('hot-secret'))]);
    }
    const admin = await test.admin();
    await admin.query(`ALTER TABLE experiments ADD COLUMN later_note text`);
    await admin.query(`ALTER TABLE conditions ADD COLUMN later_weight double precision`);
    await admin.query(`ALTER TABLE measures ADD COLUMN later_unit text`);
    const e = await nodeB.experiments.getBySlug('hot-definition');
    expect(e!.measures.map((m) => m.id)).toEqual(['tiny', 'huge', 'score']);
    expect((await nodeB.apiKeys.findByHash(hashSecret('hot-secret')))!.id).toBe(key.id);
    expect(await readDefinitionBySlug(nodeB.database, 'hot-stamp')).toEqual(await nodeB.experiments.getBySlug('hot-stamp'));
  });

  it('the stamp read with the definition serves the call right after it, once; after a turn of the event loop it is read again', async () => {
    const created = await nodeA.experiments.create({
      id: 'hot-fused',
      title: 'Invented survey',
      conditions: [
        { id: 'a', label: 'A' },
        { id: 'b', label: 'B' },
      ],
      measures: [{ id: 'price', label: 'Price', min: 0, max: 100, integer: false, required: true }],
      plannedPerCondition: null,
      alpha: 0.05,
      thankYouUrl: null,
    });
    if (created.kind !== 'created') throw new Error(created.kind);
    const e = created.experiment;
    await nodeA.responses.ingest(e.key, [answer(e, 'f1', 0, 1)], NOW, null);
    await nodeA.responses.recordRejected(e.key, [{ measureKey: e.measures[0].key, reason: 'not_a_number', count: 3 }]);
    let checkouts = 0;
    const count = () => checkouts++;
    nodeB.database.pool.on('acquire', count);
    try {
      // Right after the definition: no statement of its own, and the same stamp a statement would read.
      const record = (await nodeB.experiments.getBySlug('hot-fused'))!;
      checkouts = 0;
      const fused = await nodeB.responses.getComparisonStamp(e.key, record);
      expect(checkouts).toBe(0);
      expect(fused).toEqual({ dataVersion: 1, rejectedTotal: 3, looks: 0 });
      // Once only: the next call with the same record asks the database, and sees a write made meanwhile.
      await nodeA.responses.ingest(e.key, [answer(e, 'f2', 1, 2)], NOW, null);
      checkouts = 0;
      expect((await nodeB.responses.getComparisonStamp(e.key, record))!.dataVersion).toBe(2);
      expect(checkouts).toBe(1);

      // A turn of the event loop after the definition read (here: a write through another node): read afresh.
      const later = (await nodeB.experiments.getBySlug('hot-fused'))!;
      await nodeA.responses.ingest(e.key, [answer(e, 'f3', 0, 3)], NOW, null);
      await new Promise((resolve) => setImmediate(resolve));
      checkouts = 0;
      expect((await nodeB.responses.getComparisonStamp(e.key, later))!.dataVersion).toBe(3);
      expect(checkouts).toBe(1);

      // Another experiment's key with this record: not used.
      const again = (await nodeB.experiments.getBySlug('hot-fused'))!;
      checkouts = 0;
      expect(await nodeB.responses.getComparisonStamp(99_999_999, again)).toBeNull();
      expect(checkouts).toBe(1);
    } finally {
      nodeB.database.pool.off('acquire', count);
    }
  });
});
