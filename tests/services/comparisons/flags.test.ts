/**
 * Quality flags on data posted over HTTP: each flag raised on data built for it and absent where it should be,
 * asserting the exact set of codes. The data ideas follow tests/stats/flags.test.ts (invented: normal scores from
 * quantiles of the normal distribution, exponential scores, hand-made count vectors on a 0–10 item).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { normalQuantile } from '../../../stats/distributions.js';
import { startTestApp, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeAll(async () => {
  t = await startTestApp();
});
afterAll(async () => {
  await t.close();
});

const normalScores = (n: number, mean: number, sd: number): number[] => Array.from({ length: n }, (_, i) => mean + sd * normalQuantile((i + 0.5) / n));
const exponentialScores = (n: number, mean: number): number[] => Array.from({ length: n }, (_, i) => -mean * Math.log(1 - (i + 0.5) / n));
const fromCounts = (counts: number[]): number[] => counts.flatMap((c, k) => Array.from({ length: c }, () => k));

let serial = 0;
/** A fresh experiment: conditions x ("bill-first") and y ("service-first"); amount 0–1000 continuous, rating 0–10 integer. */
async function experiment(extra: Record<string, unknown> = {}): Promise<string> {
  const id = `flags-${++serial}`;
  const res = await t.request({
    method: 'POST',
    url: '/v1/experiments',
    payload: {
      id,
      title: 'Flag check',
      conditions: [
        { id: 'x', label: 'bill-first' },
        { id: 'y', label: 'service-first' },
      ],
      measures: [
        { id: 'amount', min: 0, max: 1000, required: false },
        { id: 'rating', min: 0, max: 10, integer: true, required: false },
      ],
      ...extra,
    },
  });
  expect(res.statusCode, res.body).toBe(201);
  return id;
}

async function post(id: string, measure: string, a: readonly number[], b: readonly number[]): Promise<void> {
  const responses = [
    ...a.map((v, i) => ({ responseId: `x-${measure}-${i}`, condition: 'x', values: { [measure]: v } })),
    ...b.map((v, i) => ({ responseId: `y-${measure}-${i}`, condition: 'y', values: { [measure]: v } })),
  ];
  const res = await t.request({ method: 'POST', url: `/v1/experiments/${id}/responses/batch`, payload: { responses } });
  expect(res.statusCode, res.body).toBe(201);
}

interface Flag {
  code: string;
  severity: string;
  message: string;
  detail: Record<string, unknown>;
}
async function flags(id: string, measure: string, query = ''): Promise<Flag[]> {
  const res = await t.request({ method: 'GET', url: `/v1/experiments/${id}/comparisons/${measure}${query}` });
  expect(res.statusCode, res.body).toBe(200);
  return res.json().flags;
}
const codes = (f: Flag[]) => f.map((x) => x.code);

