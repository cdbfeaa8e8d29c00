/**
 * computeMonitoring: the monitoring block of a comparison (shape, recorded looks, the anytime-valid p now and its
 * running minimum / running intersection over the recorded history), as the comparison service calls it.
 * All data are invented.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import type { ExperimentRecord, MeasureRecord } from '../../../server/store/types.js';
import { CAVEAT, computeMonitoring, MIN_RUNNING_PER_CONDITION, type Monitoring } from '../../../server/services/monitoring/interim.js';
import { currentMoments } from '../../../server/services/monitoring/looks.js';
import { anytimeValid, spendingBoundaries } from '../../../stats/sequential.js';
import { welchFromMoments } from '../../../stats/welch.js';
import { startTestApp, waterBillDefinition, WATER_ID, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

let counter = 0;
/** Deterministic invented satisfaction answers: service-first higher by `shift` on average. */
async function add(perCondition: number, seed: number, shift = 1): Promise<void> {
  let s = seed >>> 0;
  const next = () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
  const responses: Record<string, unknown>[] = [];
  for (let i = 0; i < perCondition; i++) {
    for (const condition of ['bill-first', 'service-first']) {
      const base = condition === 'bill-first' ? 5 : 5 + shift;
      const v = Math.max(0, Math.min(10, Math.round(base + (next() + next() + next() - 1.5) * 4)));
      responses.push({ responseId: `m-${counter++}`, condition, values: { satisfaction: v, trust: 4, fair_price: 10 + v } });
    }
  }
  const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } });
  expect(res.statusCode).toBe(201);
}

async function experiment(): Promise<{ e: ExperimentRecord; m: MeasureRecord; keys: [number, number] }> {
  const e = (await t.store.experiments.getBySlug(WATER_ID)) as ExperimentRecord;
  const m = e.measures.find((x) => x.id === 'satisfaction') as MeasureRecord;
  return { e, m, keys: [e.conditions[0].key, e.conditions[1].key] };
}

/** What the comparison service does: moments from a snapshot, Welch from moments, then computeMonitoring. */
async function monitor(opts: { reversed?: boolean; includeExcluded?: boolean } = {}): Promise<Monitoring> {
  const { e, m, keys } = await experiment();
  const pair: [number, number] = opts.reversed ? [keys[1], keys[0]] : keys;
  const snap = await currentMoments(t.store, m, pair);
  const w = welchFromMoments(snap.a, snap.b, { alternative: 'two-sided', confidenceLevel: 0.95 });
  const out = await computeMonitoring({
    store: t.store,
    experiment: e,
    measureKey: m.key,
    conditionKeys: pair,
    a: snap.a,
    b: snap.b,
    welch: { t: w.t, df: w.df },
    alpha: e.alpha,
    dataVersion: snap.dataVersion,
    includeExcluded: opts.includeExcluded,
  });
  if (out === null) throw new Error('no monitoring block');
  return out;
}

