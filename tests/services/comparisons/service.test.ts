/**
 * Comparisons over HTTP: the contract fields, the pair defaults, every 4xx with problem+json, access by scope,
 * ETag/304, the cache and its invalidation (new data, exclusions, refused values, definition changes), the chart,
 * and the family with adjusted p-values checked against R's p.adjust.
 * All data are invented for the tests (a small deterministic generator, no randomness).
 */
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { ifNoneMatchMatches } from '../../../server/http/conditional.js';
import { LruCache } from '../../../server/services/comparisons/cache.js';
import { adjustPValues } from '../../../stats/adjust.js';
import { compare, fromValues, sensitivity } from '../../../stats/index.js';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';
import rReference from '../../fixtures/r-reference.json' with { type: 'json' };
import rAdjust from '../../fixtures/r-adjust.json' with { type: 'json' };

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

const base = `/v1/experiments/${WATER_ID}`;

/** Deterministic invented answers: a linear congruential generator (no Math.random). */
function waterData(n: number, seed = 1) {
  let s = seed;
  const next = () => {
    s = (s * 1103515245 + 12345) % 2147483648;
    return s / 2147483648;
  };
  const responses = [];
  for (let i = 0; i < n; i++) {
    const condition = i % 2 === 0 ? 'bill-first' : 'service-first';
    const shift = condition === 'bill-first' ? -1 : 0;
    responses.push({
      responseId: `w${seed}-${i}`,
      respondent: `person-${i % 17}`,
      condition,
      values: {
        satisfaction: Math.max(0, Math.min(10, Math.round(6 + shift + 4 * (next() - 0.5)))),
        trust: 1 + Math.floor(next() * 7),
        fair_price: Math.round(200 * next() * next() * 100) / 100,
      },
    });
  }
  return responses;
}

async function postBatch(experiment: string, responses: unknown[]): Promise<void> {
  for (let i = 0; i < responses.length; i += 10_000) {
    const res = await t.request({ method: 'POST', url: `/v1/experiments/${experiment}/responses/batch`, payload: { responses: responses.slice(i, i + 10_000) } });
    expect(res.statusCode, res.body).toBe(201);
  }
}

function expectProblem(res: { statusCode: number; headers: Record<string, unknown>; json(): unknown }, status: number, type: string) {
  expect(res.statusCode).toBe(status);
  expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
  const body = res.json() as Record<string, unknown>;
  expect(body).toMatchObject({ type: `urn:splitballot:problem:${type}`, status });
  expect(typeof body.detail).toBe('string');
  return body;
}

const CONTRACT_KEYS = [
  'experiment',
  'measure',
  'a',
  'b',
  'dataVersion',
  'computedAt',
  'groups',
  'welch',
  'student',
  'mannWhitney',
  'hodgesLehmann',
  'effectSizes',
  'robust',
  'flags',
  'monitoring',
  'equivalence',
  'weighted',
  'sensitivity',
  'flaggedAnswers',
];

function valuesOf(responses: ReturnType<typeof waterData>, measure: 'satisfaction' | 'trust' | 'fair_price', condition: string): number[] {
  return responses.filter((r) => r.condition === condition).map((r) => r.values[measure]);
}

