import ttest2 from '@stdlib/stats-ttest2';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { describe as summarize, moments } from '../../stats/descriptives.js';
import { effectSizes } from '../../stats/effect-sizes.js';
import { fromValues } from '../../stats/sample.js';
import type { Alternative, TTestResult } from '../../stats/types.js';
import { studentFromMoments, studentTest, welchFromMoments, welchTest } from '../../stats/welch.js';
import { loadFixture, relErrOrAbs } from './fixtures.js';

const freeze = (x: number[]): readonly number[] => Object.freeze(x.slice());
const SLEEP_1 = freeze([0.7, -1.6, -0.2, -1.2, -0.1, 3.4, 3.7, 0.8, 0.0, 2.0]);
const SLEEP_2 = freeze([1.9, 0.8, 1.1, 0.1, -0.1, 4.4, 5.5, 1.6, 4.6, 3.4]);
const TWO_SIDED_95 = { alternative: 'two-sided' as const, confidenceLevel: 0.95 };

/** Deterministic pseudo-random normal samples (Park–Miller + Box–Muller). */
function normalSampler(seed: number): (n: number, mean: number, sd: number) => number[] {
  let state = seed;
  const uniform = () => (state = (state * 16807) % 2147483647) / 2147483647;
  return (n, mean, sd) =>
    Array.from({ length: n }, () => mean + sd * Math.sqrt(-2 * Math.log(uniform())) * Math.cos(2 * Math.PI * uniform()));
}

describe("Student's sleep data (Cushny & Peebles 1905, via Student 1908; R datasets::sleep)", () => {
  it('Welch t = −1.8608, df = 17.776, p = 0.07939 (R: t.test(extra ~ group, data = sleep))', () => {
    const r = welchTest(fromValues(SLEEP_1), fromValues(SLEEP_2), TWO_SIDED_95);
    // published to 4–5 significant digits: tolerance half a unit in the last digit
    expect(Math.abs((r.t as number) + 1.8608)).toBeLessThanOrEqual(5e-5);
    expect(Math.abs((r.df as number) - 17.776)).toBeLessThanOrEqual(5e-4);
    expect(Math.abs((r.p as number) - 0.07939)).toBeLessThanOrEqual(5e-6);
    expect(r.meanDifference).toBeCloseTo(-1.58, 14);
    // R 4.2.2 prints the 95 % interval −3.3654832 … 0.2054832
    expect(Math.abs((r.ci.lower as number) + 3.3654832)).toBeLessThan(5e-8);
    expect(Math.abs((r.ci.upper as number) - 0.2054832)).toBeLessThan(5e-8);
    expect(Object.isFrozen(r) && Object.isFrozen(r.ci)).toBe(true);
  });
});

// ---------------------------------------------------------------------------------------------------
// R reference fixture (tests/fixtures/r-reference.json, written by tests/reference/make-fixtures.R)
// ---------------------------------------------------------------------------------------------------
interface RTest { t: number; df: number; p: number; meanDifference: number; se: number; ciLower: number | null; ciUpper: number | null }
interface RCase { alternative: Alternative; confidenceLevel: number; welch: RTest | null; student: RTest | null }
interface RDataset { name: string; a: number[]; b: number[]; cases: RCase[] }
const fixture = loadFixture<{ note: string; tools: Record<string, string>; datasets: RDataset[] }>('r-reference.json');

