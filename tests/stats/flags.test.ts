/**
 * Quality flags (stats/flags.ts): each flag raised on data built for it and absent on clean data.
 * All data are invented for the test: normal scores (quantiles of the normal distribution, so the
 * shape is exactly normal without randomness), a few extreme answers added by hand, and count vectors
 * for 0–10 items. Each test asserts the exact set of flag codes.
 */
import { describe, expect, it } from 'vitest';
import { normalQuantile } from '../../stats/distributions.js';
import { computeFlags, DEFAULT_FLAG_THRESHOLDS, type FlagContext } from '../../stats/flags.js';
import { compareSamples, fromCounts, fromValues, type Sample } from '../../stats/index.js';

/** n normal scores with the given mean and SD: exactly normal-shaped, no ties, no randomness. */
const normalScores = (n: number, mean: number, sd: number): number[] =>
  Array.from({ length: n }, (_, i) => mean + sd * normalQuantile((i + 0.5) / n));
/** n exponential scores (right-skewed), mean `mean`. */
const exponentialScores = (n: number, mean: number): number[] =>
  Array.from({ length: n }, (_, i) => -mean * Math.log(1 - (i + 0.5) / n));

const amountScale: FlagContext = { alpha: 0.05, labels: { a: 'bill-first', b: 'service-first' }, scale: { min: 0, max: 200, integer: false } };
const ratingScale: FlagContext = { alpha: 0.05, labels: { a: 'bill-first', b: 'service-first' }, scale: { min: 0, max: 10, integer: true } };

function flagsOf(a: Sample, b: Sample, ctx: FlagContext) {
  const cmp = compareSamples(a, b);
  return { cmp, flags: computeFlags(cmp, { a, b }, ctx) };
}
function flagsFor(a: readonly number[], b: readonly number[], ctx: FlagContext = amountScale) {
  return flagsOf(fromValues(Object.freeze([...a])), fromValues(Object.freeze([...b])), ctx);
}
const codes = (flags: readonly { code: string }[]): string[] => flags.map((f) => f.code);

