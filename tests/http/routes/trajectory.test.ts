/**
 * The trajectory routes (…/comparisons/{measure}/trajectory and trajectory.svg): the 30-answers-per-condition floor
 * (no running value and no crossing before it, however small an early p is), the cache with its strong ETag (304
 * with If-None-Match; new data → new ETag; concurrent identical requests share one computation), and the chart's
 * planned-size and look marks. All data are invented (the water-utility study).
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { startTestApp, TEST_ENGINE, WATER_ID, type TestApp } from '../../helpers/app.js';
import { sharedComparePool } from '../../../server/services/comparisons/worker-pool.js';
import { computeTrajectory } from '../../../server/services/monitoring/trajectory.js';

const TRAJ = `/v1/experiments/${WATER_ID}/comparisons/fair_price/trajectory`;

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

/** Deterministic invented prices (a small LCG), the same distribution in both conditions. */
function prices(perCondition: number, start: number, seed: number) {
  let s = seed >>> 0;
  const next = () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
  const items: Record<string, unknown>[] = [];
  for (let i = 0; i < perCondition; i++) {
    for (const condition of ['bill-first', 'service-first']) {
      items.push({ responseId: `p-${start + i}-${condition}`, condition, values: { satisfaction: 5, trust: 4, fair_price: Math.round(next() * 20000) / 100 } });
    }
  }
  return items;
}

async function post(items: Record<string, unknown>[]): Promise<void> {
  const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: items } });
  expect(res.statusCode, res.body).toBe(201);
}

type Point = { n: number; nA: number; nB: number; provisional: boolean; p: number | null; runningP: number | null; runningLower: number | null; runningUpper: number | null };

