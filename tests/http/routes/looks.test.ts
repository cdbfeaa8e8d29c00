/**
 * Group-sequential looks (POST/GET /v1/experiments/{id}/looks) and the trajectory of the anytime-valid p
 * (…/comparisons/{measure}/trajectory and trajectory.svg): boundaries equal stats' spendingBoundaries for the
 * recorded fractions, the final look spends all alpha, observed z is welchToZ of the Welch t on the stored data,
 * and every 4xx is problem+json. All data are invented.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { compare } from '../../../stats/index.js';
import { anytimeValid, spendingBoundaries, welchToZ } from '../../../stats/sequential.js';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

const LOOKS = `/v1/experiments/${WATER_ID}/looks`;
const TRAJ = `/v1/experiments/${WATER_ID}/comparisons/satisfaction/trajectory`;

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

/** Deterministic invented answers (a small LCG): bill-first a little less satisfied than service-first. */
function makeAnswers(perCondition: number, start: number, seed: number, shift = 1) {
  let s = seed >>> 0;
  const next = () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
  const items: Record<string, unknown>[] = [];
  for (let i = 0; i < perCondition; i++) {
    for (const condition of ['bill-first', 'service-first']) {
      const base = condition === 'bill-first' ? 5 : 5 + shift;
      const sat = Math.max(0, Math.min(10, Math.round(base + (next() + next() + next() - 1.5) * 4)));
      items.push({
        responseId: `r-${start + i}-${condition}`,
        condition,
        values: { satisfaction: sat, trust: 1 + Math.floor(next() * 7), fair_price: Math.round(next() * 20000) / 100 },
      });
    }
  }
  return items;
}

/** Every stored (kept) satisfaction answer per condition, in arrival order, mirrored locally. */
const stored: Record<string, number[]> = { 'bill-first': [], 'service-first': [] };
async function add(perCondition: number, start: number, seed: number, shift = 1): Promise<void> {
  const items = makeAnswers(perCondition, start, seed, shift);
  const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: items } });
  expect(res.statusCode).toBe(201);
  for (const it of items) stored[it.condition as string].push((it.values as { satisfaction: number }).satisfaction);
}

beforeEach(() => {
  stored['bill-first'] = [];
  stored['service-first'] = [];
});

const look = (payload: Record<string, unknown>, key?: string | null) => t.request({ method: 'POST', url: LOOKS, payload, key });