describe('monitoring block', () => {
  it('has the documented shape, with the recorded looks of this measure and pair', async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' }, plannedPerCondition: 400 })).statusCode).toBe(201);
    await add(100, 1);
    const recorded = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/looks`, payload: { measure: 'satisfaction' } });
    expect(recorded.statusCode).toBe(201);
    await add(20, 2);
    const block = await monitor();
    const look = recorded.json();
    expect(block).toEqual({
      anytimeValid: {
        method: expect.stringMatching(/asymptotic confidence sequence/),
        p: expect.any(Number),
        ci: { level: 0.95, lower: expect.any(Number), upper: expect.any(Number) },
        estimate: expect.any(Number),
        mixing: expect.any(Number),
        targetPerCondition: 400,
        running: { p: expect.any(Number), ci: { level: 0.95, lower: expect.any(Number), upper: expect.any(Number) }, points: 1, minPerCondition: 30 },
      },
      groupSequential: {
        method: expect.stringMatching(/O'Brien–Fleming/),
        spending: 'obrien-fleming',
        alpha: 0.05,
        plannedPerCondition: 400,
        currentFraction: 0.3,
        looks: [
          {
            number: 1,
            recordedAt: look.recordedAt,
            dataVersion: look.dataVersion,
            fraction: 0.25,
            nA: 100,
            nB: 100,
            cumulativeAlpha: look.cumulativeAlpha,
            alphaSpent: look.alphaSpent,
            boundaryZ: spendingBoundaries([0.25], { alpha: 0.05, spending: 'obrien-fleming' })[0].boundaryZ,
            nominalP: look.nominalP,
            observedZ: look.observedZ,
            crossed: look.crossed,
            direction: look.direction,
          },
        ],
        firstCrossing: look.crossed ? 1 : null,
      },
      caveat: CAVEAT,
    });
    // The caveat says which sequence is used and how to read it, in the project's words, and nothing about what
    // the software lacks (that belongs to docs/methods.md#limitations).
    expect(block.caveat).toMatch(/difference in means/);
    expect(block.caveat).toMatch(/anytime-valid p-value and the anytime-valid interval \(confidence sequence\)/);
    expect(block.caveat).not.toMatch(/not implemented|always-valid/i);
    // Reversed pair: the same look with z of the other sign, the interval mirrored.
    const rev = await monitor({ reversed: true });
    expect(rev.groupSequential?.looks[0].observedZ).toBe(-look.observedZ);
    expect(rev.anytimeValid?.ci.lower).toBeCloseTo(-(block.anytimeValid?.ci.upper as number), 12);
    expect(rev.anytimeValid?.p).toBeCloseTo(block.anytimeValid?.p as number, 14);
  });

  it('the current anytime-valid p and sequence are stats anytimeValid on the same moments', async () => {
    expect((await t.createWater({ plannedPerCondition: 250 })).statusCode).toBe(201);
    await add(80, 3);
    const { m, keys } = await experiment();
    const snap = await currentMoments(t.store, m, keys);
    const ref = anytimeValid(
      { na: snap.a.n, meanA: snap.a.mean as number, varA: snap.a.variance as number, nb: snap.b.n, meanB: snap.b.mean as number, varB: snap.b.variance as number },
      { alpha: 0.05, plannedPerCondition: 250 },
    );
    const block = await monitor();
    expect(block.anytimeValid).toMatchObject({ p: ref.p, ci: ref.ci, estimate: ref.estimate, mixing: ref.mixing, targetPerCondition: 250 });
    // No monitoring declared and no looks: no group-sequential block.
    expect(block.groupSequential).toBeNull();
  });

  it('running values: minimum of p and intersection of the intervals over the recorded history; never move back', async () => {
    expect((await t.createWater({ plannedPerCondition: 300 })).statusCode).toBe(201);
    await add(10, 4);
    const early = await monitor();
    expect(early.anytimeValid?.running).toEqual({
      p: null,
      ci: { level: 0.95, lower: null, upper: null, reason: `No recorded point has at least ${MIN_RUNNING_PER_CONDITION} answers in each condition yet.` },
      points: 0,
      minPerCondition: 30,
      reason: `No recorded point has at least ${MIN_RUNNING_PER_CONDITION} answers in each condition yet.`,
    });
    expect(early.caveat).toMatch(/Fewer than 30 answers in a condition/);
    const seen: { p: number; lower: number; upper: number }[] = [];
    let previousRunning = Infinity;
    let currentAboveRunning = 0;
    // Batches with a shift that changes sign, so that the current p moves both ways.
    const shifts = [1.5, -1, 0.5, -2, 1, 0, 2];
    for (let i = 0; i < shifts.length; i++) {
      await add(25, 10 + i, shifts[i]);
      const b = await monitor();
      const av = b.anytimeValid as NonNullable<Monitoring['anytimeValid']>;
      seen.push({ p: av.p as number, lower: av.ci.lower as number, upper: av.ci.upper as number });
      const expectedP = Math.min(...seen.map((s) => s.p));
      expect(av.running.p).toBe(expectedP);
      expect(av.running.points).toBe(seen.length);
      const lower = Math.max(...seen.map((s) => s.lower));
      const upper = Math.min(...seen.map((s) => s.upper));
      if (lower <= upper) expect(av.running.ci).toEqual({ level: 0.95, lower, upper });
      else expect(av.running.ci).toMatchObject({ lower: null, upper: null, reason: /do not overlap/ });
      expect(av.running.p as number).toBeLessThanOrEqual(previousRunning);
      previousRunning = av.running.p as number;
      if ((av.p as number) > (av.running.p as number)) currentAboveRunning++;
      // Asking again at the same dataVersion records nothing new.
      const again = await monitor();
      expect(again.anytimeValid?.running.points).toBe(seen.length);
    }
    // The data were made so that the current p went back up at least once while the running minimum stayed.
    expect(currentAboveRunning).toBeGreaterThan(0);
    // Reversed pair: the same history, the interval mirrored.
    const fwd = (await monitor()).anytimeValid?.running.ci as { lower: number | null; upper: number | null };
    const rev = (await monitor({ reversed: true })).anytimeValid?.running.ci as { lower: number | null; upper: number | null };
    if (fwd.lower !== null) {
      expect(rev.lower).toBe(-(fwd.upper as number));
      expect(rev.upper).toBe(-fwd.lower);
    }
    // History points are written just after the reply (server/services/monitoring/interim.ts): let that turn of the event loop run.
    // On PostgreSQL that write is a round trip of its own: wait for it (at most 2 s).
    await new Promise((resolve) => setImmediate(resolve));
    let rows = (await t.sql(`SELECT count(*) AS n FROM anytime_history`))[0].n;
    for (let i = 0; i < 40 && rows !== 1 + shifts.length; i++) {
      await new Promise((resolve) => setTimeout(resolve, 50));
      rows = (await t.sql(`SELECT count(*) AS n FROM anytime_history`))[0].n;
    }
    expect(rows).toBe(1 + shifts.length); // the early point is stored too (ignored by the running values)
  });

  it('a comparison that includes excluded responses records no history and reports no running values', async () => {
    expect((await t.createWater()).statusCode).toBe(201);
    await add(40, 5);
    const b = await monitor({ includeExcluded: true });
    expect(b.anytimeValid?.running).toMatchObject({ p: null, points: 0, reason: /without excluded responses/ });
    expect(await t.sql(`SELECT count(*) AS n FROM anytime_history`)).toEqual([{ n: 0 }]);
    expect(b.anytimeValid?.targetPerCondition).toBe(400);
  });

  it('monitoring declared without a planned size: a group-sequential block with a reason; too few answers: p null with reason', async () => {
    await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: waterBillDefinition({ plannedPerCondition: null, monitoring: { spending: 'pocock' } }),
    });
    await add(1, 6);
    const b = await monitor();
    expect(b.groupSequential).toEqual({
      method: expect.stringMatching(/Pocock/),
      spending: 'pocock',
      alpha: 0.05,
      plannedPerCondition: null,
      currentFraction: null,
      looks: [],
      firstCrossing: null,
      reason: 'The experiment has no plannedPerCondition, so no information fraction and no look can be recorded.',
    });
    expect(b.anytimeValid).toMatchObject({ p: null, ci: { lower: null, upper: null }, targetPerCondition: 500, reason: /at least two answers/ });
  });

  it('the comparison stamp (the cache key\'s cheap part) moves when a look is recorded; the dataVersion does not', async () => {
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' } })).statusCode).toBe(201);
    await add(50, 7);
    const { e } = await experiment();
    const before = await t.store.responses.getComparisonStamp(e.key);
    expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/looks`, payload: { measure: 'satisfaction' } })).statusCode).toBe(201);
    const after = await t.store.responses.getComparisonStamp(e.key);
    expect(after?.looks).toBe((before?.looks ?? 0) + 1);
    expect(after?.dataVersion).toBe(before?.dataVersion);
    expect((await experiment()).e.dataVersion).toBe(e.dataVersion);
  });
});