describe('GET /v1/experiments/{id}/comparisons/{measure}', () => {
  it('answers the contract; groups…robust are exactly stats.compare() on the same answers (counts path and sorted-values path)', async () => {
    await t.createWater();
    const data = waterData(300);
    await postBatch(WATER_ID, data);
    for (const measure of ['satisfaction', 'trust', 'fair_price'] as const) {
      const res = await t.request({ method: 'GET', url: `${base}/comparisons/${measure}` });
      expect(res.statusCode).toBe(200);
      expect(res.headers['content-type']).toMatch(/^application\/json/);
      expect(res.headers['cache-control']).toBe('private, no-cache');
      expect(res.headers.etag).toMatch(/^"[A-Za-z0-9_-]{32}"$/);
      const body = res.json();
      expect(Object.keys(body)).toEqual(CONTRACT_KEYS);
      expect(body).toMatchObject({ experiment: WATER_ID, measure, a: 'bill-first', b: 'service-first', dataVersion: 1 });
      expect(Date.parse(body.computedAt)).not.toBeNaN();
      // Same Sample (distinct values + counts) either way, so the same code gives the same bits.
      const expected = JSON.parse(JSON.stringify(compare(valuesOf(data, measure, 'bill-first'), valuesOf(data, measure, 'service-first'))));
      for (const k of ['groups', 'welch', 'student', 'mannWhitney', 'hodgesLehmann', 'effectSizes', 'robust']) expect(body[k]).toEqual(expected[k]);
      expect(body.groups.a.n).toBe(150);
      // The water study plans 400 per condition: the interim flag is always there while it runs.
      expect(body.flags.map((f: { code: string }) => f.code)).toContain('interim');
      expect(body).toHaveProperty('monitoring');
      // The sensitivity view is stats' sensitivity() on the same answers, with the study's alpha, scale and labels.
      const xa = fromValues(valuesOf(data, measure, 'bill-first'), 'a');
      const xb = fromValues(valuesOf(data, measure, 'service-first'), 'b');
      const scale = { satisfaction: { min: 0, max: 10, integer: true }, trust: { min: 1, max: 7, integer: true }, fair_price: { min: 0, max: 200, integer: false } }[measure]!;
      const view = sensitivity(compare(valuesOf(data, measure, 'bill-first'), valuesOf(data, measure, 'service-first')), { a: xa, b: xb }, {
        alpha: 0.05,
        scale,
        labels: { a: 'The bill questions come first', b: 'The service questions come first' },
      });
      expect(body.sensitivity).toEqual(JSON.parse(JSON.stringify(view)));
    }
  });

  it('a and b: explicit order flips the sign of every difference; one given, the other is the remaining condition', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(100));
    const ab = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` })).json();
    const ba = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price?a=service-first&b=bill-first` })).json();
    expect(ba).toMatchObject({ a: 'service-first', b: 'bill-first' });
    expect(ba.welch.meanDifference).toBeCloseTo(-ab.welch.meanDifference, 12);
    expect(ba.hodgesLehmann.estimate).toBe(-ab.hodgesLehmann.estimate);
    const onlyA = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price?a=service-first` })).json();
    expect(onlyA).toMatchObject({ a: 'service-first', b: 'bill-first' });
    const onlyB = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price?b=bill-first` })).json();
    expect(onlyB).toMatchObject({ a: 'service-first', b: 'bill-first' });
  });

  it('an empty experiment answers with nulls and reasons, never an error', async () => {
    await t.createWater();
    const res = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction` });
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body.groups.a.n).toBe(0);
    expect(body.welch.p).toBeNull();
    expect(typeof body.welch.reason).toBe('string');
    expect(body.dataVersion).toBe(0);
  });

  it('three conditions: a and b are required (422 naming both); unknown, equal and missing ones are 422 with the parameter', async () => {
    const create = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: {
        id: 'three-way',
        title: 'Three orders',
        conditions: [{ id: 'bill-first' }, { id: 'service-first' }, { id: 'neutral' }],
        measures: [{ id: 'satisfaction', min: 0, max: 10, integer: true }],
      },
    });
    expect(create.statusCode).toBe(201);
    const missing = expectProblem(await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons/satisfaction' }), 422, 'validation-failed');
    expect(missing).toEqual({
      type: 'urn:splitballot:problem:validation-failed',
      title: 'Validation failed',
      status: 422,
      detail: 'The query string does not name two different conditions to compare (a and b).',
      errors: [
        { path: 'a', message: 'is required: experiment three-way has 3 conditions (bill-first, service-first, neutral)' },
        { path: 'b', message: 'is required: experiment three-way has 3 conditions (bill-first, service-first, neutral)' },
      ],
    });
    const onlyA = expectProblem(await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons/satisfaction?a=neutral' }), 422, 'validation-failed');
    expect(onlyA.errors).toEqual([{ path: 'b', message: 'is required: experiment three-way has 3 conditions (bill-first, service-first, neutral)' }]);
    const unknown = expectProblem(
      await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons/satisfaction?a=neutral&b=price-first' }),
      422,
      'validation-failed',
    );
    expect(unknown.errors).toEqual([
      { path: 'b', message: 'is not a condition of experiment three-way (bill-first, service-first, neutral)', value: 'price-first' },
    ]);
    const same = expectProblem(await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons/satisfaction?a=neutral&b=neutral' }), 422, 'validation-failed');
    expect(same.errors).toEqual([{ path: 'b', message: 'must differ from a', value: 'neutral' }]);
    const ok = await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons/satisfaction?a=neutral&b=bill-first' });
    expect(ok.statusCode).toBe(200);
    expect(ok.json()).toMatchObject({ a: 'neutral', b: 'bill-first' });
  });

  it('unknown experiment and unknown measure → 404; bad query values → 400, each as problem+json', async () => {
    await t.createWater();
    expect(expectProblem(await t.request({ method: 'GET', url: '/v1/experiments/nope/comparisons/satisfaction' }), 404, 'not-found').detail).toBe(
      'There is no experiment "nope".',
    );
    expect(expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/loyalty` }), 404, 'not-found').detail).toBe(
      'Experiment water-bill-2027 has no measure "loyalty"; its measures are satisfaction, trust, fair_price.',
    );
    const cases: [string, string][] = [
      ['alternative=bigger', 'alternative'],
      ['confidenceLevel=1', 'confidenceLevel'],
      ['confidenceLevel=0', 'confidenceLevel'],
      ['confidenceLevel=abc', 'confidenceLevel'],
      ['includeExcluded=yes', 'includeExcluded'],
      ['colour=blue', 'colour'],
    ];
    for (const [query, path] of cases) {
      const body = expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction?${query}` }), 400, 'invalid-parameters');
      expect(body.errors, query).toEqual([expect.objectContaining({ path })]);
    }
    const level = expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction?confidenceLevel=1` }), 400, 'invalid-parameters');
    expect(level.errors).toEqual([{ path: 'confidenceLevel', message: 'must be a number strictly between 0 and 1' }]);
  });

  it('alternative and confidenceLevel reach the tests', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(120));
    const two = (await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction` })).json();
    const less = (await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction?alternative=less&confidenceLevel=0.9` })).json();
    expect(less.welch.ci.level).toBe(0.9);
    expect(less.welch.ci.lower).toBeNull();
    // bill-first is shifted down by one point: one-sided p is half the two-sided one (t < 0).
    expect(less.welch.p).toBeCloseTo(two.welch.p / 2, 12);
  });
});

