/**
 * Bounded read cost: the family cap (pairs × measures, 422 family-too-large on GET …/comparisons, comparisons.csv
 * and omnibus.csv), the closed set of confidence levels, the family cache with single-flight, and the read rate
 * limit (ReadBudget with a clock passed in; a 304 is free; a refused read is a 429 problem+json).
 */
import { afterEach, describe, expect, it } from 'vitest';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { ReadBudget } from '../../server/http/read-rate-limit.js';
import { MAX_FAMILY_COMPARISONS } from '../../server/services/comparisons/service.js';
import { CONFIDENCE_LEVELS } from '../../server/schemas/comparisons.js';

let t: TestApp | null = null;
afterEach(async () => {
  await t?.close();
  t = null;
});

/** An invented study with `k` conditions and `m` integer items (0–10), each answered `n` times per condition. */
async function wideStudy(app: TestApp, id: string, k: number, m: number, n: number): Promise<void> {
  const conditions = Array.from({ length: k }, (_, i) => ({ id: `c${i}` }));
  const measures = Array.from({ length: m }, (_, j) => ({ id: `q${j}`, min: 0, max: 10, integer: true }));
  const created = await app.request({ method: 'POST', url: '/v1/experiments', payload: { id, title: 'Invented wide study', conditions, measures } });
  expect(created.statusCode, created.body).toBe(201);
  const responses = [];
  for (let c = 0; c < k; c++) {
    for (let r = 0; r < n; r++) responses.push({ condition: `c${c}`, values: Object.fromEntries(measures.map((q, j) => [q.id, (r * 7 + c + j) % 11])) });
  }
  const res = await app.request({ method: 'POST', url: `/v1/experiments/${id}/responses/batch`, payload: { responses } });
  expect(res.statusCode, res.body).toBe(201);
}

describe('family cap', () => {
  it(`refuses a family above ${MAX_FAMILY_COMPARISONS} comparisons with 422 family-too-large naming the cap and how to narrow it`, async () => {
    t = await startTestApp();
    // 8 conditions (28 pairs) × 18 items = 504 comparisons with pairs=all; 18 with pairs=first.
    await wideStudy(t, 'wide', 8, 18, 3);
    for (const url of ['/v1/experiments/wide/comparisons?pairs=all', '/v1/experiments/wide/comparisons.csv', '/v1/experiments/wide/omnibus.csv']) {
      const res = await t.request({ method: 'GET', url });
      expect(res.statusCode, `${url}: ${res.body}`).toBe(422);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      const body = res.json();
      expect(body).toMatchObject({ type: 'urn:splitballot:problem:family-too-large', title: 'Comparison family too large', status: 422 });
      expect(body.detail).toContain('504 comparisons (18 measures × 28 pairs of conditions)');
      expect(body.detail).toContain(`the limit is ${MAX_FAMILY_COMPARISONS} per request`);
      expect(body.detail).toContain('pairs=first');
    }
    // Narrowed: the first pair only is answered.
    const first = await t.request({ method: 'GET', url: '/v1/experiments/wide/comparisons?pairs=first' });
    expect(first.statusCode, first.body).toBe(200);
    expect(first.json().comparisons).toHaveLength(18);
    const csv = await t.request({ method: 'GET', url: '/v1/experiments/wide/comparisons.csv?pairs=first' });
    expect(csv.statusCode, csv.body).toBe(200);
  });

  it('a family is cached whole: a repeat computes nothing, identical concurrent requests share one computation', async () => {
    t = await startTestApp();
    await wideStudy(t, 'mid', 4, 5, 10);
    const service = t.app.comparisons;
    const url = '/v1/experiments/mid/comparisons?pairs=all';
    const before = service.paths.inThreadComputes;
    const replies = await Promise.all([1, 2, 3].map(() => t!.request({ method: 'GET', url })));
    for (const r of replies) expect(r.statusCode, r.body).toBe(200);
    expect(new Set(replies.map((r) => r.body)).size).toBe(1);
    // 5 measures × 6 pairs = 30 comparisons, computed once for the three requests.
    expect(service.paths.inThreadComputes - before).toBe(30);
    const again = await t.request({ method: 'GET', url });
    expect(again.body).toBe(replies[0].body);
    expect(service.paths.inThreadComputes - before).toBe(30);
    const notModified = await t.request({ method: 'GET', url, headers: { 'if-none-match': String(again.headers.etag) } });
    expect(notModified.statusCode).toBe(304);
  });
});

