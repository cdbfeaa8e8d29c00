/**
 * Equivalence (TOST) against R: tests/fixtures/r-equivalence.json from tests/reference/make-equivalence-fixtures.R
 * (the Welch TOST from published-style summary statistics by base-R formulas; R's sleep data and invented data
 * through t.test(mu = ±m, alternative = …) and wilcox.test(mu = ±m, …)), the verdict rules, and a fixed-seed
 * simulation of the size at the margin.
 *
 * Tolerances (relative): t, df and interval bounds 1e-9 (a few arithmetic steps and one t quantile);
 * p-values 1e-9 for the Student t tail and the normal approximation (special functions accurate to ~1e-12,
 * tests/stats/distributions.test.ts); 1e-9 for the exact rank-sum p (sums of exact probabilities).
 * W and the Hodges–Lehmann bounds (order statistics of a_i − b_j) must be equal up to 4 ulp.
 */
import { describe, expect, it } from 'vitest';
import { moments } from '../../stats/descriptives.js';
import { equivalenceVerdict, rankTost, shiftSample, welchTost, welchTostFromMoments } from '../../stats/equivalence.js';
import { analyseRankSum } from '../../stats/rank-sum.js';
import { fromCounts, fromValues } from '../../stats/sample.js';
import { Rng } from '../helpers/rng.js';
import { expectRel, loadFixture } from './fixtures.js';

interface RCase {
  name: string;
  a: number[];
  b: number[];
  margin: number;
  alpha: number;
  welch: { df: number; tLower: number; pLower: number; tUpper: number; pUpper: number; ciLower: number; ciUpper: number; ordinaryP: number; verdict: string };
  rankNormal: { wLower: number; pLower: number; wUpper: number; pUpper: number; ordinaryP: number; verdict: string };
  rankExact: { wLower: number; pLower: number; wUpper: number; pUpper: number; ordinaryP: number; ciLower: number; ciUpper: number; verdict: string } | null;
}
interface RSummary {
  a: { n: number; mean: number; sd: number };
  b: { n: number; mean: number; sd: number };
  margin: number;
  alpha: number;
  df: number;
  tLower: number;
  pLower: number;
  tUpper: number;
  pUpper: number;
  ciLower: number;
  ciUpper: number;
}
const fixture = loadFixture<{ summary: RSummary; datasets: RCase[] }>('r-equivalence.json');
const TOL = 1e-9;
const ULP4 = 4 * Number.EPSILON;

describe('Welch TOST from summary statistics (base-R formulas)', () => {
  const s = fixture.summary;
  const r = welchTostFromMoments(
    { n: s.a.n, mean: s.a.mean, variance: s.a.sd ** 2 },
    { n: s.b.n, mean: s.b.mean, variance: s.b.sd ** 2 },
    { margin: s.margin, alpha: s.alpha },
  );
  it('matches R to 1e-9 relative', () => {
    expectRel(r.df, s.df, TOL, 'df');
    expectRel(r.lower.t, s.tLower, TOL, 't lower');
    expectRel(r.lower.p, s.pLower, TOL, 'p lower');
    expectRel(r.upper.t, s.tUpper, TOL, 't upper');
    expectRel(r.upper.p, s.pUpper, TOL, 'p upper');
    expectRel(r.ci.lower, s.ciLower, TOL, '90% lower');
    expectRel(r.ci.upper, s.ciUpper, TOL, '90% upper');
    expect(r.ci.level).toBeCloseTo(0.9, 15);
    expect(r.p).toBe(Math.max(r.lower.p as number, r.upper.p as number));
  });
  it('reproduces the figures quoted in the issue', () => {
    expect(r.df?.toFixed(4)).toBe('181.1344');
    expect(r.lower.t?.toFixed(6)).toBe('3.153015');
    expect(r.lower.p?.toPrecision(7)).toBe('0.0009458745');
    expect(r.upper.t?.toFixed(6)).toBe('-2.696056');
    expect(r.upper.p?.toPrecision(7)).toBe('0.003838994');
    expect(r.ci.lower?.toFixed(7)).toBe('-0.1870843');
    expect(r.ci.upper?.toFixed(7)).toBe('0.2470843');
    expect(r.verdict?.code).toBe('equivalent');
  });
});