describe('t.test(a, b, var.equal = FALSE / TRUE) on every dataset of r-reference.json', () => {
  // Tolerances (stated once): t, df, se, meanDifference and CI bounds relative 1e-9, plus an absolute allowance of
  // 8 ulps of the larger mean for quantities built on the difference of means (means near 1e12 are only
  // representable to ulp(1e12) = 1.2e-4); p-values relative 1e-6 (the project's requirement, down to 1e-300).
  const TOL = 1e-9;
  const P_TOL = 1e-6;
  it('the fixture has its header and at least 30 datasets', () => {
    expect(fixture.note).toMatch(/make-fixtures\.R/);
    expect(fixture.tools.R).toMatch(/R version/);
    expect(fixture.datasets.length).toBeGreaterThanOrEqual(30);
  });
  for (const ds of fixture.datasets) {
    it(`${ds.name} (n_a = ${ds.a.length}, n_b = ${ds.b.length})`, () => {
      const a = fromValues(freeze(ds.a));
      const b = fromValues(freeze(ds.b));
      const ma = moments(a);
      const mb = moments(b);
      const locationUlps = 8 * Number.EPSILON * Math.max(Math.abs(ma.mean ?? 0), Math.abs(mb.mean ?? 0));
      for (const c of ds.cases) {
        for (const [name, run] of [['welch', welchTest], ['student', studentTest]] as const) {
          const actual: TTestResult = run(a, b, { alternative: c.alternative, confidenceLevel: c.confidenceLevel });
          const expected = c[name];
          const where = `${ds.name} (n_a=${ds.a.length}, n_b=${ds.b.length}) ${name} ${c.alternative} ${c.confidenceLevel}`;
          if (expected === null) {
            // R stops ("data are essentially constant"); we return nulls with a reason
            expect(actual.t, `${where}: R refused, expected t = null`).toBeNull();
            expect(actual.p).toBeNull();
            expect(actual.reason).toBeTruthy();
            continue;
          }
          const near = (field: string, act: number | null, exp: number | null, tol: number, abs = 0): void => {
            if (exp === null) {
              expect(act, `${where} ${field}: expected null (infinite bound in R), actual ${act}`).toBeNull();
              return;
            }
            expect(act, `${where} ${field}: expected ${exp}, actual null`).not.toBeNull();
            const ok = Math.abs((act as number) - exp) <= tol * Math.abs(exp) + abs;
            expect(ok, `${where} ${field}: expected ${exp}, actual ${act}, tolerance ${tol} relative + ${abs} absolute`).toBe(true);
          };
          const tAbs = (locationUlps / Math.max(expected.se, Number.MIN_VALUE)) * 1;
          near('t', actual.t, expected.t, TOL, tAbs);
          near('df', actual.df, expected.df, TOL);
          near('se', actual.se, expected.se, TOL);
          near('meanDifference', actual.meanDifference, expected.meanDifference, TOL, locationUlps);
          near('ciLower', actual.ci.lower, expected.ciLower, TOL, locationUlps);
          near('ciUpper', actual.ci.upper, expected.ciUpper, TOL, locationUlps);
          near('p', actual.p, expected.p, P_TOL, 0);
          expect(actual.ci.level).toBe(c.confidenceLevel);
          if (c.alternative !== 'two-sided') expect(actual.ci.reason).toMatch(/One-sided/);
        }
      }
    });
  }
});

// ---------------------------------------------------------------------------------------------------
// @stdlib/stats-ttest2 cross-check
// ---------------------------------------------------------------------------------------------------
describe('cross-check with @stdlib/stats-ttest2 (Welch by default; pooled with variance: "equal")', () => {
  const draw = normalSampler(20240607);
  const sets: Array<[string, number[], number[]]> = [
    ['equal sizes, equal sd', draw(25, 10, 2), draw(25, 11, 2)],
    ['unequal sd', draw(15, 0, 1), draw(40, 0.4, 4)],
    ['tiny vs large', draw(3, 5, 1), draw(200, 4, 1.5)],
    ['large', draw(2000, 100, 15), draw(1800, 101, 15)],
    ['negative shift', draw(30, -2, 0.5), draw(35, -1.8, 0.7)],
    ['integer-like', draw(60, 4, 1.2).map(Math.round), draw(55, 4.3, 1.1).map(Math.round)],
  ];
  for (const [name, x, y] of sets) {
    it(`${name} (n = ${x.length} vs ${y.length})`, () => {
      const a = fromValues(freeze(x));
      const b = fromValues(freeze(y));
      for (const [variance, run] of [['unequal', welchTest], ['equal', studentTest]] as const) {
        for (const alternative of ['two-sided', 'less', 'greater'] as const) {
          const ours = run(a, b, { alternative, confidenceLevel: 0.9 });
          const theirs = ttest2(x, y, { variance, alternative, alpha: 0.1 });
          const where = `${name} ${variance} ${alternative}`;
          // statistic and df: relative 1e-12 (same formulas); p: relative 1e-9, or 1e-15 absolute where stdlib
          // forms 1 − cdf; interval bounds: relative 1e-9
          expect(relErrOrAbs(ours.t as number, theirs.statistic), `${where} t ${ours.t} vs ${theirs.statistic}`).toBeLessThan(1e-12);
          expect(relErrOrAbs(ours.df as number, theirs.df), `${where} df`).toBeLessThan(1e-12);
          const dp = Math.abs((ours.p as number) - theirs.pValue);
          expect(dp <= 1e-9 * theirs.pValue || dp < 1e-15, `${where} p ${ours.p} vs ${theirs.pValue}`).toBe(true);
          const [lo, hi] = theirs.ci;
          if (Number.isFinite(lo)) expect(relErrOrAbs(ours.ci.lower as number, lo), `${where} lower`).toBeLessThan(1e-9);
          else expect(ours.ci.lower).toBeNull();
          if (Number.isFinite(hi)) expect(relErrOrAbs(ours.ci.upper as number, hi), `${where} upper`).toBeLessThan(1e-9);
          else expect(ours.ci.upper).toBeNull();
        }
      }
    });
  }
});

