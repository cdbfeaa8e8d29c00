/**
 * Correctness of the performance paths of issue 8 (no timing here; tests/bench/ measures the speed):
 *  - the sorted-values cache (merge of newer rows, invalidation by the values epoch) equals a fresh ordered read
 *    after random batches, single responses, exclusions, restorations and erasures;
 *  - the worker-thread path of a comparison (read + stats + flags in server/services/comparisons/worker-pool.ts and server/store/sqlite/worker-reads.ts) gives the same
 *    reply as the in-thread path;
 *  - group commit of single responses: each request keeps its own outcome (stored, repeat, conflict), all are
 *    durable when their promises settle, the counters and dataVersion match;
 *  - the batch path's multi-row inserts and chunked idempotency lookups store exactly what was sent;
 *  - the validation fast path (plainlyValidShape) accepts only what ResponseInputSchema accepts, unchanged.
 */
import fc from 'fast-check';
import { afterAll, describe, expect, it } from 'vitest';
import { ComparePool } from '../../../server/services/comparisons/worker-pool.js';
import { ComparisonService, DEFAULT_CACHE_LIMITS, DEFAULT_COMPARISON_OPTIONS } from '../../../server/services/comparisons/service.js';
import { type ComparisonTarget } from '../../../server/services/targets.js';
import { NEW_VALUES_OF_RUN_SQL } from '../../../server/store/sqlite/responses.js';
import { openSqliteStore, type SqliteStore } from '../../../server/store/sqlite/store.js';
import type { ExperimentRecord, ValidResponse } from '../../../server/store/types.js';
import { checkBatch, contentHash, plainlyValidShape } from '../../../server/services/ingest/validate.js';
import { ResponseInputSchema } from '../../../server/schemas/responses.js';
import { mergeNewValues, SortedValuesCache } from '../../../server/store/sorted-runs-cache.js';
import { tempDir } from '../../helpers/app.js';

/** Deterministic pseudo-random numbers (a small LCG), so the invented data is the same on every run. */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

const stores: SqliteStore[] = [];
const pools: ComparePool[] = [];
afterAll(async () => {
  for (const p of pools.splice(0)) await p.close();
  for (const s of stores.splice(0)) await s.close();
});

