/**
 * Work moved off the request thread gives exactly what the request thread gives: the comparison of an integer item
 * read as per-value counts (stats, flags, sensitivity view, equivalence tests), the pairwise and omnibus box plots
 * (SVG text), and the omnibus of an integer item, computed in the worker pool (workerMinValues 0) and in-thread
 * (workerMinValues ∞) on the same data: the same JSON apart from computedAt, the same SVG bytes, the same ETags. The
 * charts are also compared with the box plot drawn straight from the stats Samples as the service drew it before
 * (views/charts on fromCounts / fromSortedValues). The weighted block and the covariate-adjusted block (Lin's fit)
 * computed in the worker pool equal the in-thread ones too. Identical requests that arrive together share one
 * computation.
 */
import { afterAll, describe, expect, it } from 'vitest';
import { ComparePool } from '../../../server/services/comparisons/worker-pool.js';
import { ComparisonService, DEFAULT_CACHE_LIMITS, DEFAULT_COMPARISON_OPTIONS } from '../../../server/services/comparisons/service.js';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { openSqliteStore, type SqliteStore } from '../../../server/store/sqlite/store.js';
import type { ExperimentRecord, ValidResponse } from '../../../server/store/types.js';
import type { ComparisonTarget } from '../../../server/services/targets.js';
import { samplesOf, readSnapshot } from '../../../server/services/samples.js';
import { describe as describeSample } from '../../../stats/descriptives.js';
import { distributionGroupFromSample } from '../../../server/views/charts/common.js';
import { renderDistributionChart } from '../../../server/views/charts/distribution.js';
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