describe('access', () => {
  it('an ingest key gets 403 on every comparison route; a read key may read; no key is 401; a key for another experiment is 403', async () => {
    await t.createWater();
    const ingest = await t.key('ingest');
    const read = await t.key('read');
    const urls = [`${base}/comparisons/satisfaction`, `${base}/comparisons`, `${base}/comparisons/satisfaction/chart.svg`];
    for (const url of urls) {
      const denied = expectProblem(await t.request({ method: 'GET', url, key: ingest }), 403, 'forbidden');
      expect(denied.detail).toBe('This key has the ingest scope; this route needs read or admin.');
      expect((await t.request({ method: 'GET', url, key: read })).statusCode, url).toBe(200);
      expectProblem(await t.request({ method: 'GET', url, key: null }), 401, 'unauthorized');
    }
    await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'other', title: 'Other', conditions: [{ id: 'x' }, { id: 'y' }], measures: [{ id: 'm', min: 0, max: 1 }] } });
    const otherKey = await t.key('read', 'other');
    expectProblem(await t.request({ method: 'GET', url: urls[0], key: otherKey }), 403, 'forbidden');
  });
});

describe('polling: ETag, 304 and the cache', () => {
  it('If-None-Match with the current tag → 304 without reading values or computing; the cache serves repeats', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(200));
    const counts = vi.spyOn(t.store.responses, 'getCountsSnapshot');
    const sorted = vi.spyOn(t.store.responses, 'getSortedValuesSnapshot');
    const first = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction` });
    expect(first.statusCode).toBe(200);
    expect(counts).toHaveBeenCalledTimes(1);
    const etag = first.headers.etag as string;

    const again = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': etag } });
    expect(again.statusCode).toBe(304);
    expect(again.body).toBe('');
    expect(again.headers.etag).toBe(etag);
    expect(again.headers['cache-control']).toBe('private, no-cache');
    // A weak form of the tag, a list and "*" match too (weak comparison, RFC 9110 §13.1.2).
    for (const header of [`W/${etag}`, `"other", ${etag}`, '*']) {
      expect((await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': header } })).statusCode).toBe(304);
    }
    // Another tag: 200 from the cache (same computedAt, nothing read again).
    const other = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': '"stale"' } });
    expect(other.statusCode).toBe(200);
    expect(other.json().computedAt).toBe(first.json().computedAt);
    expect(other.body).toBe(first.body);
    expect(counts).toHaveBeenCalledTimes(1);
    expect(sorted).not.toHaveBeenCalled();
    // Options are part of the key.
    const level = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction?confidenceLevel=0.9`, headers: { 'if-none-match': etag } });
    expect(level.statusCode).toBe(200);
    expect(level.headers.etag).not.toBe(etag);
    expect(counts).toHaveBeenCalledTimes(2);
  });

  it('new data invalidate: the old tag gets 200 with the new dataVersion; only the measure asked for is recomputed', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(100));
    const counts = vi.spyOn(t.store.responses, 'getCountsSnapshot');
    const sat1 = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction` });
    const trust1 = await t.request({ method: 'GET', url: `${base}/comparisons/trust` });
    expect(counts).toHaveBeenCalledTimes(2);
    await postBatch(WATER_ID, [{ responseId: 'late-1', condition: 'bill-first', values: { satisfaction: 10, trust: 7, fair_price: 199 } }]);
    const sat2 = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': sat1.headers.etag as string } });
    expect(sat2.statusCode).toBe(200);
    expect(sat2.headers.etag).not.toBe(sat1.headers.etag);
    expect(sat2.json().dataVersion).toBe(2);
    expect(sat2.json().groups.a.n).toBe(51);
    expect(counts).toHaveBeenCalledTimes(3); // satisfaction only; trust waits until it is asked for
    const trust2 = await t.request({ method: 'GET', url: `${base}/comparisons/trust`, headers: { 'if-none-match': trust1.headers.etag as string } });
    expect(trust2.statusCode).toBe(200);
    expect(counts).toHaveBeenCalledTimes(4);
    // Now both are current again.
    expect((await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': sat2.headers.etag as string } })).statusCode).toBe(304);
  });

  it('an exclusion invalidates, the excluded flag appears, includeExcluded counts it in; restoring brings the same numbers back', async () => {
    await t.createWater();
    const data = waterData(80);
    await postBatch(WATER_ID, data);
    const before = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` });
    const ex = await t.request({ method: 'POST', url: `${base}/responses/w1-0/exclusion`, payload: { reason: 'failed attention check' } });
    expect(ex.statusCode).toBe(200);
    const after = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price`, headers: { 'if-none-match': before.headers.etag as string } });
    expect(after.statusCode).toBe(200);
    const body = after.json();
    expect(body.dataVersion).toBe(2);
    expect(body.groups.a.n).toBe(39);
    const excluded = body.flags.find((f: { code: string }) => f.code === 'excluded');
    expect(excluded).toEqual({ code: 'excluded', severity: 'info', message: '1 excluded response was left out of this comparison.', detail: { excluded: 1 } });
    const included = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price?includeExcluded=true` })).json();
    expect(included.groups.a.n).toBe(40);
    expect(included.flags.map((f: { code: string }) => f.code)).not.toContain('excluded');
    expect(included.welch).toEqual(before.json().welch);
    const restore = await t.request({ method: 'DELETE', url: `${base}/responses/w1-0/exclusion` });
    expect(restore.json()).toMatchObject({ excluded: false, changed: true, dataVersion: 3 });
    const restored = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` })).json();
    expect(restored.dataVersion).toBe(3);
    for (const k of ['groups', 'welch', 'mannWhitney', 'hodgesLehmann', 'flags']) expect(restored[k]).toEqual(before.json()[k]);
  });

  it('refused values and definition changes move the tag although dataVersion does not', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(60));
    const first = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction` });
    const refused = await t.request({ method: 'POST', url: `${base}/responses`, payload: { condition: 'bill-first', values: { satisfaction: 11, trust: 4, fair_price: 20 } } });
    expect(refused.statusCode).toBe(422);
    const second = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': first.headers.etag as string } });
    expect(second.statusCode).toBe(200);
    expect(second.json().dataVersion).toBe(1);
    expect(second.json().flags.map((f: { code: string }) => f.code)).toContain('out_of_range');
    const patch = await t.request({ method: 'PATCH', url: base, payload: { alpha: 0.01 } });
    expect(patch.statusCode).toBe(200);
    const third = await t.request({ method: 'GET', url: `${base}/comparisons/satisfaction`, headers: { 'if-none-match': second.headers.etag as string } });
    expect(third.statusCode).toBe(200);
    expect(third.headers.etag).not.toBe(second.headers.etag);
  });

  it('the tag is the same after a restart (it depends on the data, not on the process)', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(40));
    const first = await t.request({ method: 'GET', url: `${base}/comparisons/trust` });
    await t.restart();
    const again = await t.request({ method: 'GET', url: `${base}/comparisons/trust`, headers: { 'if-none-match': first.headers.etag as string } });
    expect(again.statusCode).toBe(304);
  });

  it('one cache per store, bounded: entries and bytes', async () => {
    await t.createWater();
    const service = t.app.comparisons;
    expect(t.app.comparisons).toBe(service);
    await t.request({ method: 'GET', url: `${base}/comparisons/trust` });
    expect(service.cache.size).toBe(1);
    expect(service.cache.totalBytes).toBeGreaterThan(1000);

    const lru = new LruCache<string>(3, 100);
    lru.set('a', 'A', 10);
    lru.set('b', 'B', 10);
    lru.set('c', 'C', 10);
    expect(lru.get('a')).toBe('A'); // a becomes the most recent
    lru.set('d', 'D', 10); // evicts b, the least recently used
    expect(lru.get('b')).toBeUndefined();
    expect([lru.get('a'), lru.get('c'), lru.get('d')]).toEqual(['A', 'C', 'D']);
    lru.set('e', 'E', 85); // 10 + 10 + 10 + 85 > 100: the oldest go until it fits
    expect(lru.totalBytes).toBeLessThanOrEqual(100);
    expect(lru.get('e')).toBe('E');
    lru.set('huge', 'H', 101); // larger than the whole cache: not kept
    expect(lru.get('huge')).toBeUndefined();
  });

  it('ifNoneMatchMatches', () => {
    expect(ifNoneMatchMatches(undefined, '"x"')).toBe(false);
    expect(ifNoneMatchMatches('"x"', '"x"')).toBe(true);
    expect(ifNoneMatchMatches('W/"x"', '"x"')).toBe(true);
    expect(ifNoneMatchMatches('"y" , "x"', '"x"')).toBe(true);
    expect(ifNoneMatchMatches('"y"', '"x"')).toBe(false);
    expect(ifNoneMatchMatches(' * ', '"x"')).toBe(true);
  });
});