describe('POST /v1/experiments/{id}/looks', () => {
  it("records O'Brien–Fleming looks at 25 %, 50 % and the final look; boundaries = spendingBoundaries; all alpha spent", async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' }, plannedPerCondition: 400 })).statusCode).toBe(201);
    await add(100, 0, 11);
    const first = await look({ measure: 'satisfaction' });
    expect(first.statusCode).toBe(201);
    await add(100, 100, 12);
    const second = await look({ measure: 'satisfaction' });
    expect(second.statusCode).toBe(201);
    await add(250, 200, 13); // 450 per condition: beyond the planned 400, fraction capped at 1
    const final = await look({ measure: 'satisfaction' });
    expect(final.statusCode).toBe(201);

    const looks = [first.json(), second.json(), final.json()];
    expect(looks.map((l) => l.fraction)).toEqual([0.25, 0.5, 1]);
    expect(looks.map((l) => l.number)).toEqual([1, 2, 3]);
    expect(looks.map((l) => l.final)).toEqual([false, false, true]);
    // Same fractions through stats directly: the stored boundaries are exactly those (same deterministic code).
    const ref = spendingBoundaries([0.25, 0.5, 1], { alpha: 0.05, spending: 'obrien-fleming' });
    looks.forEach((l, i) => {
      expect(l.boundaryZ).toBe(ref[i].boundaryZ);
      expect(l.cumulativeAlpha).toBe(ref[i].cumulativeAlpha);
      expect(l.alphaSpent).toBe(ref[i].alphaSpent);
      // nominalP is 2(1 − Φ(boundary)) computed with the same accurate tail: relative 1e-15.
      expect(Math.abs(l.nominalP - (ref[i].nominalP as number)) / (ref[i].nominalP as number)).toBeLessThanOrEqual(1e-15);
    });
    // The final look spends all remaining alpha: cumulative exactly alpha, increments sum to alpha (rounding only).
    expect(looks[2].cumulativeAlpha).toBe(0.05);
    expect(Math.abs(looks.reduce((s, l) => s + l.alphaSpent, 0) - 0.05)).toBeLessThanOrEqual(4 * Number.EPSILON);

    // Observed z: Welch t on the stored answers (stats compare() on the raw values) through welchToZ.
    const w = compare(Float64Array.from(stored['bill-first']), Float64Array.from(stored['service-first'])).welch;
    expect(final.json().welch.t).toBeCloseTo(w.t as number, 12); // counts vs raw values: same moments up to rounding
    expect(Math.abs(final.json().observedZ - welchToZ(w.t as number, w.df as number))).toBeLessThanOrEqual(1e-9);
    expect(final.json()).toMatchObject({
      measure: 'satisfaction',
      a: 'bill-first',
      b: 'service-first',
      nA: 450,
      nB: 450,
      plannedPerCondition: 400,
      spending: 'obrien-fleming',
      alpha: 0.05,
    });
    for (const l of looks) expect(l.crossed).toBe(Math.abs(l.observedZ) >= l.boundaryZ);
    expect(looks[0].message).toMatch(/^Look 1 \(O'Brien–Fleming plan\) at 25 % of the planned answers/);

    // After the final look nothing more can be recorded.
    await add(5, 1000, 14);
    const after = await look({ measure: 'satisfaction' });
    expect(after.statusCode).toBe(409);
    expect(after.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect(after.json()).toEqual({
      type: 'urn:splitballot:problem:look-not-possible',
      title: 'Look not possible',
      status: 409,
      detail: 'The final look (number 3, at the planned size) was already recorded for satisfaction; all alpha is spent.',
    });

    // GET lists them in recording order, with the measure filter.
    const list = await t.request({ method: 'GET', url: LOOKS, key: await t.key('read', WATER_ID) });
    expect(list.statusCode).toBe(200);
    const body = list.json();
    expect(body).toMatchObject({ experiment: WATER_ID, spending: 'obrien-fleming', plannedPerCondition: 400 });
    expect(body.looks.map((l: { boundaryZ: number }) => l.boundaryZ)).toEqual(looks.map((l) => l.boundaryZ));
    expect(body.looks[0]).not.toHaveProperty('message');
    expect((await t.request({ method: 'GET', url: `${LOOKS}?measure=trust` })).json().looks).toEqual([]);
  });

  it('Pocock looks; the reversed pair continues the same sequence with z of the other sign; no look without new answers', async () => {
    expect((await t.createWater({ monitoring: { spending: 'pocock' }, plannedPerCondition: 300 })).statusCode).toBe(201);
    await add(60, 0, 21, 0.4);
    const one = (await look({ measure: 'satisfaction' })).json();
    const again = await look({ measure: 'satisfaction', a: 'service-first', b: 'bill-first' });
    expect(again.statusCode).toBe(409);
    expect(again.json().detail).toBe('No new information since look 1 (fraction 0.2): a look must come after more answers.');
    await add(90, 60, 22, 0.4);
    const twoRes = await look({ measure: 'satisfaction', a: 'service-first', b: 'bill-first' });
    expect(twoRes.statusCode).toBe(201);
    const two = twoRes.json();
    expect(two).toMatchObject({ number: 2, a: 'service-first', b: 'bill-first', fraction: 0.5 });
    const ref = spendingBoundaries([0.2, 0.5], { alpha: 0.05, spending: 'pocock' });
    expect([one.boundaryZ, two.boundaryZ]).toEqual(ref.map((r) => r.boundaryZ));
    // The same look seen from bill-first − service-first:
    const list = (await t.request({ method: 'GET', url: LOOKS })).json().looks;
    expect(list[1]).toMatchObject({ number: 2, a: 'bill-first', b: 'service-first', observedZ: -two.observedZ });
  });

  it('409 without monitoring or without a planned size; 422 for an unknown measure or condition; 404; 400', async () => {
    expect((await t.createWater()).statusCode).toBe(201); // no monitoring declared
    const none = await look({ measure: 'satisfaction' });
    expect(none.statusCode).toBe(409);
    expect(none.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect(none.json()).toEqual({
      type: 'urn:splitballot:problem:monitoring-not-configured',
      title: 'Monitoring not configured',
      status: 409,
      detail:
        'Experiment water-bill-2027 declares no group-sequential monitoring; set monitoring: { "spending": "obrien-fleming" } (or "pocock") in its definition to record looks.',
    });
    await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: { id: 'unplanned', title: 'No size', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 's', min: 0, max: 1 }], monitoring: { spending: 'pocock' } },
    });
    const unplanned = await t.request({ method: 'POST', url: '/v1/experiments/unplanned/looks', payload: { measure: 's' } });
    expect(unplanned.statusCode).toBe(409);
    expect(unplanned.json().detail).toMatch(/has no plannedPerCondition/);

    const bad: [Record<string, unknown>, { path: string; message: string }][] = [
      [{ measure: 'happiness' }, { path: 'measure', message: 'is not a measure of this experiment' }],
      [{ measure: 'satisfaction', a: 'letter-first' }, { path: 'a', message: 'is not a condition of this experiment' }],
      [{ measure: 'satisfaction', a: 'service-first' }, { path: 'b', message: 'must differ from a' }],
      [{}, { path: 'measure', message: expect.any(String) }],
      [{ measure: 'satisfaction', spending: 'pocock' }, { path: 'spending', message: 'is not a known field' }],
    ];
    for (const [payload, error] of bad) {
      const res = await look(payload);
      expect(res.statusCode, JSON.stringify(payload)).toBe(422);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      expect(res.json()).toMatchObject({ type: 'urn:splitballot:problem:validation-failed', status: 422, errors: [expect.objectContaining(error)] });
    }
    const missing = await t.request({ method: 'POST', url: '/v1/experiments/nope/looks', payload: { measure: 'satisfaction' } });
    expect(missing.statusCode).toBe(404);
    expect((await t.request({ method: 'GET', url: `${LOOKS}?measure=happiness` })).statusCode).toBe(400);
  });

  it('a recorded look reaches a cached comparison: the dataVersion stays, the ETag moves and monitoring lists the look', async () => {
    expect((await t.createWater({ monitoring: { spending: 'pocock' }, plannedPerCondition: 400 })).statusCode).toBe(201);
    await add(100, 0, 21);
    const url = `/v1/experiments/${WATER_ID}/comparisons/satisfaction`;
    const before = await t.request({ method: 'GET', url });
    expect(before.statusCode).toBe(200);
    expect(before.json().monitoring.groupSequential.looks).toEqual([]);
    expect((await look({ measure: 'satisfaction' })).statusCode).toBe(201);
    const after = await t.request({ method: 'GET', url, headers: { 'if-none-match': before.headers.etag as string } });
    expect(after.statusCode).toBe(200);
    expect(after.headers.etag).not.toBe(before.headers.etag);
    expect(after.json().dataVersion).toBe(before.json().dataVersion);
    expect(after.json().monitoring.groupSequential.looks.map((l: { number: number }) => l.number)).toEqual([1]);
  });

  it('a look needs a defined Welch test', async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' } })).statusCode).toBe(201);
    await add(1, 0, 5);
    const res = await look({ measure: 'satisfaction' });
    expect(res.statusCode).toBe(409);
    expect(res.json().detail).toMatch(/^No look recorded: the Welch test of satisfaction is not defined yet\./);
  });

  it('who may: admin records; read keys list but cannot record; ingest keys can assign but cannot read looks or trajectories', async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' } })).statusCode).toBe(201);
    const read = await t.key('read', WATER_ID);
    const ingest = await t.key('ingest', WATER_ID);
    expect((await look({ measure: 'satisfaction' }, read)).statusCode).toBe(403);
    expect((await look({ measure: 'satisfaction' }, ingest)).statusCode).toBe(403);
    expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, payload: { respondent: 'x' }, key: ingest })).statusCode).toBe(201);
    for (const url of [LOOKS, TRAJ, `${TRAJ}.svg`]) {
      const res = await t.request({ method: 'GET', url, key: ingest });
      expect(res.statusCode, url).toBe(403);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      expect((await t.request({ method: 'GET', url, key: read })).statusCode, url).toBe(200);
      expect((await t.request({ method: 'GET', url, key: null })).statusCode, url).toBe(401);
    }
  });
});