describe('quality flags', () => {
  it('clean, normal, balanced data with a real difference raise no flag', () => {
    const { flags } = flagsFor(normalScores(50, 100, 15), normalScores(50, 110, 15));
    expect(codes(flags)).toEqual([]);
  });

  it('two extreme answers: outliers, non_normal, tests_disagree and influential_point', () => {
    const { flags, cmp } = flagsFor([...normalScores(50, 100, 15), 195, 198], normalScores(50, 110, 15));
    expect(codes(flags)).toEqual(['outliers', 'non_normal', 'tests_disagree', 'influential_point']);
    const outliers = flags[0];
    expect(outliers.severity).toBe('warning');
    const groupA = outliers.detail.a as { count: number; farOut: number; values: { value: number; rules: string[] }[] };
    expect(groupA.count).toBe(2);
    expect(groupA.farOut).toBe(2);
    expect(groupA.values.map((v) => v.value)).toEqual([198, 195]);
    expect(outliers.detail.b).toBeUndefined();
    // tests_disagree names the flags that explain it.
    expect(flags[2].detail.explainedBy).toEqual(['outliers', 'non_normal', 'influential_point']);
    expect(cmp.welch.p).toBeGreaterThan(0.05);
    expect(cmp.mannWhitney.p).toBeLessThan(0.05);
    // influential_point: removing 198 brings Welch p below alpha; the detail says so.
    const inf = flags[3].detail as { answers: { value: number; pWithout: number }[] };
    expect(inf.answers[0].value).toBe(198);
    expect(inf.answers[0].pWithout).toBeLessThan(0.05);
  });

  it('influential_point is absent when no single answer moves Welch p across alpha', () => {
    const { flags } = flagsFor(normalScores(50, 100, 15), normalScores(50, 130, 15));
    expect(codes(flags)).not.toContain('influential_point');
  });

  it('unequal_variance: SD ratio 3 (threshold 2, common practice)', () => {
    const { flags } = flagsFor(normalScores(50, 100, 10), normalScores(50, 105, 30));
    expect(codes(flags)).toEqual(['unequal_variance']);
    expect(flags[0].detail.ratio).toBeCloseTo(3, 10);
  });

  it('unequal_variance is absent at an SD ratio of 1.5', () => {
    expect(codes(flagsFor(normalScores(50, 100, 10), normalScores(50, 120, 15)).flags)).toEqual([]);
  });

  it('small_sample: fewer than 20 answers in a group', () => {
    const { flags } = flagsFor(normalScores(10, 100, 15), normalScores(12, 120, 15));
    expect(codes(flags)).toEqual(['small_sample']);
    expect(flags[0].detail).toMatchObject({ nA: 10, nB: 12, threshold: 20, rankSumMethod: 'exact' });
  });

  it('imbalanced: one group twice the other; absent at 1.4×', () => {
    expect(codes(flagsFor(normalScores(40, 100, 15), normalScores(80, 112, 15)).flags)).toEqual(['imbalanced']);
    expect(codes(flagsFor(normalScores(50, 100, 15), normalScores(70, 112, 15)).flags)).toEqual([]);
  });

  it('allocation_mismatch: 100 vs 160 against an equal plan (chi-square p ≈ 2e-4 < 0.001); 100 vs 120 is fine', () => {
    const a = normalScores(50, 100, 15);
    const b = normalScores(50, 112, 15);
    const bad = flagsFor(a, b, { ...amountScale, allocation: { conditions: ['bill-first', 'service-first'], observed: [100, 160] } });
    expect(codes(bad.flags)).toEqual(['allocation_mismatch']);
    // Pearson chi-square by hand: expected 130 each, (30² + 30²)/130 = 13.846; df 1.
    expect(bad.flags[0].detail.chiSquare).toBeCloseTo(1800 / 130, 12);
    const ok = flagsFor(a, b, { ...amountScale, allocation: { conditions: ['bill-first', 'service-first'], observed: [100, 120] } });
    expect(codes(ok.flags)).toEqual([]);
    // A planned 1:2 allocation makes 100 vs 200 fine.
    const weighted = flagsFor(a, b, { ...amountScale, allocation: { conditions: ['x', 'y'], observed: [100, 200], weights: [1, 2] } });
    expect(codes(weighted.flags)).toEqual([]);
  });

  it('non_normal is a warning for small groups and info when both groups have 100 or more', () => {
    // Right-skewed (exponential) answers: the long right tail also trips the outlier rules.
    const small = flagsFor(exponentialScores(40, 50), exponentialScores(40, 52));
    expect(codes(small.flags)).toEqual(['outliers', 'non_normal']);
    expect(small.flags[1].severity).toBe('warning');
    const large = flagsFor(exponentialScores(150, 50), exponentialScores(150, 80));
    expect(codes(large.flags)).toEqual(['outliers', 'non_normal']);
    expect(large.flags[1].severity).toBe('info');
  });

  it('heavy_ties and floor_ceiling on a 0–10 rating piled at the top', () => {
    // counts of answers 0…10 (invented): 40 % of "bill-first" and 60 % of "service-first" answered 10.
    // Shapiro–Wilk rejects normality (info: 100 answers per group). No outliers on an 11-point rating scale.
    const a = fromCounts([0, 0, 0, 1, 2, 4, 6, 10, 14, 23, 40], 0);
    const b = fromCounts([0, 0, 0, 0, 0, 1, 2, 5, 10, 22, 60], 0);
    const { flags } = flagsOf(a, b, ratingScale);
    expect(codes(flags)).toEqual(['non_normal', 'heavy_ties', 'floor_ceiling']);
    expect(flags[0].severity).toBe('info');
    const fc = flags[2].detail as { groups: { condition: string; fractionAtMax: number }[] };
    expect(fc.groups.map((g) => g.fractionAtMax)).toEqual([0.4, 0.6]);
    expect(flags[1].detail.distinctValues).toBe(8);
    expect(flags[1].detail.tieFraction).toBe(199 / 200); // the single answer 3 is the only one without a twin
  });

  it('heavy_ties only where ties matter: not for 21 distinct values on a 0–100 scale with 60 answers per group', () => {
    // Invented 0–100 answers, three at each whole number 40…60 in a and 45…65 in b (63 per group): every answer is
    // tied, as on any whole-number scale, but the rank-sum method is what it would be without ties (n ≥ 50) and the
    // interval is not coarse (26 distinct values pooled).
    const counts = (shift: number) => Array.from({ length: 101 }, (_, v) => (v >= 40 + shift && v <= 60 + shift ? 3 : 0));
    const a = fromCounts(counts(0), 0);
    const b = fromCounts(counts(5), 0);
    const wide = { ...ratingScale, scale: { min: 0, max: 100, integer: true } };
    const { cmp, flags } = flagsOf(a, b, wide);
    expect(cmp.mannWhitney.method).toBe('normal');
    expect(codes(flags).includes('heavy_ties')).toBe(false);
    // The same tie structure with only 3 distinct values (coarse) keeps the note.
    const few = (shift: number) => Array.from({ length: 101 }, (_, v) => (v === 50 + shift || v === 55 + shift || v === 60 + shift ? 20 : 0));
    const coarse = flagsOf(fromCounts(few(0), 0), fromCounts(few(5), 0), wide);
    const ties = coarse.flags.find((f) => f.code === 'heavy_ties');
    expect(ties?.detail).toMatchObject({ distinctValues: 4, coarse: true, methodChanged: false });
  });

  it('floor_ceiling is absent at 5 % on the bound', () => {
    const a = fromCounts([0, 0, 4, 8, 12, 20, 20, 15, 11, 5, 5], 0);
    const b = fromCounts([0, 0, 3, 7, 12, 18, 22, 16, 12, 5, 5], 0);
    expect(codes(flagsOf(a, b, ratingScale).flags)).toEqual(['non_normal', 'heavy_ties']);
    // The same answers on a 0–100 scale (scores 0…10 used as points of a wider scale) do get outlier rules.
    expect(codes(flagsOf(a, b, { ...ratingScale, scale: { min: 0, max: 100, integer: true } }).flags)).toEqual(['outliers', 'non_normal', 'heavy_ties']);
  });

  it('outlier rules are skipped for a group whose IQR and MAD are 0 (a tied scale is not full of outliers)', () => {
    const a = fromCounts([0, 0, 0, 0, 0, 2, 0, 96, 0, 0, 2], 0);
    const b = fromCounts([0, 0, 0, 0, 0, 3, 0, 94, 0, 0, 3], 0);
    const { flags } = flagsOf(a, b, ratingScale);
    expect(codes(flags)).toEqual(['non_normal', 'heavy_ties']);
  });

  it('out_of_range, interim and excluded come from the context', () => {
    const { flags } = flagsFor(normalScores(50, 100, 15), normalScores(50, 110, 15), {
      ...amountScale,
      plannedPerCondition: 400,
      excludedCount: 3,
      rejected: { out_of_range: 2, not_integer: 1 },
    });
    expect(codes(flags)).toEqual(['out_of_range', 'interim', 'excluded']);
    expect(flags[0].detail).toEqual({ total: 3, byReason: { out_of_range: 2, not_integer: 1 } });
    expect(flags[0].message).toContain('2 outside the scale');
    expect(flags[1].detail).toEqual({ planned: 400, nA: 50, nB: 50 });
    // interim disappears once both groups reach the plan.
    const done = flagsFor(normalScores(50, 100, 15), normalScores(50, 110, 15), { ...amountScale, plannedPerCondition: 50 });
    expect(codes(done.flags)).toEqual([]);
  });

  it('thresholds can be overridden per experiment', () => {
    const { flags } = flagsFor(normalScores(50, 100, 10), normalScores(50, 105, 30), { ...amountScale, thresholds: { sdRatio: 4 } });
    expect(codes(flags)).toEqual([]);
  });

  it('every message is plain text of one to three sentences, and results are frozen', () => {
    const { flags } = flagsFor([...normalScores(12, 100, 15), 195], normalScores(30, 140, 40), { ...amountScale, plannedPerCondition: 100, excludedCount: 1 });
    expect(flags.length).toBeGreaterThan(3);
    expect(Object.isFrozen(flags)).toBe(true);
    for (const f of flags) {
      expect(f.message.length).toBeGreaterThan(20);
      expect(f.message).not.toMatch(/NaN|undefined|Infinity|\[object/);
      expect(['info', 'warning']).toContain(f.severity);
    }
    expect(DEFAULT_FLAG_THRESHOLDS.floorCeilingFraction).toBe(0.15);
  });
});
