/**
 * The omnibus service path: the stats of a continuous measure run in a worker thread (worker-pool.ts, kind
 * "omnibus") give exactly the reply of the in-thread path (same numbers, same ETag), with and without a margin;
 * the integer path reads per-value counts and equals stats' compareConditions on the raw answers.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { ComparePool } from '../../../server/services/comparisons/worker-pool.js';
import { ComparisonService, DEFAULT_CACHE_LIMITS } from '../../../server/services/comparisons/service.js';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { openSqliteStore, type SqliteStore } from '../../../server/store/sqlite/store.js';
import type { ExperimentRecord, ValidResponse } from '../../../server/store/types.js';
import { compareConditions } from '../../../stats/index.js';
import { tempDir } from '../../helpers/app.js';

const stores: SqliteStore[] = [];
const pools: ComparePool[] = [];
afterAll(async () => {
  for (const p of pools.splice(0)) await p.close();
  for (const s of stores.splice(0)) await s.close();
});

function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

async function seeded(): Promise<{ store: SqliteStore; e: ExperimentRecord; raw: { score: number[][]; amount: number[][] } }> {
  const store = openSqliteStore(`${tempDir()}/omnibus.db`);
  stores.push(store);
  const created = await store.experiments.create({
    id: 'three',
    title: 'Three conditions (invented data)',
    conditions: ['x', 'y', 'z'].map((id) => ({ id, label: id.toUpperCase() })),
    measures: [
      { id: 'score', label: 'Score', min: 0, max: 10, integer: true, required: true },
      { id: 'amount', label: 'Amount', min: -100, max: 100, integer: false, required: true },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (created.kind !== 'created') throw new Error('experiment not created');
  const e = created.experiment;
  const rand = lcg(29);
  const raw = { score: [[], [], []] as number[][], amount: [[], [], []] as number[][] };
  const items: ValidResponse[] = Array.from({ length: 1500 }, (_, i) => {
    const c = i % 3;
    const score = Math.min(10, Math.floor(rand() * 10) + (c === 2 && rand() < 0.3 ? 1 : 0));
    const amount = Math.round((rand() * 120 - 60 + c * 3) * 100) / 100;
    raw.score[c].push(score);
    raw.amount[c].push(amount);
    const values = new Map<number, number>([
      [e.measures[0].key, score],
      [e.measures[1].key, amount],
    ]);
    const id = e.conditions[c].id;
    return { responseId: `r${i}`, generated: false, conditionKey: e.conditions[c].key, respondent: null, weight: null, submittedAt: '2027-03-01T12:00:00.000Z', values, contentHash: contentHash(id, null, [['score', score], ['amount', amount]]) };
  });
  await store.responses.ingest(e.key, items, '2027-03-01T12:00:00.000Z', null);
  return { store, e: (await store.experiments.getBySlug('three'))!, raw };
}

describe('omnibus service', () => {
  it('a continuous measure computed in a worker equals the in-thread reply (numbers and ETag), with and without a margin', async () => {
    const { store, e } = await seeded();
    const pool = new ComparePool(1);
    pools.push(pool);
    const inWorker = new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: 0, pool });
    const inThread = new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: Number.POSITIVE_INFINITY });
    for (const margin of [null, 4]) {
      const options = { includeExcluded: false, margin };
      const w = await inWorker.omnibus(e, e.measures[1], options);
      const t = await inThread.omnibus(e, e.measures[1], options);
      const strip = (b: typeof w.body) => JSON.parse(JSON.stringify({ ...b, computedAt: null }));
      expect(strip(w.body)).toEqual(strip(t.body));
      expect(w.etag).toBe(t.etag);
      expect(w.body.pairs.every((p) => (margin === null ? p.equivalence === null : p.equivalence?.margin === margin))).toBe(true);
    }
    expect(inWorker.paths.workerComputes).toBe(2);
    expect(pool.stats.fallbacks).toBe(0);
    expect(inThread.paths.workerComputes).toBe(0);
  });

  it('an integer measure (per-value counts) equals compareConditions on the raw answers', async () => {
    const { store, e, raw } = await seeded();
    const service = new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: Number.POSITIVE_INFINITY });
    const { body } = await service.omnibus(e, e.measures[0], { includeExcluded: false, margin: 0.5 });
    const direct = compareConditions(raw.score.map((g) => Object.freeze(g)), { labels: ['X', 'Y', 'Z'], alpha: 0.05, equivalenceMargin: 0.5 });
    // Same Samples (counts vs the expanded answers): the engine's own tests bound the difference at 8·EPSILON relative.
    const close = (a: number | null, b: number | null, what: string) => {
      expect(a === null, what).toBe(b === null);
      if (a !== null && b !== null) expect(Math.abs(a - b), `${what}: ${a} vs ${b}`).toBeLessThanOrEqual(8 * Number.EPSILON * Math.max(1, Math.abs(b)));
    };
    close(body.welchAnova.f, direct.welchAnova.f, 'Welch F');
    close(body.kruskalWallis.h, direct.kruskalWallis.h, 'H');
    body.pairs.forEach((p, i) => {
      close(p.gamesHowell.t, direct.pairs[i].gamesHowell.t, `pair ${i} t`);
      close(p.dunn.z, direct.pairs[i].dunn.z, `pair ${i} z`);
      expect(p.equivalence?.welch.verdict?.code).toBe(direct.pairs[i].equivalence?.welch.verdict?.code);
    });
    expect(body.flags.map((f) => f.code).sort()).toEqual(direct.flags.map((f) => f.code).sort());
  });
});