async function newStore(): Promise<{ store: SqliteStore; e: ExperimentRecord }> {
  const store = openSqliteStore(`${tempDir()}/perf.db`);
  stores.push(store);
  const created = await store.experiments.create({
    id: 'perf',
    title: 'Performance paths (invented data)',
    conditions: [
      { id: 'a', label: 'A' },
      { id: 'b', label: 'B' },
    ],
    measures: [
      { id: 'score', label: 'Score', min: 0, max: 100, integer: true, required: true },
      { id: 'amount', label: 'Amount', min: -100, max: 100, integer: false, required: false },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (created.kind !== 'created') throw new Error('experiment not created');
  return { store, e: created.experiment };
}

function item(e: ExperimentRecord, id: string, condition: 'a' | 'b', score: number, amount: number | null, respondent: string | null = null): ValidResponse {
  const values = new Map<number, number>([[e.measures[0].key, score]]);
  const canonical: [string, number][] = [['score', score]];
  if (amount !== null) {
    values.set(e.measures[1].key, amount);
    canonical.push(['amount', amount]);
  }
  const c = e.conditions.find((x) => x.id === condition)!;
  return { responseId: id, generated: false, conditionKey: c.key, respondent, submittedAt: '2027-03-01T12:00:00.000Z', values, weight: null, contentHash: contentHash(condition, respondent, canonical) };
}

describe('sorted-values cache', () => {
  it('mergeNewValues merges any order of new values into a new sorted shared array, leaving its inputs alone', () => {
    const old = Float64Array.from([-1, 0, 2.5, 7]); // typed arrays cannot be frozen; checked unchanged below
    const added = Object.freeze([3, -2, 7, 0]);
    const merged = mergeNewValues(old, added);
    expect([...merged]).toEqual([-2, -1, 0, 0, 2.5, 3, 7, 7]);
    expect(merged.buffer).toBeInstanceOf(SharedArrayBuffer);
    expect([...old]).toEqual([-1, 0, 2.5, 7]);
  });

  it('never moves an entry backwards and stays within its bound of values', () => {
    const c = new SortedValuesCache(10);
    c.set('k', { values: Float64Array.from([1, 2]), lastRowId: 5, epoch: 1 });
    c.set('k', { values: Float64Array.from([1]), lastRowId: 4, epoch: 1 });
    expect(c.get('k')!.lastRowId).toBe(5);
    c.set('j', { values: new Float64Array(9), lastRowId: 9, epoch: 1 });
    expect(c.heldValues).toBeLessThanOrEqual(10);
    expect(c.get('k')).toBeUndefined(); // the least recently used run went first
  });

  it('equals a fresh ordered read after random batches, single responses, exclusions, restorations and erasures', async () => {
    const { store, e } = await newStore();
    const repo = store.responses;
    const amountKey = e.measures[1].key;
    const [ca, cb] = e.conditions.map((c) => c.key);
    const rand = lcg(8);
    let next = 0;
    const ids: string[] = [];
    const at = '2027-03-01T12:00:00.000Z';
    for (let step = 0; step < 60; step++) {
      const r = rand();
      if (r < 0.35 || ids.length < 10) {
        const k = 1 + Math.floor(rand() * 40);
        const items: ValidResponse[] = [];
        for (let i = 0; i < k; i++) {
          const id = `r${next++}`;
          ids.push(id);
          const amount = rand() < 0.1 ? null : Math.round((rand() * 200 - 100) * 1000) / 1000;
          items.push(item(e, id, rand() < 0.5 ? 'a' : 'b', Math.floor(rand() * 101), amount, `p${Math.floor(rand() * 30)}`));
        }
        expect((await repo.ingest(e.key, items, at, null)).kind).toBe('stored');
      } else if (r < 0.55) {
        const id = `r${next++}`;
        ids.push(id);
        expect((await repo.ingest(e.key, [item(e, id, rand() < 0.5 ? 'a' : 'b', 50, rand() * 10, null)], at, null)).kind).toBe('stored');
      } else if (r < 0.75) {
        await repo.setExcluded(e.key, ids[Math.floor(rand() * ids.length)], { excluded: true, reason: 'test' }, null, at);
      } else if (r < 0.9) {
        await repo.setExcluded(e.key, ids[Math.floor(rand() * ids.length)], { excluded: false, reason: null }, null, at);
      } else {
        await repo.eraseRespondent(e.key, `p${Math.floor(rand() * 30)}`, null, at);
      }
      for (const includeExcluded of [false, true]) {
        const cached = await repo.getSortedValuesSnapshot(amountKey, [ca, cb], includeExcluded);
        const freshA = await repo.getSortedValues(amountKey, ca, includeExcluded);
        const freshB = await repo.getSortedValues(amountKey, cb, includeExcluded);
        expect([...cached.groups[0]]).toEqual([...freshA]);
        expect([...cached.groups[1]]).toEqual([...freshB]);
      }
    }
    const s = repo.sortedCache.stats;
    expect(s.merges).toBeGreaterThan(0);
    expect(s.invalidations).toBeGreaterThan(0);
    expect(s.hits).toBeGreaterThan(0);
  });

  it('reads only the newer responses through their rowid range (not a walk of the whole run)', async () => {
    const { store } = await newStore();
    const plan = store.db.prepare(`EXPLAIN QUERY PLAN ${NEW_VALUES_OF_RUN_SQL}`).all(1, 2, 3, 0) as { detail: string }[];
    expect(plan.map((p) => p.detail)).toEqual(['SEARCH responses USING INTEGER PRIMARY KEY (rowid>? AND rowid<?)']);
  });

  it('a full read done elsewhere (readRunsSnapshot, as in a worker) and adopted equals the in-thread snapshot', async () => {
    const { store, e } = await newStore();
    const rand = lcg(3);
    const items = Array.from({ length: 300 }, (_, i) => item(e, `x${i}`, i % 2 ? 'a' : 'b', i % 101, Math.round(rand() * 1e6) / 1e4 - 50));
    await store.responses.ingest(e.key, items, '2027-03-01T12:00:00.000Z', null);
    await store.responses.setExcluded(e.key, 'x7', { excluded: true, reason: 'test' }, null, '2027-03-01T12:00:00.000Z');
    const keys = e.conditions.map((c) => c.key);
    for (const includeExcluded of [false, true]) {
      const runs = store.responses.readRunsSnapshot(e.measures[1].key, keys, includeExcluded);
      const adopted = store.responses.adoptRunsSnapshot(e.measures[1].key, keys, includeExcluded, runs);
      store.responses.sortedCache.clear();
      const direct = await store.responses.getSortedValuesSnapshot(e.measures[1].key, keys, includeExcluded);
      expect({ ...adopted, groups: adopted.groups.map((g) => [...g]) }).toEqual({ ...direct, groups: direct.groups.map((g) => [...g]) });
    }
  });
});

describe('worker path', () => {
  it('gives the same comparison as the in-thread path (reads and stats in a worker thread)', async () => {
    const { store, e } = await newStore();
    const rand = lcg(11);
    const items = Array.from({ length: 2000 }, (_, i) => item(e, `w${i}`, i % 2 ? 'a' : 'b', Math.floor(rand() * 101), Math.round((rand() * 150 - 75) * 100) / 100));
    await store.responses.ingest(e.key, items, '2027-03-01T12:00:00.000Z', null);
    await store.responses.setExcluded(e.key, 'w3', { excluded: true, reason: 'test' }, null, '2027-03-01T12:00:00.000Z');
    const pool = new ComparePool(1);
    pools.push(pool);
    const inWorker = new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: 0, pool });
    const inThread = new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: Number.POSITIVE_INFINITY });
    const experiment = (await store.experiments.getBySlug('perf'))!;
    for (const includeExcluded of [false, true]) {
      const target: ComparisonTarget = { experiment, measure: experiment.measures[1], a: experiment.conditions[0], b: experiment.conditions[1] };
      const options = { ...DEFAULT_COMPARISON_OPTIONS, includeExcluded };
      const w = await inWorker.comparison(target, options);
      store.responses.sortedCache.clear();
      const t = await inThread.comparison(target, options);
      const strip = (b: typeof w.body) => JSON.parse(JSON.stringify({ ...b, computedAt: null }));
      expect(strip(w.body)).toEqual(strip(t.body));
      expect(w.etag).toBe(t.etag);
    }
    expect(inWorker.paths.workerReads).toBe(2);
    expect(inWorker.paths.workerComputes).toBe(2);
    expect(pool.stats.fallbacks).toBe(0);
    expect(inThread.paths.workerComputes).toBe(0);
  });
});