// ---------------------------------------------------------------------------------------------------
// Edge cases
// ---------------------------------------------------------------------------------------------------
describe('edge cases: null with a reason, never an exception, never NaN', () => {
  const noBadNumbers = (r: unknown) => expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);

  it('n = 0 in a group', () => {
    for (const run of [welchTest, studentTest]) {
      const r = run(fromValues([]), fromValues(freeze([1, 2, 3])), TWO_SIDED_95);
      expect(r).toMatchObject({ t: null, df: null, p: null, meanDifference: null, se: null });
      expect(r.reason).toBeTruthy();
      noBadNumbers(r);
    }
  });

  it('n = 1 in a group: Welch undefined (R: "not enough \'x\' observations"); pooled works as in R', () => {
    const a = fromValues(freeze([4]));
    const b = fromValues(freeze([1, 2, 3]));
    const w = welchTest(a, b, TWO_SIDED_95);
    expect(w.t).toBeNull();
    expect(w.meanDifference).toBe(2);
    expect(w.reason).toMatch(/two observations/);
    const s = studentTest(a, b, TWO_SIDED_95);
    // R 4.2.2: t.test(4, c(1, 2, 3), var.equal = TRUE) gives t = 1.7320508, df = 2, p-value = 0.2254033
    expect(relErrOrAbs(s.t as number, 1.7320508075688772)).toBeLessThan(1e-9);
    expect(s.df).toBe(2);
    expect(relErrOrAbs(s.p as number, 0.2254033307585166)).toBeLessThan(1e-6);
    expect(studentTest(fromValues([4]), fromValues([5]), TWO_SIDED_95).t).toBeNull();
  });

  it('n = 2 in each group', () => {
    const r = welchTest(fromValues(freeze([1, 3])), fromValues(freeze([2, 6])), TWO_SIDED_95);
    // by hand: va = 2, vb = 8, se = √(1 + 4) = √5, t = (2 − 4)/√5, df = 25/(1/1 + 16/1) = 25/17
    expect(r.t).toBeCloseTo(-2 / Math.sqrt(5), 14);
    expect(r.df).toBeCloseTo(25 / 17, 14);
    expect(r.p as number).toBeGreaterThan(0);
    expect(r.p as number).toBeLessThan(1);
  });

  it('both groups constant: t undefined (R stops: "data are essentially constant")', () => {
    for (const [x, y] of [[[3, 3, 3], [5, 5]], [[4, 4], [4, 4, 4]]]) {
      for (const run of [welchTest, studentTest]) {
        const r = run(fromValues(freeze(x)), fromValues(freeze(y)), TWO_SIDED_95);
        expect(r.t).toBeNull();
        expect(r.p).toBeNull();
        expect(r.meanDifference).toBe(x[0] - y[0]);
        expect(r.reason).toMatch(/zero/);
        expect(r.ci.lower).toBeNull();
        noBadNumbers(r);
      }
    }
  });

  it('one group constant: Welch is defined with df = n − 1 of the other group', () => {
    const r = welchTest(fromValues(freeze([5, 5, 5, 5])), fromValues(freeze([1, 4, 6, 9, 2])), TWO_SIDED_95);
    expect(r.df).toBeCloseTo(4, 12);
    expect(r.t).not.toBeNull();
  });

  it('one-sided intervals have one null bound with a reason (R reports ±Inf)', () => {
    const a = fromValues(SLEEP_1);
    const b = fromValues(SLEEP_2);
    const greater = welchTest(a, b, { alternative: 'greater', confidenceLevel: 0.95 });
    expect(greater.ci.upper).toBeNull();
    expect(greater.ci.lower).not.toBeNull();
    expect(greater.ci.reason).toMatch(/unbounded above/);
    const less = welchTest(a, b, { alternative: 'less', confidenceLevel: 0.95 });
    expect(less.ci.lower).toBeNull();
    expect(less.ci.reason).toMatch(/unbounded below/);
    expect((less.p as number) + (greater.p as number)).toBeCloseTo(1, 14);
  });

  it('values near 1e12 with a spread of a few units: t equals that of the data shifted by −1e12', () => {
    const base = normalSampler(99)(40, 0, 3).map((v) => Math.round(v * 1024) / 1024);
    const other = normalSampler(100)(35, 1, 3).map((v) => Math.round(v * 1024) / 1024);
    const shifted = welchTest(fromValues(freeze(base.map((v) => v + 1e12))), fromValues(freeze(other.map((v) => v + 1e12))), TWO_SIDED_95);
    const plain = welchTest(fromValues(freeze(base)), fromValues(freeze(other)), TWO_SIDED_95);
    // the shift by 1e12 is exact for multiples of 1/1024; the means can differ by an ulp of 1e12 (1.2e-4)
    expect(Math.abs((shifted.t as number) - (plain.t as number))).toBeLessThan(2.5e-4 / (plain.se as number));
    expect(relErrOrAbs(shifted.se as number, plain.se as number)).toBeLessThan(1e-12);
    expect(relErrOrAbs(shifted.df as number, plain.df as number)).toBeLessThan(1e-12);
  });

  it('tiny p-values survive (no 1 − cdf): a huge separation gives p far below 1e-100', () => {
    const draw = normalSampler(5);
    const r = welchTest(fromValues(freeze(draw(400, 0, 1))), fromValues(freeze(draw(400, 3, 1))), TWO_SIDED_95);
    expect(r.p as number).toBeGreaterThan(0);
    expect(r.p as number).toBeLessThan(1e-100);
  });

  it('rejects bad options and bad moments with RangeError', () => {
    const a = fromValues(SLEEP_1);
    expect(() => welchTest(a, a, { alternative: 'two-sided', confidenceLevel: 1 })).toThrow(RangeError);
    expect(() => welchTest(a, a, { alternative: 'both' as never, confidenceLevel: 0.95 })).toThrow(RangeError);
    expect(() => welchFromMoments({ n: 3, mean: Number.NaN, variance: 1 }, { n: 3, mean: 1, variance: 1 }, TWO_SIDED_95)).toThrow(RangeError);
    expect(() => studentFromMoments({ n: 3, mean: 1, variance: -1 }, { n: 3, mean: 1, variance: 1 }, TWO_SIDED_95)).toThrow(RangeError);
  });

  it('values near 1e-300 and 1e300: t, df and p as for the same data scaled by a power of two (scale-free)', () => {
    const x = [1.5, -2.25, 3, 0.5, 2];
    const y = [2.5, 4, 1.75, 3.5];
    for (const k of [-1000, -520, 520, 1000]) {
      const f = 2 ** k;
      for (const run of [welchTest, studentTest]) {
        const plain = run(fromValues(freeze(x)), fromValues(freeze(y)), TWO_SIDED_95);
        const scaled = run(fromValues(freeze(x.map((v) => v * f))), fromValues(freeze(y.map((v) => v * f))), TWO_SIDED_95);
        expect(scaled.t, `2^${k}`).toBe(plain.t);
        expect(scaled.df).toBe(plain.df);
        expect(scaled.p).toBe(plain.p);
        expect(scaled.meanDifference).toBe((plain.meanDifference as number) * f);
        expect(scaled.se).toBe((plain.se as number) * f);
        expect(scaled.ci.lower).toBe((plain.ci.lower as number) * f);
        noBadNumbers(scaled);
      }
      expect(effectSizes(fromValues(x.map((v) => v * f)), fromValues(y.map((v) => v * f)), null, 0.95).cohensD).toBe(
        effectSizes(fromValues(x), fromValues(y), null, 0.95).cohensD,
      );
    }
  });

  it('moments whose variance overflows give null with a reason, not Infinity', () => {
    const r = welchFromMoments({ n: 3, mean: 0, variance: Infinity }, { n: 2, mean: 1, variance: 1e308 }, TWO_SIDED_95);
    expect(r.t).toBeNull();
    expect(r.reason).toMatch(/double-precision range/);
    noBadNumbers(r);
  });
});