describe('TOST on data against R (r-equivalence.json)', () => {
  for (const d of fixture.datasets) {
    const a = fromValues(Object.freeze([...d.a]));
    const b = fromValues(Object.freeze([...d.b]));
    const opts = { margin: d.margin, alpha: d.alpha };
    it(`${d.name}: Welch TOST (t.test with mu = ±margin)`, () => {
      const r = welchTost(a, b, opts);
      const w = d.welch;
      expectRel(r.df, w.df, TOL, `${d.name} df`);
      expectRel(r.lower.t, w.tLower, TOL, `${d.name} t lower`);
      expectRel(r.lower.p, w.pLower, TOL, `${d.name} p lower`);
      expectRel(r.upper.t, w.tUpper, TOL, `${d.name} t upper`);
      expectRel(r.upper.p, w.pUpper, TOL, `${d.name} p upper`);
      expectRel(r.ci.lower, w.ciLower, TOL, `${d.name} ci lower`);
      expectRel(r.ci.upper, w.ciUpper, TOL, `${d.name} ci upper`);
      expectRel(r.ordinaryP, w.ordinaryP, TOL, `${d.name} ordinary p`);
      expect(r.verdict?.code).toBe(w.verdict);
    });
    it(`${d.name}: rank TOST, normal approximation with continuity correction (wilcox.test exact = FALSE)`, () => {
      const r = rankTost(a, b, { ...opts, exact: 'never' });
      const w = d.rankNormal;
      expect([r.lower.method, r.upper.method, r.lower.continuityCorrection]).toEqual(['normal', 'normal', true]);
      expectRel(r.lower.u, w.wLower, ULP4, `${d.name} W lower`);
      expectRel(r.upper.u, w.wUpper, ULP4, `${d.name} W upper`);
      expectRel(r.lower.p, w.pLower, TOL, `${d.name} p lower`);
      expectRel(r.upper.p, w.pUpper, TOL, `${d.name} p upper`);
      expectRel(r.ordinaryP, w.ordinaryP, TOL, `${d.name} ordinary p`);
      expect(r.verdict?.code).toBe(w.verdict);
    });
    if (d.rankExact !== null) {
      const e = d.rankExact;
      it(`${d.name}: rank TOST, exact (the "auto" rule picks exact: no ties, both n < 50)`, () => {
        const r = rankTost(a, b, opts);
        expect([r.lower.method, r.upper.method, r.ordinaryMethod]).toEqual(['exact', 'exact', 'exact']);
        expectRel(r.lower.u, e.wLower, ULP4, `${d.name} W lower`);
        expectRel(r.upper.u, e.wUpper, ULP4, `${d.name} W upper`);
        expectRel(r.lower.p, e.pLower, TOL, `${d.name} exact p lower`);
        expectRel(r.upper.p, e.pUpper, TOL, `${d.name} exact p upper`);
        expectRel(r.ordinaryP, e.ordinaryP, TOL, `${d.name} exact ordinary p`);
        expectRel(r.ci.lower, e.ciLower, ULP4, `${d.name} HL lower`);
        expectRel(r.ci.upper, e.ciUpper, ULP4, `${d.name} HL upper`);
        expect(r.verdict?.code).toBe(e.verdict);
      });
    }
    it(`${d.name}: under "auto" each one-sided test reports the method the rank-sum rule picks for its shifted data`, () => {
      const r = rankTost(a, b, opts);
      expect(r.lower.method).toBe(analyseRankSum(shiftSample(a, d.margin), b, 'auto').method);
      expect(r.upper.method).toBe(analyseRankSum(shiftSample(a, -d.margin), b, 'auto').method);
    });
  }

  it('sleep, margin 0.5: the figures quoted in the issue (normal approximation)', () => {
    const d = fixture.datasets.find((x) => x.name === 'sleep')!;
    const r = rankTost(fromValues(Object.freeze([...d.a])), fromValues(Object.freeze([...d.b])), { margin: 0.5, exact: 'never' });
    expect(r.lower.u).toBe(34);
    expect(r.lower.p?.toFixed(5)).toBe('0.89385');
    expect(r.upper.u).toBe(20);
    expect(r.upper.p?.toFixed(5)).toBe('0.01287');
  });
});