describe('group commit of single responses', () => {
  it('keeps each request its own outcome; all are durable when they settle', async () => {
    const { store, e } = await newStore();
    const at = '2027-03-01T12:00:00.000Z';
    await store.responses.ingest(e.key, [item(e, 'old', 'a', 5, 1)], at, null);
    const before = (await store.responses.getComparisonStamp(e.key))!.dataVersion;
    const groupsBefore = store.responses.groupStats.groups;
    const calls = [
      ...Array.from({ length: 40 }, (_, i) => store.responses.ingest(e.key, [item(e, `g${i}`, i % 2 ? 'a' : 'b', i, i / 3)], at, null)),
      store.responses.ingest(e.key, [item(e, 'old', 'a', 5, 1)], at, null), // a safe retry
      store.responses.ingest(e.key, [item(e, 'old', 'a', 6, 1)], at, null), // a conflict
      store.responses.ingest(e.key, [item(e, 'g0', 'b', 0, 0)], at, null), // same content as g0 in the same group: a retry
    ];
    const outcomes = await Promise.all(calls);
    for (let i = 0; i < 40; i++) expect(outcomes[i]).toMatchObject({ kind: 'stored', created: 1, repeated: 0 });
    expect(outcomes[40]).toMatchObject({ kind: 'stored', created: 0, repeated: 1 });
    expect(outcomes[41]).toEqual({ kind: 'conflict', conflicts: [{ index: 0, responseId: 'old' }] });
    expect(outcomes[42]).toMatchObject({ kind: 'stored', created: 0, repeated: 1 });
    // One group (the calls were made in one turn), one dataVersion step per stored response.
    expect(store.responses.groupStats.groups - groupsBefore).toBe(1);
    expect((await store.responses.getComparisonStamp(e.key))!.dataVersion).toBe(before + 40);
    const versions = outcomes.slice(0, 40).map((o) => (o.kind === 'stored' ? o.dataVersion : -1));
    expect(new Set(versions).size).toBe(40);
    // Durable: a second connection (another process would see the same) reads every row.
    const other = openSqliteStore(store.db.name);
    stores.push(other);
    expect(other.db.prepare(`SELECT count(*) FROM responses`).pluck().get()).toBe(41);
    const counters = other.db.prepare(`SELECT sum(response_count) FROM conditions`).pluck().get();
    expect(counters).toBe(41);
  });
});