describe('trajectory: the floor of 30 answers per condition', () => {
  it('an early p below 1e-10 at 2 vs 2 answers is provisional: no running value and no crossing drawn before the floor', async () => {
    expect((await t.createWater()).statusCode).toBe(201);
    // Five first answers with almost no spread and a gap of 10 between the conditions: a huge early z.
    await post([
      { responseId: 'e1', condition: 'bill-first', values: { satisfaction: 5, trust: 4, fair_price: 50 } },
      { responseId: 'e2', condition: 'service-first', values: { satisfaction: 5, trust: 4, fair_price: 60 } },
      { responseId: 'e3', condition: 'bill-first', values: { satisfaction: 5, trust: 4, fair_price: 50.01 } },
      { responseId: 'e4', condition: 'service-first', values: { satisfaction: 5, trust: 4, fair_price: 60.01 } },
      { responseId: 'e5', condition: 'bill-first', values: { satisfaction: 5, trust: 4, fair_price: 50.02 } },
    ]);
    await post(prices(40, 0, 7)); // then 40 per condition from one distribution
    const res = await t.request({ method: 'GET', url: TRAJ });
    expect(res.statusCode).toBe(200);
    const body = res.json() as { floorPerCondition: number; points: Point[] };
    expect(body.floorPerCondition).toBe(30);
    const pts = body.points;
    // The setting of the report: some early point (2 vs 2 answers here) has a p far below α (it underflows to 0).
    const early = pts.find((p) => p.p !== null && p.p < 1e-10);
    expect(early, JSON.stringify(pts.slice(0, 3))).toBeDefined();
    expect(Math.min(early!.nA, early!.nB)).toBeLessThan(30);
    for (const p of pts) {
      const below = Math.min(p.nA, p.nB) < 30;
      expect(p.provisional, `n = ${p.n} (${p.nA} vs ${p.nB})`).toBe(below);
      if (below) expect([p.runningP, p.runningLower, p.runningUpper], `n = ${p.n}`).toEqual([null, null, null]);
    }
    // From the floor on the running values are the minimum of p and the intersection of the intervals.
    const counted = pts.filter((p) => !p.provisional);
    expect(counted.length).toBeGreaterThan(5);
    for (let i = 1; i < counted.length; i++) {
      expect(counted[i].runningP!).toBeLessThanOrEqual(counted[i - 1].runningP!);
      expect(counted[i].runningLower!).toBeGreaterThanOrEqual(counted[i - 1].runningLower!);
      expect(counted[i].runningUpper!).toBeLessThanOrEqual(counted[i - 1].runningUpper!);
    }
    // The running p from the floor on does not reach α here (same distribution), so the chart marks no crossing,
    // and nothing in it claims a crossing at the early n.
    expect(counted[counted.length - 1].runningP!).toBeGreaterThan(0.05);
    const svg = await t.request({ method: 'GET', url: `${TRAJ}.svg` });
    expect(svg.statusCode).toBe(200);
    expect(svg.body).not.toContain('class="first-crossing"');
    expect(svg.body).toContain('class="early-zone"');
    expect(svg.body).toContain('It has not reached α = 0.05.');
    // The p-line of the strip starts at the first counted point, not before.
    const firstCountedX = svg.body.match(/<polyline class="p-line" points="([\d.]+),/)![1];
    const zone = svg.body.match(/<rect class="early-zone" x="([\d.]+)" y="[\d.]+" width="([\d.]+)"/)!;
    expect(Number(firstCountedX)).toBeCloseTo(Number(zone[1]) + Number(zone[2]), 1); // same pixel, to 2 decimals
  });
});

describe('trajectory: cache and ETag', () => {
  it('304 with If-None-Match; new data → new ETag and new numbers; the SVG has its own tag', async () => {
    expect((await t.createWater({ plannedPerCondition: 100 })).statusCode).toBe(201);
    await post(prices(35, 0, 11));
    const first = await t.request({ method: 'GET', url: TRAJ });
    expect(first.statusCode).toBe(200);
    const etag = first.headers.etag as string;
    expect(etag).toMatch(/^"[\w-]+"$/);
    expect(first.headers['cache-control']).toBe('private, no-cache');
    const again = await t.request({ method: 'GET', url: TRAJ, headers: { 'if-none-match': etag } });
    expect(again.statusCode).toBe(304);
    expect(again.body).toBe('');
    const svg = await t.request({ method: 'GET', url: `${TRAJ}.svg` });
    const svgTag = svg.headers.etag as string;
    expect(svgTag).toMatch(/^"[\w-]+"$/);
    expect(svgTag).not.toBe(etag);
    expect((await t.request({ method: 'GET', url: `${TRAJ}.svg`, headers: { 'if-none-match': svgTag } })).statusCode).toBe(304);
    // The planned size (2 × 100, beyond 1.5 × the 70 answers so far) is named on the chart.
    expect(svg.body).toContain('planned 200 →');

    await post(prices(5, 100, 12));
    const changed = await t.request({ method: 'GET', url: TRAJ, headers: { 'if-none-match': etag } });
    expect(changed.statusCode).toBe(200);
    expect(changed.headers.etag).not.toBe(etag);
    expect(changed.json().dataVersion).toBeGreaterThan(first.json().dataVersion);
    expect(changed.json().points.at(-1).n).toBe(80);
    expect((await t.request({ method: 'GET', url: `${TRAJ}.svg`, headers: { 'if-none-match': svgTag } })).statusCode).toBe(200);
  });

  it('concurrent identical requests share one computation; a recorded look changes the SVG tag and is marked', async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' }, plannedPerCondition: 100 })).statusCode).toBe(201);
    await post(prices(40, 0, 21));
    const service = t.app.comparisons;
    const computedBefore = service.paths.trajectories;
    const replies = await Promise.all([1, 2, 3, 4].map(() => t.request({ method: 'GET', url: TRAJ })));
    expect(replies.map((r) => r.statusCode)).toEqual([200, 200, 200, 200]);
    expect(new Set(replies.map((r) => r.headers.etag)).size).toBe(1);
    // One computation; the three other requests waited for it.
    expect(service.paths.trajectories - computedBefore).toBe(1);
    // On a database file it ran in the worker pool (read and pass), and gives exactly what the in-thread code gives.
    // PostgreSQL has no worker read (readArrivalInWorker is the SQLite store's): there it runs in the thread.
    const pool = sharedComparePool();
    const tasksBefore = pool.stats.tasks;
    const fallbacksBefore = pool.stats.fallbacks;
    const e = (await t.store.experiments.getBySlug(WATER_ID))!;
    const target = { experiment: e, measure: e.measures.find((m) => m.id === 'fair_price')!, a: e.conditions[0], b: e.conditions[1] };
    const inWorker = await computeTrajectory(t.store, target, pool);
    expect(pool.stats.tasks - tasksBefore).toBe(TEST_ENGINE === 'sqlite' ? 1 : 0);
    expect(pool.stats.fallbacks - fallbacksBefore).toBe(0);
    const inThread = await computeTrajectory(t.store, target, null);
    expect(inWorker).toEqual(inThread);
    expect(inWorker).toEqual(replies[0].json());

    const before = await t.request({ method: 'GET', url: `${TRAJ}.svg` });
    const recorded = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/looks`, payload: { measure: 'fair_price' } });
    expect(recorded.statusCode, recorded.body).toBe(201);
    const after = await t.request({ method: 'GET', url: `${TRAJ}.svg`, headers: { 'if-none-match': before.headers.etag as string } });
    expect(after.statusCode).toBe(200);
    expect(after.body).toContain('class="look-mark"');
    expect(after.body).toContain('look 1');
    // The JSON does not depend on looks: its tag stays.
    const json = await t.request({ method: 'GET', url: TRAJ, headers: { 'if-none-match': replies[0].headers.etag as string } });
    expect(json.statusCode).toBe(304);
  });
});