describe('quality flags over HTTP', () => {
  it('clean, normal, balanced data with a real difference: no flag (no tests_disagree, no heavy_ties, no influential_point)', async () => {
    const id = await experiment();
    await post(id, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    expect(codes(await flags(id, 'amount'))).toEqual([]);
  });

  it('two extreme answers: outliers, non_normal, tests_disagree and influential_point', async () => {
    const id = await experiment();
    await post(id, 'amount', [...normalScores(50, 100, 15), 195, 198], normalScores(50, 110, 15));
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['outliers', 'non_normal', 'tests_disagree', 'influential_point']);
    expect((f[0].detail.a as { values: { value: number }[] }).values.map((v) => v.value)).toEqual([198, 195]);
    expect(f[0].message).toContain('"bill-first"');
    expect(f[2].detail.explainedBy).toEqual(['outliers', 'non_normal', 'influential_point']);
    expect((f[3].detail.answers as { value: number }[])[0].value).toBe(198);
  });

  it('influential_point is absent when no single answer moves Welch p across alpha', async () => {
    const id = await experiment();
    await post(id, 'amount', normalScores(50, 100, 15), normalScores(50, 130, 15));
    expect(codes(await flags(id, 'amount'))).toEqual([]);
  });

  it('unequal_variance at an SD ratio of 3, absent at 1.5; an experiment threshold of 4 silences it (and a PATCH moves it back)', async () => {
    const id = await experiment();
    await post(id, 'amount', normalScores(50, 100, 10), normalScores(50, 105, 30));
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['unequal_variance']);
    expect(f[0].detail.ratio).toBeCloseTo(3, 10);
    const calm = await experiment();
    await post(calm, 'amount', normalScores(50, 100, 10), normalScores(50, 120, 15));
    expect(codes(await flags(calm, 'amount'))).toEqual([]);
    const tolerant = await experiment({ flagThresholds: { sdRatio: 4 } });
    await post(tolerant, 'amount', normalScores(50, 100, 10), normalScores(50, 105, 30));
    expect(codes(await flags(tolerant, 'amount'))).toEqual([]);
    const patched = await t.request({ method: 'PATCH', url: `/v1/experiments/${tolerant}`, payload: { flagThresholds: null } });
    expect(patched.statusCode).toBe(200);
    expect(codes(await flags(tolerant, 'amount'))).toEqual(['unequal_variance']);
  });

  it('small_sample below 20 per group, with the exact rank-sum method named', async () => {
    const id = await experiment();
    await post(id, 'amount', normalScores(10, 100, 15), normalScores(12, 120, 15));
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['small_sample']);
    expect(f[0].detail).toMatchObject({ nA: 10, nB: 12, threshold: 20, rankSumMethod: 'exact' });
  });

  it('imbalanced at 2×, absent at 1.4× (a planned 1:2 allocation keeps allocation_mismatch quiet)', async () => {
    const id = await experiment({ allocation: { x: 1, y: 2 } });
    await post(id, 'amount', normalScores(40, 100, 15), normalScores(80, 112, 15));
    expect(codes(await flags(id, 'amount'))).toEqual(['imbalanced']);
    const fine = await experiment();
    await post(fine, 'amount', normalScores(50, 100, 15), normalScores(70, 112, 15));
    expect(codes(await flags(fine, 'amount'))).toEqual([]);
  });

  it('allocation_mismatch: 50 vs 50 answers against a planned 1:2 allocation (chi-square 12.5, p ≈ 4e-4); equal plan: none', async () => {
    const id = await experiment({ allocation: { x: 1, y: 2 } });
    await post(id, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['allocation_mismatch']);
    // Pearson chi-square by hand: expected 100/3 and 200/3; (50 − 100/3)²/(100/3) + (50 − 200/3)²/(200/3) = 12.5.
    expect(f[0].detail.chiSquare).toBeCloseTo(12.5, 12);
    expect(f[0].detail.conditions).toEqual(['bill-first', 'service-first']);
    expect(f[0].detail.observed).toEqual([50, 50]);
    // The allocation counts responses across the whole experiment: answers to the other measure count too.
    const other = await experiment();
    await post(other, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    expect(codes(await flags(other, 'amount'))).toEqual([]);
    await post(other, 'rating', [], fromCounts([0, 0, 0, 5, 10, 20, 20, 10, 5, 0, 0]));
    expect(codes(await flags(other, 'amount'))).toEqual(['allocation_mismatch']);
  });

  it('non_normal is a warning for small groups and info when both have 100 or more', async () => {
    const small = await experiment();
    await post(small, 'amount', exponentialScores(40, 50), exponentialScores(40, 52));
    const fs = await flags(small, 'amount');
    expect(codes(fs)).toEqual(['outliers', 'non_normal']);
    expect(fs[1].severity).toBe('warning');
    const large = await experiment();
    await post(large, 'amount', exponentialScores(150, 50), exponentialScores(150, 80));
    const fl = await flags(large, 'amount');
    expect(codes(fl)).toEqual(['outliers', 'non_normal']);
    expect(fl[1].severity).toBe('info');
  });

  it('heavy_ties and floor_ceiling on a 0–10 rating piled at the top (counts path); floor_ceiling absent at 5 %', async () => {
    const id = await experiment();
    await post(id, 'rating', fromCounts([0, 0, 0, 1, 2, 4, 6, 10, 14, 23, 40]), fromCounts([0, 0, 0, 0, 0, 1, 2, 5, 10, 22, 60]));
    const f = await flags(id, 'rating');
    // No outlier flag on an 11-point rating scale (stats/flags.ts: every point is a legitimate answer).
    expect(codes(f)).toEqual(['non_normal', 'heavy_ties', 'floor_ceiling']);
    expect((f[2].detail.groups as { fractionAtMax: number }[]).map((g) => g.fractionAtMax)).toEqual([0.4, 0.6]);
    expect(f[1].detail.tieFraction).toBe(199 / 200);
    const spread = await experiment();
    await post(spread, 'rating', fromCounts([0, 0, 4, 8, 12, 20, 20, 15, 11, 5, 5]), fromCounts([0, 0, 3, 7, 12, 18, 22, 16, 12, 5, 5]));
    expect(codes(await flags(spread, 'rating'))).toEqual(['non_normal', 'heavy_ties']);
  });

  it('out_of_range counts refused values by reason (outside the scale, not a whole number, not a number); absent without refusals', async () => {
    const id = await experiment();
    await post(id, 'rating', fromCounts([0, 0, 4, 8, 12, 20, 20, 15, 11, 5, 5]), fromCounts([0, 0, 3, 7, 12, 18, 22, 16, 12, 5, 5]));
    expect(codes(await flags(id, 'rating'))).not.toContain('out_of_range');
    const bad = [{ rating: 11 }, { rating: 5.5 }, { rating: 'seven' }];
    for (const values of bad) {
      const res = await t.request({ method: 'POST', url: `/v1/experiments/${id}/responses`, payload: { condition: 'x', values } });
      expect(res.statusCode).toBe(422);
    }
    // An overlong number literal (more than 40 characters) is refused as "too many digits", reported as not a number.
    const overlong = await t.request({
      method: 'POST',
      url: `/v1/experiments/${id}/responses`,
      headers: { 'content-type': 'application/json' },
      payload: `{"condition":"x","values":{"rating":${'1'.repeat(45)}}}`,
    });
    expect(overlong.statusCode).toBe(422);
    const f = await flags(id, 'rating');
    const oor = f.find((x) => x.code === 'out_of_range')!;
    expect(oor.detail).toEqual({ total: 4, byReason: { not_a_number: 2, not_integer: 1, out_of_range: 1 } });
    expect(oor.message).toBe(
      '4 values were refused at the door for this item (2 not a number, 1 not a whole number, 1 outside the scale) and are not in these results. Many refusals can point to a broken form.',
    );
  });

  it('interim while a planned size is not reached; absent once both groups reach it', async () => {
    const id = await experiment({ plannedPerCondition: 400 });
    await post(id, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['interim']);
    expect(f[0].detail).toEqual({ planned: 400, nA: 50, nB: 50 });
    const done = await experiment({ plannedPerCondition: 50 });
    await post(done, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    expect(codes(await flags(done, 'amount'))).toEqual([]);
  });

  it('excluded counts the excluded responses of the two conditions; absent with includeExcluded=true', async () => {
    const id = await experiment();
    await post(id, 'amount', normalScores(50, 100, 15), normalScores(50, 110, 15));
    for (const r of ['x-amount-3', 'y-amount-7']) {
      const res = await t.request({ method: 'POST', url: `/v1/experiments/${id}/responses/${r}/exclusion`, payload: { reason: 'speeder' } });
      expect(res.statusCode).toBe(200);
    }
    const f = await flags(id, 'amount');
    expect(codes(f)).toEqual(['excluded']);
    expect(f[0]).toEqual({ code: 'excluded', severity: 'info', message: '2 excluded responses were left out of this comparison.', detail: { excluded: 2 } });
    expect(codes(await flags(id, 'amount', '?includeExcluded=true'))).toEqual([]);
  });
});