describe('GET …/comparisons/{measure}/chart.svg', () => {
  it('answers an SVG box plot with both conditions, with ETag/304, and the same 4xx as the comparison', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(100));
    const res = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price/chart.svg` });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toBe('image/svg+xml; charset=utf-8');
    expect(res.body.startsWith('<svg')).toBe(true);
    expect(res.body).toContain('The bill questions come first');
    expect(res.body).toContain('The service questions come first');
    expect(res.headers['cache-control']).toBe('private, no-cache');
    const etag = res.headers.etag as string;
    expect((await t.request({ method: 'GET', url: `${base}/comparisons/fair_price/chart.svg`, headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    // The chart's tag is not the comparison's.
    const cmp = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` });
    expect(cmp.headers.etag).not.toBe(etag);
    // Excluding one answer changes the picture.
    await t.request({ method: 'POST', url: `${base}/responses/w1-1/exclusion`, payload: { reason: 'duplicate' } });
    const after = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price/chart.svg`, headers: { 'if-none-match': etag } });
    expect(after.statusCode).toBe(200);
    const withExcluded = await t.request({ method: 'GET', url: `${base}/comparisons/fair_price/chart.svg?includeExcluded=true` });
    expect(withExcluded.body).toBe(res.body);
    expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/loyalty/chart.svg` }), 404, 'not-found');
    expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/trust/chart.svg?a=bill-first&b=bill-first` }), 422, 'validation-failed');
    expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons/trust/chart.svg?alternative=less` }), 400, 'invalid-parameters');
  });
});