describe('confidence levels', () => {
  it('accepts the documented set and refuses any other level with a 400 naming the set', async () => {
    t = await startTestApp();
    const created = await t.createWater();
    expect(created.statusCode).toBe(201);
    expect(CONFIDENCE_LEVELS).toEqual([0.5, 0.8, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999]);
    for (const level of CONFIDENCE_LEVELS) {
      const res = await t.request({ method: 'GET', url: `/v1/experiments/water-bill-2027/comparisons/satisfaction?confidenceLevel=${level}` });
      expect(res.statusCode, `${level}: ${res.body}`).toBe(200);
      expect(res.json().welch.ci.level).toBe(level);
    }
    for (const level of ['0.951', '0.9499', '0.123']) {
      const res = await t.request({ method: 'GET', url: `/v1/experiments/water-bill-2027/comparisons?confidenceLevel=${level}` });
      expect(res.statusCode, res.body).toBe(400);
      const body = res.json();
      expect(body.type).toBe('urn:splitballot:problem:invalid-parameters');
      expect(body.errors).toEqual([expect.objectContaining({ path: 'confidenceLevel', message: 'must be one of 0.5, 0.8, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999' })]);
    }
  });
});

describe('ReadBudget', () => {
  it('holds a burst of a sixth of the minute, refills at perMinute / 60 s, and says when to retry', () => {
    const b = new ReadBudget(600); // 10 a second, bursts of 100
    expect(b.burst).toBe(100);
    for (let i = 0; i < 100; i++) {
      expect(b.check('k', 0).room).toBe(true);
      b.charge('k', 0);
    }
    expect(b.check('k', 0)).toEqual({ room: false, remaining: 0, retryAfterS: 1 });
    // 0.5 s later 5 replies have come back.
    expect(b.check('k', 500)).toMatchObject({ room: true, remaining: 5 });
    // Another key and address has its own bucket.
    expect(b.check('other', 0)).toMatchObject({ room: true, remaining: 100 });
    // Long run: a client asking 100 times a second for 10 minutes gets at most burst + 10 a second.
    const c = new ReadBudget(600);
    let served = 0;
    for (let now = 0; now < 600_000; now += 10) {
      if (c.check('k', now).room) {
        c.charge('k', now);
        served++;
      }
    }
    expect(served).toBeLessThanOrEqual(100 + 6000 + 1);
    expect(served).toBeGreaterThanOrEqual(6000);
  });
});

describe('read rate limit over HTTP', () => {
  it('counts computed replies per key; a 304 is free; beyond the budget a 429 problem+json with Retry-After', async () => {
    t = await startTestApp({ config: { rateLimitReadPerMinute: 60 } }); // bursts of 10
    expect((await t.createWater()).statusCode).toBe(201);
    const reader = await t.key('read');
    const url = '/v1/experiments/water-bill-2027/comparisons/satisfaction';
    const first = await t.request({ method: 'GET', url, key: reader });
    expect(first.statusCode).toBe(200);
    const etag = String(first.headers.etag);
    // Fifty revalidations answered 304 cost nothing.
    for (let i = 0; i < 50; i++) expect((await t.request({ method: 'GET', url, key: reader, headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    // Nine more computed replies fit the burst of 10 …
    for (let i = 0; i < 9; i++) expect((await t.request({ method: 'GET', url, key: reader })).statusCode).toBe(200);
    // … the next is refused.
    const refused = await t.request({ method: 'GET', url, key: reader });
    expect(refused.statusCode).toBe(429);
    expect(refused.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect(refused.headers['retry-after']).toBe('1');
    expect(refused.json()).toMatchObject({ type: 'urn:splitballot:problem:rate-limited', title: 'Too many requests', status: 429 });
    expect(refused.json().detail).toContain('More than 60 read replies per minute (bursts of 10) from this key and address');
    // Another key is not affected, and ingest is not counted here.
    expect((await t.request({ method: 'GET', url })).statusCode).toBe(200);
  });
});