describe('welchFromMoments / studentFromMoments (O(1) recomputation for leave-one-out checks)', () => {
  it('equal the Sample-based tests exactly, and a Welford downdate reproduces the test without one observation', () => {
    const a = fromValues(SLEEP_1);
    const b = fromValues(SLEEP_2);
    expect(welchFromMoments(moments(a), moments(b), TWO_SIDED_95)).toEqual(welchTest(a, b, TWO_SIDED_95));
    expect(studentFromMoments(moments(a), moments(b), TWO_SIDED_95)).toEqual(studentTest(a, b, TWO_SIDED_95));
    // remove the largest observation of a (3.7) by downdating n, mean and the sum of squares
    const m = moments(a);
    const x = 3.7;
    const n1 = m.n - 1;
    const mean1 = ((m.mean as number) * m.n - x) / n1;
    const variance1 = ((m.variance as number) * (m.n - 1) - (x - (m.mean as number)) * (x - mean1)) / (n1 - 1);
    const quick = welchFromMoments({ n: n1, mean: mean1, variance: variance1 }, moments(b), TWO_SIDED_95);
    const full = welchTest(fromValues(SLEEP_1.filter((v) => v !== 3.7)), b, TWO_SIDED_95);
    expect(relErrOrAbs(quick.p as number, full.p as number)).toBeLessThan(1e-12);
    expect(relErrOrAbs(quick.t as number, full.t as number)).toBeLessThan(1e-12);
  });
});