describe('verdict rules', () => {
  it('maps the four cases', () => {
    expect(equivalenceVerdict(0.01, 0.5, 0.05, 1)?.code).toBe('equivalent');
    expect(equivalenceVerdict(0.01, 0.01, 0.05, 1)?.code).toBe('trivial');
    expect(equivalenceVerdict(0.5, 0.01, 0.05, 1)?.code).toBe('different');
    expect(equivalenceVerdict(0.5, 0.5, 0.05, 1)?.code).toBe('inconclusive');
    expect(equivalenceVerdict(null, 0.5, 0.05, 1)).toBeNull();
    expect(equivalenceVerdict(0.01, 0.5, 0.05, 0.25)?.words).toMatch(/±0\.25/);
  });
  it('bad margin or alpha throws a RangeError', () => {
    const a = fromValues([1, 2, 3]);
    expect(() => welchTost(a, a, { margin: 0 })).toThrow(RangeError);
    expect(() => welchTost(a, a, { margin: 1, alpha: 0.6 })).toThrow(RangeError);
    expect(() => rankTost(a, a, { margin: Number.NaN })).toThrow(RangeError);
  });
  it('undefined Welch (constant groups) gives nulls and a reason, never NaN', () => {
    const c = fromValues([2, 2, 2]);
    const r = welchTost(c, c, { margin: 1 });
    expect(r.p).toBeNull();
    expect(r.verdict).toBeNull();
    expect(r.reason).toBeTruthy();
    expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);
  });
});

describe('shifting an integer item', () => {
  it('keeps O(K): a 1–7 item of 10 000 answers stays 7 distinct values after a fractional shift', () => {
    const s = fromCounts(Object.freeze([1000, 2000, 1500, 1500, 2000, 1000, 1000]), 1);
    const shifted = shiftSample(s, 0.35);
    expect(shifted.values.length).toBe(7);
    expect(shifted.n).toBe(10000);
    expect(Array.from(shifted.values)).toEqual([1.35, 2.35, 3.35, 4.35, 5.35, 6.35, 7.35]);
  });
});

describe('size at the margin (simulation, fixed seed)', () => {
  // True difference exactly +margin: the upper null holds with equality, so each TOST should reject in
  // at most α of runs. 1000 runs of 25 + 25 normal answers; bound α + 3·√(α(1 − α)/1000) = 0.0707.
  it('each TOST rejects in at most 5 % of runs within Monte Carlo error', () => {
    const rng = new Rng(20261203);
    const runs = 1000;
    const margin = 0.5;
    let welchRejections = 0;
    let rankRejections = 0;
    for (let r = 0; r < runs; r++) {
      const a = Array.from({ length: 25 }, () => rng.normal() + margin);
      const b = Array.from({ length: 25 }, () => rng.normal());
      const sa = fromValues(a);
      const sb = fromValues(b);
      const w = welchTostFromMoments(moments(sa), moments(sb), { margin });
      if ((w.p as number) < 0.05) welchRejections++;
      const k = rankTost(sa, sb, { margin });
      if ((k.p as number) < 0.05) rankRejections++;
    }
    const bound = 0.05 + 3 * Math.sqrt((0.05 * 0.95) / runs);
    expect(welchRejections / runs, `Welch TOST rejection rate ${welchRejections / runs}, bound ${bound}`).toBeLessThanOrEqual(bound);
    expect(rankRejections / runs, `rank TOST rejection rate ${rankRejections / runs}, bound ${bound}`).toBeLessThanOrEqual(bound);
    // and the tests are not trivially conservative: each rejects in some runs
    expect(welchRejections).toBeGreaterThan(0);
    expect(rankRejections).toBeGreaterThan(0);
  });
});