// ---------------------------------------------------------------------------------------------------------
// The family
// ---------------------------------------------------------------------------------------------------------

interface RCase {
  alternative: string;
  confidenceLevel: number;
  welch: { p: number };
  wilcoxExact: { p: number } | null;
  coinExact: { p: number } | null;
}
interface RDataset {
  name: string;
  a: number[];
  b: number[];
  cases: RCase[];
}
const datasets = (rReference as unknown as { datasets: RDataset[] }).datasets;
const dataset = (name: string): RDataset => {
  const d = datasets.find((x) => x.name === name);
  if (!d) throw new Error(`no fixture dataset ${name}`);
  return d;
};

/** Relative closeness with the tolerance stated at the call. */
function expectRel(actual: number | null, expected: number, tol: number, what: string) {
  expect(actual, what).not.toBeNull();
  expect(Math.abs((actual as number) - expected), `${what}: got ${actual}, R ${expected}, tolerance ${tol} relative`).toBeLessThanOrEqual(tol * Math.abs(expected));
}

describe('GET /v1/experiments/{id}/comparisons (the family)', () => {
  it('every measure for the first pair, Holm by default; bh and none on request; ETag/304', async () => {
    await t.createWater();
    await postBatch(WATER_ID, waterData(150));
    const res = await t.request({ method: 'GET', url: `${base}/comparisons` });
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(Object.keys(body)).toEqual(['experiment', 'dataVersion', 'adjust', 'pairs', 'adjustedFamily', 'comparisons']);
    expect(body).toMatchObject({ experiment: WATER_ID, dataVersion: 1, adjust: 'holm', pairs: 'first' });
    expect(body.comparisons.map((c: { measure: string }) => c.measure)).toEqual(['satisfaction', 'trust', 'fair_price']);
    const single = (await t.request({ method: 'GET', url: `${base}/comparisons/trust` })).json();
    const { adjusted, role, primary, ...trust } = body.comparisons[1];
    expect(trust).toEqual(single);
    expect([role, primary]).toEqual(['outcome', false]);
    expect(adjusted.method).toBe('holm');
    const holm = adjustPValues(
      body.comparisons.map((c: { welch: { p: number } }) => c.welch.p),
      'holm',
    );
    expect(body.comparisons.map((c: { adjusted: { welchP: number } }) => c.adjusted.welchP)).toEqual(holm);
    const none = (await t.request({ method: 'GET', url: `${base}/comparisons?adjust=none` })).json();
    expect(none.comparisons.map((c: { adjusted: { welchP: number } }) => c.adjusted.welchP)).toEqual(body.comparisons.map((c: { welch: { p: number } }) => c.welch.p));
    const etag = res.headers.etag as string;
    expect((await t.request({ method: 'GET', url: `${base}/comparisons`, headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    expect((await t.request({ method: 'GET', url: `${base}/comparisons?adjust=bh`, headers: { 'if-none-match': etag } })).statusCode).toBe(200);
    await postBatch(WATER_ID, [{ responseId: 'late', condition: 'service-first', values: { satisfaction: 3, trust: 3, fair_price: 3 } }]);
    const moved = await t.request({ method: 'GET', url: `${base}/comparisons`, headers: { 'if-none-match': etag } });
    expect(moved.statusCode).toBe(200);
    expect(moved.json().dataVersion).toBe(2);
    expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons?adjust=bonferroni` }), 400, 'invalid-parameters');
    expectProblem(await t.request({ method: 'GET', url: `${base}/comparisons?pairs=some` }), 400, 'invalid-parameters');
    expectProblem(await t.request({ method: 'GET', url: '/v1/experiments/nope/comparisons' }), 404, 'not-found');
  });

  it('pairs=all: every pair of three conditions for every measure, adjusted across all of them', async () => {
    await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: {
        id: 'three-way',
        title: 'Three orders',
        conditions: [{ id: 'x' }, { id: 'y' }, { id: 'z' }],
        measures: [
          { id: 'm1', min: 0, max: 10, integer: true },
          { id: 'm2', min: 0, max: 100 },
        ],
      },
    });
    const responses = [];
    for (let i = 0; i < 90; i++) responses.push({ condition: ['x', 'y', 'z'][i % 3], values: { m1: (i * 7) % 11, m2: (i * 37) % 101 } });
    await postBatch('three-way', responses);
    const body = (await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons?pairs=all&adjust=bh' })).json();
    expect(body.comparisons.map((c: { measure: string; a: string; b: string }) => `${c.measure}:${c.a}-${c.b}`)).toEqual([
      'm1:x-y',
      'm1:x-z',
      'm1:y-z',
      'm2:x-y',
      'm2:x-z',
      'm2:y-z',
    ]);
    const bh = adjustPValues(
      body.comparisons.map((c: { mannWhitney: { p: number } }) => c.mannWhitney.p),
      'bh',
    );
    expect(body.comparisons.map((c: { adjusted: { mannWhitneyP: number } }) => c.adjusted.mannWhitneyP)).toEqual(bh);
    const first = (await t.request({ method: 'GET', url: '/v1/experiments/three-way/comparisons' })).json();
    expect(first.comparisons.map((c: { measure: string; a: string; b: string }) => `${c.measure}:${c.a}-${c.b}`)).toEqual(['m1:x-y', 'm2:x-y']);
  });

  it("the family adjustment equals R's p.adjust on the fixtures' p-values (six R reference data sets posted over HTTP)", async () => {
    // One measure per data set of tests/fixtures/r-reference.json; every response answers one measure.
    const names = ['student-sleep', 'hollander-wolfe-wilcox-help', 'n7-vs-10-continuous-shift', 'n10-vs-10-null', 'n20-vs-20-moderate-shift', 'scale10-n20-vs-25'];
    const measures = names.map((n, i) => ({ id: `m${i}`, label: n, min: -10, max: 10, integer: n.startsWith('scale10'), required: false }));
    const create = await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'family-check', title: 'R reference family', conditions: [{ id: 'a' }, { id: 'b' }], measures } });
    expect(create.statusCode, create.body).toBe(201);
    const responses: unknown[] = [];
    names.forEach((n, i) => {
      const d = dataset(n);
      for (const v of d.a) responses.push({ condition: 'a', values: { [`m${i}`]: v } });
      for (const v of d.b) responses.push({ condition: 'b', values: { [`m${i}`]: v } });
    });
    await postBatch('family-check', responses);
    // p-values and adjustments printed by R 4.2.2 (2022-11-10 r83330) from the same fixture values:
    //   p.adjust(welch_p, "holm"), p.adjust(welch_p, "BH"), and the same for the rank-sum p-values (wilcox.test exact
    //   for data without ties, coin::wilcox_test exact for data with ties — the exact conditional test the service uses).
    const R = {
      welchP: [0.079394140187358173, 0.062101343781078469, 0.10164636625346347, 0.10085810764504587, 6.6334667699696157e-5, 0.55437380060996899],
      mannWhitneyP: [0.065816536404771697, 0.2544122544122544, 0.087823940765117237, 0.16549394877568255, 7.9378349920498201e-5, 0.43888800664558947],
      holm: {
        welchP: [0.31757656074943269, 0.31050671890539233, 0.31757656074943269, 0.31757656074943269, 0.00039800800619817694, 0.55437380060996899],
        mannWhitneyP: [0.32908268202385849, 0.5088245088245088, 0.35129576306046895, 0.49648184632704762, 0.00047627009952298923, 0.5088245088245088],
      },
      bh: {
        welchP: [0.12197563950415616, 0.12197563950415616, 0.12197563950415616, 0.12197563950415616, 0.00039800800619817694, 0.55437380060996899],
        mannWhitneyP: [0.17564788153023447, 0.30529470529470526, 0.17564788153023447, 0.24824092316352381, 0.00047627009952298923, 0.43888800664558947],
      },
    };
    // The raw p-values themselves are checked too (tolerance 1e-6 relative for p-values, as everywhere).
    for (const method of ['holm', 'bh'] as const) {
      const body = (await t.request({ method: 'GET', url: `/v1/experiments/family-check/comparisons?adjust=${method}` })).json();
      expect(body.comparisons).toHaveLength(6);
      body.comparisons.forEach((c: { measure: string; welch: { p: number }; mannWhitney: { p: number; method: string }; adjusted: { welchP: number; mannWhitneyP: number } }, i: number) => {
        expect(c.mannWhitney.method, names[i]).toBe('exact');
        expectRel(c.welch.p, R.welchP[i], 1e-6, `${names[i]} welch p vs R t.test (r-reference.json)`);
        expectRel(c.mannWhitney.p, R.mannWhitneyP[i], 1e-6, `${names[i]} rank-sum p vs R (r-reference.json)`);
        expectRel(c.adjusted.welchP, R[method].welchP[i], 1e-6, `${names[i]} ${method} welch vs R p.adjust`);
        expectRel(c.adjusted.mannWhitneyP, R[method].mannWhitneyP[i], 1e-6, `${names[i]} ${method} rank-sum vs R p.adjust`);
      });
    }
  });

  it('adjustPValues (used by the family) reproduces every family of tests/fixtures/r-adjust.json (R p.adjust)', () => {
    const families = (rAdjust as unknown as { families: { name: string; p: (number | null)[]; holm: (number | null)[]; bh: (number | null)[] }[] }).families;
    for (const f of families) {
      for (const method of ['holm', 'bh'] as const) {
        const got = adjustPValues(Object.freeze([...f.p]), method);
        f[method].forEach((e, i) => {
          if (e === null) expect(got[i]).toBeNull();
          else expect(Math.abs((got[i] as number) - e), `${f.name} ${method}[${i}] vs R p.adjust`).toBeLessThanOrEqual(1e-12 * Math.abs(e));
        });
      }
    }
  });
});