describe('trajectory', () => {
  it('up to 60 prefixes in arrival order; the last point is the anytime-valid result on all answers', async () => {
    expect((await t.createWater({ plannedPerCondition: 200 })).statusCode).toBe(201);
    await add(150, 0, 31);
    await add(107, 150, 32);
    const res = await t.request({ method: 'GET', url: TRAJ });
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body).toMatchObject({ experiment: WATER_ID, measure: 'satisfaction', a: 'bill-first', b: 'service-first', alpha: 0.05, targetPerCondition: 200 });
    const pts = body.points as { n: number; nA: number; nB: number; p: number | null; lower: number | null; upper: number | null }[];
    expect(pts.length).toBe(60);
    expect(pts[pts.length - 1].n).toBe(514);
    pts.forEach((p, i) => {
      expect(p.nA + p.nB).toBe(p.n);
      if (i > 0) expect(p.n).toBeGreaterThan(pts[i - 1].n);
    });
    // Answers arrive alternating bill-first, service-first (batch order), so nA = ceil(n / 2).
    for (const p of pts) expect(p.nA).toBe(Math.ceil(p.n / 2));
    // Last point against stats/sequential anytimeValid on two-pass moments of the same answers
    // (Welford's running update differs only by rounding: relative 1e-9).
    const m = (x: number[]) => {
      const mean = x.reduce((s, v) => s + v, 0) / x.length;
      return { n: x.length, mean, v: x.reduce((s, v) => s + (v - mean) ** 2, 0) / (x.length - 1) };
    };
    const a = m(stored['bill-first']);
    const b = m(stored['service-first']);
    const ref = anytimeValid({ na: a.n, meanA: a.mean, varA: a.v, nb: b.n, meanB: b.mean, varB: b.v }, { alpha: 0.05, plannedPerCondition: 200 });
    const last = pts[pts.length - 1];
    for (const [got, want] of [
      [last.p, ref.p],
      [last.lower, ref.ci.lower],
      [last.upper, ref.ci.upper],
    ] as [number, number][]) {
      expect(Math.abs(got - want) / Math.abs(want)).toBeLessThanOrEqual(1e-9);
    }
    // The first prefix is round(514 / 60) = 9 answers (5 and 4): already defined.
    expect(pts[0]).toMatchObject({ n: 9, nA: 5, nB: 4, p: expect.any(Number) });
  });

  it('the SVG chart; 404 for an unknown measure, 400 for an unknown condition', async () => {
    expect((await t.createWater()).statusCode).toBe(201);
    await add(40, 0, 41);
    const svg = await t.request({ method: 'GET', url: `${TRAJ}.svg?a=service-first&b=bill-first` });
    expect(svg.statusCode).toBe(200);
    expect(svg.headers['content-type']).toBe('image/svg+xml; charset=utf-8');
    expect(svg.body).toMatch(/^<svg/);
    expect(svg.body).toContain('service-first − bill-first');
    const trust = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/comparisons/trust/trajectory` });
    expect(trust.json().points.length).toBe(60); // 80 answers, 60 evenly spaced prefixes
    const unknown = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/comparisons/happiness/trajectory` });
    expect(unknown.statusCode).toBe(404);
    expect(unknown.json()).toEqual({
      type: 'urn:splitballot:problem:not-found',
      title: 'Not found',
      status: 404,
      detail: 'Experiment water-bill-2027 has no measure "happiness".',
    });
    const badPair = await t.request({ method: 'GET', url: `${TRAJ}?a=letter-first` });
    expect(badPair.statusCode).toBe(400);
    expect(badPair.json()).toMatchObject({ type: 'urn:splitballot:problem:invalid-parameters', errors: [{ path: 'a', message: 'is not a condition of this experiment' }] });
  });
});