/** Three conditions; a 0–10 item, a 0–100 item and a continuous amount; 3,000 invented answers; one excluded. */
async function seeded(): Promise<{ store: SqliteStore; e: ExperimentRecord }> {
  const store = openSqliteStore(`${tempDir()}/off-thread.db`);
  stores.push(store);
  const created = await store.experiments.create({
    id: 'off-thread',
    title: 'Off-thread study (invented data)',
    conditions: ['x', 'y', 'z'].map((id) => ({ id, label: `Condition ${id.toUpperCase()}` })),
    measures: [
      { id: 'score', label: 'Score 0–10', min: 0, max: 10, integer: true, required: true },
      { id: 'rating', label: 'Rating 0–100', min: 0, max: 100, integer: true, required: true },
      { id: 'amount', label: 'Amount', min: -100, max: 100, integer: false, required: true },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (created.kind !== 'created') throw new Error('experiment not created');
  const e = created.experiment;
  const rand = lcg(41);
  const items: ValidResponse[] = Array.from({ length: 3000 }, (_, i) => {
    const c = i % 3;
    const score = Math.min(10, Math.floor(rand() * 10) + (c === 2 && rand() < 0.3 ? 1 : 0));
    const rating = Math.min(100, Math.floor(rand() * 90) + c * 4);
    const amount = Math.round((rand() * 120 - 60 + c * 3) * 100) / 100;
    const values = new Map<number, number>([
      [e.measures[0].key, score],
      [e.measures[1].key, rating],
      [e.measures[2].key, amount],
    ]);
    const id = e.conditions[c].id;
    return {
      responseId: `r${i}`,
      generated: false,
      conditionKey: e.conditions[c].key,
      respondent: null,
      weight: null,
      submittedAt: '2027-03-01T12:00:00.000Z',
      values,
      contentHash: contentHash(id, null, [
        ['score', score],
        ['rating', rating],
        ['amount', amount],
      ]),
    };
  });
  await store.responses.ingest(e.key, items, '2027-03-01T12:00:00.000Z', null);
  await store.responses.setExcluded(e.key, 'r7', { excluded: true, reason: 'test' }, null, '2027-03-01T12:00:00.000Z');
  return { store, e: (await store.experiments.getBySlug('off-thread'))! };
}

function services(store: SqliteStore): { inWorker: ComparisonService; inThread: ComparisonService; pool: ComparePool } {
  const pool = new ComparePool(1);
  pools.push(pool);
  return {
    pool,
    inWorker: new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: 0, pool }),
    inThread: new ComparisonService(store, DEFAULT_CACHE_LIMITS, { workerMinValues: Number.POSITIVE_INFINITY }),
  };
}

/** Two conditions with survey weights; a 1–7 item, a continuous item and a covariate; 2,400 invented answers. */
async function weightedStudy(): Promise<{ store: SqliteStore; e: ExperimentRecord }> {
  const store = openSqliteStore(`${tempDir()}/off-thread-weights.db`);
  stores.push(store);
  const created = await store.experiments.create({
    id: 'weighted',
    title: 'Weighted study (invented data)',
    conditions: ['p', 'q'].map((id) => ({ id, label: `Condition ${id.toUpperCase()}` })),
    measures: [
      { id: 'agree', label: 'Agreement 1–7', min: 1, max: 7, integer: true, required: true },
      { id: 'spend', label: 'Spend', min: 0, max: 500, integer: false, required: true },
      { id: 'age', label: 'Age', min: 18, max: 99, integer: true, required: false, role: 'covariate' },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
    options: { weights: 'optional' },
  });
  if (created.kind !== 'created') throw new Error('experiment not created');
  const e = created.experiment;
  const rand = lcg(97);
  const items: ValidResponse[] = Array.from({ length: 2400 }, (_, i) => {
    const c = i % 2;
    const age = 18 + Math.floor(rand() * 60);
    const agree = Math.min(7, 1 + Math.floor(rand() * 6) + (c === 0 && rand() < 0.2 ? 1 : 0));
    const spend = Math.round((rand() * 300 + age * 1.5 + c * 10) * 100) / 100;
    const weight = i % 10 === 3 ? null : Math.round((0.5 + rand() * 2) * 1000) / 1000;
    const values = new Map<number, number>([
      [e.measures[0].key, agree],
      [e.measures[1].key, spend],
    ]);
    const answered: [string, number][] = [
      ['agree', agree],
      ['spend', spend],
    ];
    if (i % 17 !== 5) {
      values.set(e.measures[2].key, age);
      answered.push(['age', age]);
    }
    const id = e.conditions[c].id;
    return { responseId: `w${i}`, generated: false, conditionKey: e.conditions[c].key, respondent: null, weight, submittedAt: '2027-03-01T12:00:00.000Z', values, contentHash: contentHash(id, null, answered, weight) };
  });
  const stored = await store.responses.ingest(e.key, items, '2027-03-01T12:00:00.000Z', null);
  if (stored.kind !== 'stored') throw new Error(`not stored: ${stored.kind}`);
  return { store, e: (await store.experiments.getBySlug('weighted'))! };
}

const strip = (body: object): unknown => JSON.parse(JSON.stringify({ ...body, computedAt: null }));

describe('work moved off the request thread', () => {
  it('comparisons of integer items (counts), with and without a margin, equal the in-thread replies', async () => {
    const { store, e } = await seeded();
    const { inWorker, inThread, pool } = services(store);
    let compared = 0;
    for (const measure of e.measures) {
      for (const [a, b] of [
        [0, 1],
        [2, 0],
      ]) {
        const target: ComparisonTarget = { experiment: e, measure, a: e.conditions[a], b: e.conditions[b] };
        for (const options of [
          DEFAULT_COMPARISON_OPTIONS,
          { alternative: 'less' as const, confidenceLevel: 0.9, includeExcluded: true, margin: 0.5 },
          { alternative: 'greater' as const, confidenceLevel: 0.99, includeExcluded: false, margin: 3 },
        ]) {
          const w = await inWorker.comparison(target, options);
          store.responses.sortedCache.clear();
          const t = await inThread.comparison(target, options);
          expect(strip(w.body), `${measure.id} ${a}-${b}`).toEqual(strip(t.body));
          expect(JSON.stringify(strip(w.body))).toBe(JSON.stringify(strip(t.body)));
          expect(w.etag).toBe(t.etag);
          if ('margin' in options) expect(w.body.equivalence?.margin).toBe(options.margin);
          else expect(w.body.equivalence).toBeNull();
          compared++;
        }
      }
    }
    expect(inWorker.paths.workerComputes).toBe(compared);
    expect(inWorker.paths.inThreadComputes).toBe(0);
    expect(inThread.paths.workerComputes).toBe(0);
    expect(pool.stats.fallbacks).toBe(0);
  });

  it('box plots drawn in a worker are the same bytes as in-thread and as drawn from the Samples directly', async () => {
    const { store, e } = await seeded();
    const { inWorker, inThread, pool } = services(store);
    for (const measure of e.measures) {
      const target: ComparisonTarget = { experiment: e, measure, a: e.conditions[1], b: e.conditions[2] };
      for (const includeExcluded of [false, true]) {
        for (const range of ['scale', 'data'] as const) {
          const w = await inWorker.chart(target, includeExcluded, undefined, range);
          const t = await inThread.chart(target, includeExcluded, undefined, range);
          expect(w.svg).toBe(t.svg);
          expect(w.etag).toBe(t.etag);
          // The drawing as the service made it before it could run in a worker.
          const snapshot = await readSnapshot(store, measure, [target.a.key, target.b.key], includeExcluded);
          const { a, b } = samplesOf(measure, snapshot);
          const direct = renderDistributionChart({
            measureLabel: measure.label,
            scale: { min: measure.min, max: measure.max, integer: measure.integer },
            groups: [a, b].map((x, i) => distributionGroupFromSample([target.a, target.b][i].label, x, { ...describeSample(x), shapiroWilk: null })),
            id: `chart-${measure.id}${range === 'data' ? '-data' : ''}`,
            range,
          });
          expect(w.svg).toBe(direct);
        }
      }
      const wo = await inWorker.omnibusChart(e, measure, true);
      const to = await inThread.omnibusChart(e, measure, true);
      expect(wo.svg).toBe(to.svg);
      expect(wo.etag).toBe(to.etag);
      expect(wo.svg.startsWith('<svg')).toBe(true);
    }
    expect(inWorker.paths.workerCharts).toBe(e.measures.length * 5);
    expect(inWorker.paths.inThreadCharts).toBe(0);
    expect(inThread.paths.workerCharts).toBe(0);
    expect(pool.stats.fallbacks).toBe(0);
  });

  it('the omnibus of integer items runs in the worker pool and equals the in-thread reply', async () => {
    const { store, e } = await seeded();
    const { inWorker, inThread, pool } = services(store);
    for (const measure of e.measures) {
      for (const options of [
        { includeExcluded: false, margin: null },
        { includeExcluded: true, margin: 1.5 },
      ]) {
        const w = await inWorker.omnibus(e, measure, options);
        const t = await inThread.omnibus(e, measure, options);
        expect(JSON.stringify(strip(w.body))).toBe(JSON.stringify(strip(t.body)));
        expect(w.etag).toBe(t.etag);
      }
    }
    expect(inWorker.paths.workerComputes).toBe(e.measures.length * 2);
    expect(inThread.paths.workerComputes).toBe(0);
    expect(pool.stats.fallbacks).toBe(0);
  });

  it('the weighted block and the covariate-adjusted block computed in a worker equal the in-thread ones', async () => {
    const { store, e } = await weightedStudy();
    const { inWorker, inThread, pool } = services(store);
    const covariates = [e.measures[2]];
    for (const measure of e.measures.slice(0, 2)) {
      const target: ComparisonTarget = { experiment: e, measure, a: e.conditions[0], b: e.conditions[1] };
      for (const options of [DEFAULT_COMPARISON_OPTIONS, { alternative: 'greater' as const, confidenceLevel: 0.9, includeExcluded: false }]) {
        const w = await inWorker.comparisonWithAdjustment(target, options, covariates);
        store.responses.sortedCache.clear();
        const t = await inThread.comparisonWithAdjustment(target, options, covariates);
        expect(w.body.weighted, measure.id).not.toBeNull();
        expect(w.body.adjusted, measure.id).toBeDefined();
        expect(JSON.stringify(strip(w.body))).toBe(JSON.stringify(strip(t.body)));
        expect(w.etag).toBe(t.etag);
      }
    }
    // Per request: the comparison, its weighted block and the adjusted fit, each in the worker.
    expect(inWorker.paths.workerComputes).toBe(2 * 2 * 3);
    expect(inThread.paths.workerComputes).toBe(0);
    expect(pool.stats.fallbacks).toBe(0);
  });

  it('identical requests that arrive together share one computation, and the cached answer keeps its ETag', async () => {
    const { store, e } = await seeded();
    const { inWorker } = services(store);
    const target: ComparisonTarget = { experiment: e, measure: e.measures[1], a: e.conditions[0], b: e.conditions[1] };
    const charts = await Promise.all([1, 2, 3].map(() => inWorker.chart(target, false)));
    const comparisons = await Promise.all([1, 2, 3].map(() => inWorker.comparison(target, DEFAULT_COMPARISON_OPTIONS)));
    const omnibuses = await Promise.all([1, 2, 3].map(() => inWorker.omnibus(e, e.measures[0], { includeExcluded: false, margin: null })));
    expect(inWorker.paths.workerCharts).toBe(1);
    expect(inWorker.paths.workerComputes).toBe(2); // one comparison, one omnibus
    for (const list of [charts, comparisons, omnibuses] as { etag: string }[][]) expect(new Set(list.map((x) => x.etag)).size).toBe(1);
    expect(new Set(charts.map((c) => c.svg)).size).toBe(1);
    // Asked again: from the cache, same tag, nothing computed.
    const again = await inWorker.chart(target, false);
    expect(again.etag).toBe(charts[0].etag);
    expect(inWorker.paths.workerCharts).toBe(1);
  });
});