describe('batch path (multi-row inserts, chunked idempotency lookups)', () => {
  it('stores exactly what was sent, for sizes around the chunk lengths, with repeats and in-batch duplicates', async () => {
    const { store, e } = await newStore();
    const at = '2027-03-01T12:00:00.000Z';
    const rand = lcg(5);
    const sent = new Map<string, ValidResponse>();
    let n = 0;
    for (const size of [1, 2, 49, 50, 51, 99, 100, 101, 237]) {
      const items: ValidResponse[] = [];
      for (let i = 0; i < size; i++) {
        const x = item(e, `b${n++}`, rand() < 0.5 ? 'a' : 'b', Math.floor(rand() * 101), rand() < 0.2 ? null : Math.round(rand() * 1e5) / 1e3 - 50);
        items.push(x);
      }
      if (size > 2) items.push(items[1]); // the same response twice in one batch: stored once
      if (sent.size > 0) items.push([...sent.values()][0]); // a repeat of an earlier batch
      const out = await store.responses.ingest(e.key, items, at, null);
      expect(out.kind).toBe('stored');
      if (out.kind === 'stored') expect(out.created).toBe(size);
      for (const x of items) sent.set(x.responseId, x);
    }
    for (const [id, x] of sent) {
      const stored = (await store.responses.getStored(e.key, id))!;
      const expected: Record<string, number> = { score: x.values.get(e.measures[0].key)! };
      if (x.values.has(e.measures[1].key)) expected.amount = x.values.get(e.measures[1].key)!;
      expect(stored.values).toEqual(expected);
      expect(stored.condition).toBe(e.conditions.find((c) => c.key === x.conditionKey)!.id);
    }
    // Per-value counts equal a GROUP BY over the values (the invariant the counts path relies on).
    const mismatches = store.db
      .prepare(
        `SELECT count(*) FROM (SELECT measure_id, condition_id, excluded, value, count(*) AS n FROM response_values
           WHERE measure_id = ? GROUP BY 1, 2, 3, 4) g
         LEFT JOIN value_counts c USING (measure_id, condition_id, excluded, value) WHERE c.count IS NOT g.n`,
      )
      .pluck()
      .get(e.measures[0].key);
    expect(mismatches).toBe(0);
    // A conflict in a batch stores nothing.
    const conflict = await store.responses.ingest(e.key, [item(e, 'new-one', 'a', 1, 1), { ...sent.get('b0')!, contentHash: new Uint8Array(32) }], at, null);
    expect(conflict).toEqual({ kind: 'conflict', conflicts: [{ index: 1, responseId: 'b0' }] });
    expect(await store.responses.getStored(e.key, 'new-one')).toBeNull();
  });
});

describe('validation fast path', () => {
  const field = fc.oneof(
    fc.constant(undefined),
    fc.constant(null),
    fc.string({ maxLength: 8 }),
    fc.constantFrom('r-1', 'a', 'A.b_c~d:e-f', '-bad', 'x'.repeat(129), 'x'.repeat(128), '', 'p\u0001', 'ok respondent', 'y'.repeat(257), 'y'.repeat(256)),
    fc.integer(),
    fc.boolean(),
    fc.constant({}),
    fc.constant([]),
  );
  const values = fc.oneof(fc.constant({ score: 3 }), fc.constant([]), fc.constant(null), fc.constant('x'), fc.dictionary(fc.string({ maxLength: 3 }), fc.oneof(fc.integer(), fc.string())));
  const raw = fc.record(
    {
      responseId: field,
      condition: fc.oneof(field, fc.constant('c'.repeat(200)), fc.constant('c'.repeat(201))),
      respondent: field,
      submittedAt: fc.oneof(fc.constant('2027-03-01T12:00:00Z'), fc.constant('yesterday')),
      values,
      extra: fc.integer(),
    },
    { requiredKeys: [] },
  );

  it('accepts only what ResponseInputSchema accepts, and as the schema would return it', () => {
    fc.assert(
      fc.property(raw, (r) => {
        // JSON round trip: the fast path sees parsed JSON (no undefined-valued keys).
        const input = JSON.parse(JSON.stringify(r)) as unknown;
        const fast = plainlyValidShape(input);
        const zod = ResponseInputSchema.safeParse(input);
        if (fast !== null) {
          expect(zod.success).toBe(true);
          if (zod.success) expect(fast).toEqual(zod.data);
        }
      }),
      { numRuns: 2000, seed: 2027 },
    );
  });

  it('a batch checked with the fast path gives the same items and errors as before (plain object, every path)', async () => {
    const { e } = await newStore();
    const body = {
      responses: [
        { responseId: 'v1', condition: 'a', values: { score: 3, amount: -0 } },
        { responseId: 'v2', condition: 'b', respondent: 'p1', values: { score: 100 } },
        { responseId: 'v3', condition: 'c', values: { score: 101, amount: 'x' } },
        { responseId: 'v4', condition: 'a', values: { score: 2.5 }, submittedAt: '2027-03-01T12:00:00Z' },
      ],
    };
    const out = checkBatch(e, JSON.parse(JSON.stringify(body)), '2027-03-02T00:00:00.000Z');
    expect(out.valid.map((v) => [v.responseId, [...v.values.values()]])).toEqual([
      ['v1', [3, 0]],
      ['v2', [100]],
    ]);
    expect(Object.is([...out.valid[0].values.values()][1], 0)).toBe(true); // -0 stored as 0
    expect(out.errors.map((x) => x.path)).toEqual(['responses[2].condition', 'responses[2].values.score', 'responses[2].values.amount', 'responses[3].values.score']);
    expect(out.rejected).toEqual([
      { measureKey: e.measures[0].key, reason: 'out_of_range', count: 1 },
      { measureKey: e.measures[1].key, reason: 'not_a_number', count: 1 },
      { measureKey: e.measures[0].key, reason: 'not_integer', count: 1 },
    ]);
  });
});
