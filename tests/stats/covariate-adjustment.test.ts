/**
 * Lin's covariate-adjusted difference (stats/covariate-adjustment.ts) and the least-squares solver under it
 * (stats/least-squares.ts), against R's lm with sandwich::vcovHC(type = "HC2") (tests/fixtures/r-lin.json from
 * tests/reference/make-lin-fixtures.R: 12 invented data sets and R's built-in ToothGrowth and warpbreaks), plus
 * the HC2-equals-Welch invariant as a property, input checks, rank deficiency and a seeded simulation.
 *
 * Tolerances (relative): 1e-9 for estimates, standard errors, t and interval bounds (pure arithmetic; observed
 * worst ~1e-12, on 5800 rows); 1e-6 for p-values (through the incomplete beta); df and counts exactly.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { compare, covariateAdjusted } from '../../stats/index.js';
import { hc2Covariance, leastSquares } from '../../stats/least-squares.js';
import { Rng } from '../helpers/rng.js';
import { expectRel, loadFixture, relErr } from './fixtures.js';

interface Block {
  estimate: number | null;
  se: number | null;
  t: number | null;
  df: number | null;
  p: number | null;
  ciLower: number | null;
  ciUpper: number | null;
  reason?: string;
}
interface Dataset {
  name: string;
  description: string;
  y: number[];
  inA: number[];
  covariates: (number | null)[][];
  covariateNames: string[];
  n: number;
  nA: number;
  nB: number;
  droppedRows: number;
  adjusted: Block;
  unadjusted: Block;
  welchSe: number;
}
const fixture = loadFixture<{ tools: Record<string, string>; datasets: Dataset[] }>('r-lin.json');
const EST = 1e-9;
const P = 1e-6;

function expectBlock(actual: ReturnType<typeof covariateAdjusted>['adjusted'], expected: Block, what: string): void {
  expectRel(actual.estimate, expected.estimate as number, EST, `${what} estimate`);
  expectRel(actual.se, expected.se as number, EST, `${what} HC2 se`);
  expectRel(actual.t, expected.t as number, EST, `${what} t`);
  expect(actual.df, `${what} df`).toBe(expected.df);
  expectRel(actual.p, expected.p as number, P, `${what} p`);
  expectRel(actual.ci.lower, expected.ciLower as number, EST, `${what} ci lower`);
  expectRel(actual.ci.upper, expected.ciUpper as number, EST, `${what} ci upper`);
}

describe(`Lin's estimator against R lm + sandwich HC2 (r-lin.json, sandwich ${fixture.tools.sandwich})`, () => {
  for (const d of fixture.datasets) {
    it(`${d.name}: ${d.description}`, () => {
      const input = {
        outcome: Object.freeze([...d.y]),
        inA: Object.freeze([...d.inA]),
        covariates: Object.freeze(d.covariates.map((c) => Object.freeze([...c]))),
        covariateNames: d.covariateNames,
      };
      const r = covariateAdjusted(input);
      expect([r.n, r.nA, r.nB, r.missing.droppedRows]).toEqual([d.n, d.nA, d.nB, d.droppedRows]);
      expect(r.missing.rule).toBe('complete-cases');
      expect(r.parameterCount).toBe(2 + 2 * d.covariates.length);
      expectBlock(r.unadjusted, d.unadjusted, `${d.name} unadjusted`);
      expectRel(r.unadjusted.se, d.welchSe, 1e-12, `${d.name} unadjusted HC2 se = Welch se (R t.test stderr)`);
      if (d.adjusted.estimate === null) {
        expect(r.adjusted.estimate, `${d.name}: R reports ${d.adjusted.reason}`).toBeNull();
        expect(r.adjusted.se).toBeNull();
        expect(r.adjusted.reason).toMatch(/same value|linear combination|not identified/);
        expect(r.narrowingPercent).toBeNull();
        expect(r.reason).toMatch(/^Adjusted estimate: /);
      } else {
        expectBlock(r.adjusted, d.adjusted, `${d.name} adjusted`);
        const expectedNarrowing =
          100 * (1 - ((d.adjusted.ciUpper as number) - (d.adjusted.ciLower as number)) / ((d.unadjusted.ciUpper as number) - (d.unadjusted.ciLower as number)));
        expect(Math.abs((r.narrowingPercent as number) - expectedNarrowing), `${d.name} narrowing ${r.narrowingPercent} vs ${expectedNarrowing} (abs 1e-9)`).toBeLessThanOrEqual(1e-9);
      }
      expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);
    });
  }

  it('missing covariates: counts per covariate and per condition', () => {
    const d = fixture.datasets.find((x) => x.name === 'missing-covariates')!;
    const r = covariateAdjusted({ outcome: d.y, inA: d.inA, covariates: d.covariates, covariateNames: d.covariateNames });
    const missingX1 = d.covariates[0].filter((v) => v === null).length;
    const missingX2 = d.covariates[1].filter((v) => v === null).length;
    expect(r.missing.perCovariate).toEqual([{ name: 'x1', missing: missingX1 }, { name: 'x2', missing: missingX2 }]);
    expect(r.missing.droppedA + r.missing.droppedB).toBe(d.droppedRows);
    expect(missingX1).toBe(17);
    expect(missingX2).toBe(9);
  });
});

describe('HC2 standard error of the unadjusted difference equals Welch’s (property)', () => {
  // Answers from −100 to 100 in steps of 0.001, with frequent ties (and whole constant groups) from the small integer range.
  const answer = fc.oneof(fc.integer({ min: -100000, max: 100000 }).map((v) => v / 1000), fc.integer({ min: 0, max: 3 }));
  it('on random groups of sizes 2 … 40 (relative 1e-12: the two are computed by different routes, O(n) rounding)', () => {
    fc.assert(
      fc.property(
        fc.array(answer, { minLength: 2, maxLength: 40 }),
        fc.array(answer, { minLength: 2, maxLength: 40 }),
        (a, b) => {
          const welch = compare(a, b).welch;
          const r = covariateAdjusted({ outcome: [...a, ...b], inA: [...a.map(() => 1), ...b.map(() => 0)], covariates: [] });
          if (welch.se === null || welch.se === 0) {
            expect(r.unadjusted.se).toBeNull();
            return;
          }
          const err = relErr(r.unadjusted.se as number, welch.se);
          expect(err, `a = ${JSON.stringify(a)}, b = ${JSON.stringify(b)}: HC2 ${r.unadjusted.se}, Welch ${welch.se}, tolerance 1e-12`).toBeLessThanOrEqual(1e-12);
          expectRel(r.unadjusted.estimate, welch.meanDifference as number, 1e-12, 'difference in means');
          // With no covariates Lin's estimate is the unadjusted one.
          expect(r.adjusted.se).toBe(r.unadjusted.se);
          expect(r.narrowingPercent).toBe(0);
        },
      ),
      { numRuns: 200 },
    );
  });
});

describe('undefined cases and input checks', () => {
  it('more parameters than rows: null with a reason', () => {
    const rng = new Rng(7);
    const n = 9;
    const covariates = Array.from({ length: 4 }, () => Array.from({ length: n }, () => rng.normal()));
    const r = covariateAdjusted({ outcome: covariates[0].map((x) => x + rng.normal()), inA: [1, 1, 1, 1, 1, 0, 0, 0, 0], covariates });
    expect(r.parameterCount).toBe(10);
    expect(r.adjusted.estimate).toBeNull();
    expect(r.adjusted.reason).toMatch(/10 parameters but only 9 observations/);
    expect(r.unadjusted.se).not.toBeNull();
  });

  it('a condition with fewer than two complete answers: both null', () => {
    const r = covariateAdjusted({ outcome: [1, 2, 3, 4], inA: [1, 1, 0, 0], covariates: [[0.5, null, 1, 2]] });
    expect(r.nA).toBe(1);
    expect(r.adjusted.estimate).toBeNull();
    expect(r.unadjusted.estimate).toBeNull();
    expect(r.reason).toMatch(/at least two complete answers/);
  });

  it('a leverage of 1 (exact fit of a small group): null HC2 with a reason', () => {
    // Group a has two answers and one covariate: its intercept and slope fit both exactly (leverage 1).
    const r = covariateAdjusted({ outcome: [1, 3, 2, 2.5, 1.5, 4], inA: [1, 1, 0, 0, 0, 0], covariates: [[0, 1, 0.2, 0.9, 0.4, 1.3]] });
    expect(r.adjusted.se).toBeNull();
    expect(r.adjusted.reason).toMatch(/leverage 1/);
  });

  it('rejects bad input with a RangeError naming the index (inputs frozen)', () => {
    const base = { outcome: Object.freeze([1, 2, 3, 4]), inA: Object.freeze([1, 1, 0, 0]), covariates: Object.freeze([Object.freeze([1, 2, 3, 5])]) };
    expect(() => covariateAdjusted({ ...base, outcome: [1, Number.NaN, 3, 4] })).toThrow(/outcome\[1\]/);
    expect(() => covariateAdjusted({ ...base, inA: [1, 2, 0, 0] })).toThrow(/inA\[1\]/);
    expect(() => covariateAdjusted({ ...base, covariates: [[1, 2, Infinity, 4]] })).toThrow(/covariates\[0\]\[2\]/);
    expect(() => covariateAdjusted({ ...base, covariates: [[1, 2, Number.NaN, 4]] })).toThrow(/covariates\[0\]\[2\]/);
    expect(() => covariateAdjusted({ ...base, inA: [1, 0] })).toThrow(RangeError);
    expect(() => covariateAdjusted(base, { confidenceLevel: 1 })).toThrow(RangeError);
    expect(covariateAdjusted(base).n).toBe(4);
  });

  it('one-sided alternative: one interval bound null, narrowing from the finite half-widths', () => {
    const d = fixture.datasets.find((x) => x.name === 'one-strong-covariate')!;
    const two = covariateAdjusted({ outcome: d.y, inA: d.inA, covariates: d.covariates });
    const greater = covariateAdjusted({ outcome: d.y, inA: d.inA, covariates: d.covariates }, { alternative: 'greater' });
    expect(greater.adjusted.ci.upper).toBeNull();
    expectRel(greater.adjusted.p, (two.adjusted.p as number) / 2, 1e-12, 'one-sided p (t > 0)');
    expect(greater.narrowingPercent as number).toBeGreaterThan(0);
  });
});

describe('least squares (Householder QR)', () => {
  it('recovers an exact linear relation to rounding, leverages sum to p', () => {
    const n = 7;
    const x1 = [0, 1, 2, 3, 4, 5, 6];
    const x2 = [1, 0, 1, 0, 1, 1, 0];
    const y = x1.map((v, i) => 1.5 - 2 * v + 0.25 * x2[i]);
    const data = Float64Array.from([...Array(n).fill(1), ...x1, ...x2]);
    const fit = leastSquares({ n, p: 3, data, names: ['1', 'x1', 'x2'] }, y);
    if ('reason' in fit) throw new Error(fit.reason);
    for (const [k, e] of [1.5, -2, 0.25].entries()) expect(Math.abs(fit.coefficients[k] - e), `coefficient ${k}`).toBeLessThanOrEqual(64 * Number.EPSILON * 8);
    const trace = fit.leverages.reduce((s, h) => s + h, 0);
    expect(Math.abs(trace - 3), `trace of the hat matrix ${trace}, expected 3 (abs 64·EPSILON)`).toBeLessThanOrEqual(64 * Number.EPSILON);
    const hc = hc2Covariance(fit);
    expect('covariance' in hc && hc.covariance.every((v) => Math.abs(v) < 1e-25)).toBe(true); // zero residuals
  });

  it('a column that repeats another is refused with its name', () => {
    const data = Float64Array.from([1, 1, 1, 1, 0, 1, 2, 3, 0, 2, 4, 6]);
    const fit = leastSquares({ n: 4, p: 3, data, names: ['1', 'x', 'two x'] }, [1, 2, 3, 5]);
    expect('reason' in fit && fit.reason).toMatch(/"two x" is a linear combination/);
  });
});

describe('simulation (seeded; Monte Carlo bounds ±4 standard errors)', () => {
  it('under no difference the adjusted and unadjusted tests reject near 5 %; a predictive covariate narrows the interval', () => {
    const rng = new Rng(2013);
    const reps = 1500;
    let rejectAdjusted = 0;
    let rejectUnadjusted = 0;
    let narrowing = 0;
    for (let r = 0; r < reps; r++) {
      const n = 80;
      const outcome: number[] = [];
      const inA: number[] = [];
      const strong: number[] = [];
      const weak: number[] = [];
      for (let i = 0; i < n; i++) {
        const x = rng.normal();
        const z = rng.normal();
        strong.push(x);
        weak.push(z);
        inA.push(i < 35 ? 1 : 0); // unequal groups, no effect of the condition
        outcome.push(2 + 0.8 * x + 0.05 * z + 0.6 * rng.normal() * (1 + 0.5 * Math.abs(x)));
      }
      const res = covariateAdjusted({ outcome, inA, covariates: [strong, weak] });
      if ((res.adjusted.p as number) < 0.05) rejectAdjusted++;
      if ((res.unadjusted.p as number) < 0.05) rejectUnadjusted++;
      narrowing += res.narrowingPercent as number;
    }
    const mcse = Math.sqrt((0.05 * 0.95) / reps);
    for (const [name, k] of [['adjusted', rejectAdjusted], ['unadjusted', rejectUnadjusted]] as const) {
      const rate = k / reps;
      expect(Math.abs(rate - 0.05), `${name}: rejection rate ${rate} over ${reps} runs, bound 0.05 ± ${4 * mcse}`).toBeLessThanOrEqual(4 * mcse);
    }
    // The covariate explains most of the outcome's variance, so the interval narrows by far more than 10 % on average.
    expect(narrowing / reps, `average narrowing ${narrowing / reps} %`).toBeGreaterThan(10);
  });
});