// ---------------------------------------------------------------------------------------------------
// Properties (fast-check)
// ---------------------------------------------------------------------------------------------------
describe('properties', () => {
  const group = fc.array(fc.integer({ min: -50, max: 50 }).map((k) => k / 4), { minLength: 2, maxLength: 25 });
  const alternatives = fc.constantFrom<Alternative>('two-sided', 'less', 'greater');
  const level = fc.constantFrom(0.9, 0.95, 0.99);

  it('swapping a and b negates t and the mean difference, mirrors the interval, keeps df and two-sided p', () => {
    fc.assert(
      fc.property(group, group, level, (x, y, L) => {
        const a = fromValues(freeze(x));
        const b = fromValues(freeze(y));
        for (const run of [welchTest, studentTest]) {
          const ab = run(a, b, { alternative: 'two-sided', confidenceLevel: L });
          const ba = run(b, a, { alternative: 'two-sided', confidenceLevel: L });
          if (ab.t === null) {
            expect(ba.t).toBeNull();
            continue;
          }
          // Exact negation; `+ 0` folds −0 into +0 (equal means give t = 0 both ways).
          expect((ba.t as number) + 0).toBe(-ab.t + 0);
          expect((ba.meanDifference as number) + 0).toBe(-(ab.meanDifference as number) + 0);
          expect(ba.df).toBe(ab.df);
          expect(ba.p).toBe(ab.p);
          expect((ba.ci.lower as number) + 0).toBe(-(ab.ci.upper as number) + 0);
          expect((ba.ci.upper as number) + 0).toBe(-(ab.ci.lower as number) + 0);
          expect(run(b, a, { alternative: 'less', confidenceLevel: L }).p).toBe(run(a, b, { alternative: 'greater', confidenceLevel: L }).p);
        }
      }),
      { numRuns: 200 },
    );
  });

  it('adding the same constant to every value changes only location estimates', () => {
    fc.assert(
      fc.property(group, group, fc.integer({ min: -1000, max: 1000 }), (x, y, c) => {
        const a = fromValues(freeze(x));
        const b = fromValues(freeze(y));
        const a2 = fromValues(freeze(x.map((v) => v + c)));
        const b2 = fromValues(freeze(y.map((v) => v + c)));
        for (const run of [welchTest, studentTest]) {
          const r1 = run(a, b, TWO_SIDED_95);
          const r2 = run(a2, b2, TWO_SIDED_95);
          if (r1.t === null) {
            expect(r2.t).toBeNull();
            continue;
          }
          // shifted values are exact (quarters plus an integer); the means may differ in the last bits
          expect(Math.abs((r2.t as number) - r1.t)).toBeLessThanOrEqual(1e-9 * (1 + Math.abs(r1.t)));
          expect(relErrOrAbs(r2.se as number, r1.se as number)).toBeLessThan(1e-9);
          expect(relErrOrAbs(r2.df as number, r1.df as number)).toBeLessThan(1e-9);
          expect(Math.abs((r2.meanDifference as number) - (r1.meanDifference as number))).toBeLessThan(1e-9);
          expect(Math.abs((r2.p as number) - (r1.p as number))).toBeLessThan(1e-9);
        }
        const s1 = summarize(a);
        const s2 = summarize(a2);
        for (const key of ['mean', 'median', 'q1', 'q3', 'min', 'max'] as const) {
          expect(Math.abs((s2[key] as number) - ((s1[key] as number) + c))).toBeLessThan(1e-9);
        }
        for (const key of ['sd', 'iqr', 'mad'] as const) expect(Math.abs((s2[key] as number) - (s1[key] as number))).toBeLessThan(1e-9);
        for (const key of ['skewness', 'excessKurtosis'] as const) {
          if (s1[key] === null) expect(s2[key]).toBeNull();
          else expect(Math.abs((s2[key] as number) - (s1[key] as number))).toBeLessThan(1e-7);
        }
        const e1 = effectSizes(a, b, null, 0.95);
        const e2 = effectSizes(a2, b2, null, 0.95);
        if (e1.cohensD === null) expect(e2.cohensD).toBeNull();
        else expect(Math.abs((e2.cohensD as number) - e1.cohensD)).toBeLessThan(1e-9 * (1 + Math.abs(e1.cohensD)));
      }),
      { numRuns: 150 },
    );
  });

  it('every p lies in [0, 1] and the interval contains the estimate, for any data and alternative', () => {
    const anyGroup = fc.array(
      fc.oneof(fc.double({ min: -1e6, max: 1e6, noNaN: true, noDefaultInfinity: true }), fc.double({ noNaN: true, noDefaultInfinity: true })),
      { minLength: 0, maxLength: 30 },
    );
    fc.assert(
      fc.property(anyGroup, anyGroup, alternatives, level, (x, y, alternative, L) => {
        for (const run of [welchTest, studentTest]) {
          const r = run(fromValues(freeze(x)), fromValues(freeze(y)), { alternative, confidenceLevel: L });
          expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);
          if (r.p === null) {
            expect(r.reason).toBeTruthy();
            continue;
          }
          expect(r.p).toBeGreaterThanOrEqual(0);
          expect(r.p).toBeLessThanOrEqual(1);
          if (r.ci.lower !== null) expect(r.ci.lower).toBeLessThanOrEqual(r.meanDifference as number);
          if (r.ci.upper !== null) expect(r.ci.upper).toBeGreaterThanOrEqual(r.meanDifference as number);
        }
      }),
      { numRuns: 300 },
    );
  });
});
