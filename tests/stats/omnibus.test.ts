/**
 * Three or more conditions: Welch's and the classic ANOVA, Kruskal–Wallis, Games–Howell and Dunn against
 * R (tests/fixtures/r-omnibus.json from tests/reference/make-omnibus-fixtures.R: R's PlantGrowth and
 * InsectSprays data sets and 22 invented data sets), the counts path against the values path, and the
 * omnibus flags.
 *
 * Tolerances (relative, stated per quantity):
 *   statistics and df (F, df2, H, t, Welch df, z, η², ω², ε², mean differences, mean ranks): 1e-9 —
 *     sums of a few hundred terms of moments and ranks;
 *   p-values from F, chi-square and normal tails: 1e-6 (the project's target for special functions);
 *   Games–Howell p: 1e-8 against `pIntegrated`, the same tail by the definition integrated with R's
 *     integrate() (tests/reference/studentized-range-reference.R); 1e-6 against R's ptukey where its p is
 *     ≥ 1e-3 only: below that R's ptukey drifts (2.4e-4 relative at p = 6.7e-7 on InsectSprays, and a factor
 *     of 1.8 to 12 at p ≈ 1e-12, where it even returns 0), which the fixture records beside the integrated value.
 */
import { describe, expect, it } from 'vitest';
import {
  compareConditionCounts,
  compareConditions,
  compareConditionSamples,
  fromValues,
  type ConditionsComparison,
} from '../../stats/index.js';
import { expectRel, loadFixture } from './fixtures.js';

interface RPair {
  i: number;
  j: number;
  gamesHowell: { meanDifference: number; se: number; t: number; df: number; p: number; pIntegrated: number | null };
  dunn: { meanRankDifference: number; z: number; p: number; pHolm: number };
}
interface RDataset {
  name: string;
  description: string;
  groups: number[][];
  welch: { f: number; df1: number; df2: number; p: number };
  classic: { f: number; df1: number; df2: number; p: number; etaSquared: number; omegaSquared: number };
  kruskal: { h: number; df: number; p: number; epsilonSquared: number; meanRanks: number[] };
  pairs: RPair[];
}
const fixture = loadFixture<{ datasets: RDataset[] }>('r-omnibus.json');

const STAT = 1e-9;
const P = 1e-6;

function run(d: RDataset): ConditionsComparison {
  return compareConditionSamples(d.groups.map((g, i) => fromValues(Object.freeze([...g]), `g${i}`)));
}

describe('omnibus comparison against R (r-omnibus.json)', () => {
  it('has the two built-in data sets and at least 20 invented ones', () => {
    expect(fixture.datasets.map((d) => d.name).slice(0, 2)).toEqual(['PlantGrowth', 'InsectSprays']);
    expect(fixture.datasets.length - 2).toBeGreaterThanOrEqual(20);
  });

  for (const d of fixture.datasets) {
    it(`${d.name}: Welch, classic ANOVA and Kruskal–Wallis`, () => {
      const r = run(d);
      const what = (q: string) => `${d.name} ${q}`;
      expectRel(r.welchAnova.f, d.welch.f, STAT, what('Welch F'));
      expect(r.welchAnova.df1).toBe(d.welch.df1);
      expectRel(r.welchAnova.df2, d.welch.df2, STAT, what('Welch df2'));
      expectRel(r.welchAnova.p, d.welch.p, P, what('Welch p'));
      expectRel(r.classicAnova.f, d.classic.f, STAT, what('classic F'));
      expect([r.classicAnova.df1, r.classicAnova.df2]).toEqual([d.classic.df1, d.classic.df2]);
      expectRel(r.classicAnova.p, d.classic.p, P, what('classic p'));
      expectRel(r.classicAnova.etaSquared, d.classic.etaSquared, STAT, what('eta squared'));
      expectRel(r.classicAnova.omegaSquared, d.classic.omegaSquared, STAT, what('omega squared'));
      expectRel(r.kruskalWallis.h, d.kruskal.h, STAT, what('Kruskal–Wallis H'));
      expect(r.kruskalWallis.df).toBe(d.kruskal.df);
      expectRel(r.kruskalWallis.p, d.kruskal.p, P, what('Kruskal–Wallis p'));
      expectRel(r.kruskalWallis.epsilonSquared, d.kruskal.epsilonSquared, STAT, what('epsilon squared'));
      d.kruskal.meanRanks.forEach((m, i) => expectRel(r.kruskalWallis.meanRanks[i], m, STAT, what(`mean rank ${i}`)));
      expect(r.groups.map((g) => g.n)).toEqual(d.groups.map((g) => g.length));
    });

    it(`${d.name}: Games–Howell and Dunn for every pair`, () => {
      const r = run(d);
      expect(r.pairs.map((p) => [p.i, p.j])).toEqual(d.pairs.map((p) => [p.i, p.j]));
      d.pairs.forEach((e, idx) => {
        const p = r.pairs[idx];
        const what = (q: string) => `${d.name} pair ${e.i}-${e.j} ${q}`;
        expectRel(p.gamesHowell.meanDifference, e.gamesHowell.meanDifference, STAT, what('mean difference'));
        expectRel(p.gamesHowell.t, e.gamesHowell.t, STAT, what('Games–Howell t'));
        expectRel(p.gamesHowell.df, e.gamesHowell.df, STAT, what('Games–Howell df'));
        if (e.gamesHowell.pIntegrated !== null) expectRel(p.gamesHowell.p, e.gamesHowell.pIntegrated, 1e-8, what('Games–Howell p vs integrated'));
        if (e.gamesHowell.p >= 1e-3) expectRel(p.gamesHowell.p, e.gamesHowell.p, P, what('Games–Howell p vs ptukey'));
        expectRel(p.dunn.meanRankDifference, e.dunn.meanRankDifference, STAT, what('Dunn mean-rank difference'));
        expectRel(p.dunn.z, e.dunn.z, STAT, what('Dunn z'));
        expectRel(p.dunn.p, e.dunn.p, P, what('Dunn p'));
        expectRel(p.dunn.pHolm, e.dunn.pHolm, P, what('Dunn Holm p'));
        expect(p.dunn.sidedness).toBe('two-sided');
        expect(p.equivalence).toBeNull();
      });
    });
  }

  it('the issue’s figures: PlantGrowth and InsectSprays (rounded as quoted)', () => {
    const pg = run(fixture.datasets[0]);
    expect(pg.welchAnova.f?.toFixed(3)).toBe('5.181');
    expect(pg.welchAnova.df2?.toFixed(3)).toBe('17.128');
    expect(pg.welchAnova.p?.toFixed(5)).toBe('0.01739');
    expect(pg.kruskalWallis.h?.toFixed(4)).toBe('7.9882');
    expect(pg.kruskalWallis.p?.toFixed(5)).toBe('0.01842');
    const trt = pg.pairs.find((p) => p.i === 1 && p.j === 2)!; // trt1 − trt2
    expect(trt.gamesHowell.meanDifference?.toFixed(3)).toBe('-0.865');
    expect(trt.gamesHowell.t?.toFixed(5)).toBe('-3.01010');
    expect(trt.gamesHowell.df?.toFixed(3)).toBe('14.104');
    expect(trt.gamesHowell.p?.toFixed(5)).toBe('0.02370');
    const is = run(fixture.datasets[1]);
    expect(is.welchAnova.f?.toFixed(3)).toBe('36.065');
    expect(is.welchAnova.df2?.toFixed(3)).toBe('30.043');
    expect(is.welchAnova.p?.toExponential(3)).toBe('7.999e-12');
    expect(is.kruskalWallis.h?.toFixed(3)).toBe('54.691');
    expect(is.kruskalWallis.p?.toExponential(3)).toBe('1.511e-10');
  });
});

describe('counts path', () => {
  it('gives the same numbers as the raw answers on every integer data set (exact equality up to 8 ulp)', () => {
    for (const d of fixture.datasets) {
      if (!d.groups.every((g) => g.every((v) => Number.isInteger(v) && v >= 0 && v <= 60))) continue;
      const counts = d.groups.map((g) => {
        const c = new Array<number>(61).fill(0);
        for (const v of g) c[v]++;
        return Object.freeze(c);
      });
      const fromCountsResult = compareConditionCounts(counts, { min: 0 });
      const fromValuesResult = compareConditions(d.groups.map((g) => Object.freeze([...g])));
      const tol = 8 * Number.EPSILON;
      expectRel(fromCountsResult.welchAnova.f, fromValuesResult.welchAnova.f as number, tol, `${d.name} Welch F counts vs values`);
      expectRel(fromCountsResult.kruskalWallis.h, fromValuesResult.kruskalWallis.h as number, tol, `${d.name} H counts vs values`);
      fromValuesResult.pairs.forEach((p, i) => {
        expectRel(fromCountsResult.pairs[i].dunn.z, p.dunn.z as number, tol, `${d.name} Dunn z counts vs values`);
        expectRel(fromCountsResult.pairs[i].gamesHowell.t, p.gamesHowell.t as number, tol, `${d.name} GH t counts vs values`);
      });
    }
  });
});

describe('omnibus flags', () => {
  const codes = (r: ConditionsComparison) => r.flags.map((f) => f.code).sort();

  it('one condition apart from three equal others: one_condition_drives names it', () => {
    const d = fixture.datasets.find((x) => x.name === 'one-condition-apart')!;
    const r = compareConditions(
      d.groups.map((g) => Object.freeze([...g])),
      { labels: ['shifted', 'same 1', 'same 2', 'same 3'] },
    );
    expect(codes(r)).toEqual(['one_condition_drives']);
    const flag = r.flags[0];
    expect(flag.detail.condition).toBe('shifted');
    expect(Object.keys(flag.detail.tests as object).sort()).toEqual(['kruskalWallis', 'welch']);
  });

  it('no flags when five conditions come from one distribution', () => {
    const d = fixture.datasets.find((x) => x.name === 'null-equal')!;
    const r = run(d);
    expect(r.welchAnova.p as number).toBeGreaterThan(0.05);
    expect(codes(r)).toEqual([]);
  });

  it('omnibus_tests_disagree: an extreme answer moves the means but not the ranks', () => {
    // Invented: three conditions of twelve answers; condition 3 has one huge value that inflates its mean and variance.
    const base = [3.1, 2.9, 3.0, 3.2, 2.8, 3.05, 2.95, 3.15, 2.85, 3.1, 2.9, 3.0];
    const a = Object.freeze(base.map((v) => v + 0.4));
    const b = Object.freeze(base.map((v) => v + 0.02));
    const c = Object.freeze(base.map((v) => v - 0.4));
    const r = compareConditions([a, b, c]);
    const welchSig = (r.welchAnova.p as number) < 0.05;
    const kwSig = (r.kruskalWallis.p as number) < 0.05;
    expect(welchSig && kwSig).toBe(true);
    // Now make the ranks separate while the means stay close: equal means, different shapes.
    const left = Object.freeze([1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 41]); // mean 4.33, ranks low
    const mid = Object.freeze([4, 4.1, 4.2, 4.3, 4.4, 4.5, 4.2, 4.3, 4.4, 4.5, 4.4, 4.3]);
    const right = Object.freeze([5, 5.1, 5.2, 5.3, 5.4, 5.5, 5.2, 5.3, 5.4, 5.5, 5.4, 5.3]);
    const r2 = compareConditions([left, mid, right], { alpha: 0.05 });
    expect((r2.kruskalWallis.p as number) < 0.05).toBe(true);
    expect((r2.welchAnova.p as number) < 0.05).toBe(true);
    const r3 = compareConditions([left, mid, Object.freeze(mid.map((v) => v + 0.05))], { alpha: 0.05 });
    expect((r3.kruskalWallis.p as number) < 0.05, `KW p ${r3.kruskalWallis.p}`).toBe(true);
    expect((r3.welchAnova.p as number) >= 0.05, `Welch p ${r3.welchAnova.p}`).toBe(true);
    expect(codes(r3)).toContain('omnibus_tests_disagree');
  });
});

describe('undefined cases and bad input', () => {
  it('a constant condition makes Welch’s F null with a reason; the rank route still runs', () => {
    const r = compareConditions([Object.freeze([1, 2, 3, 4]), Object.freeze([5, 5, 5]), Object.freeze([2, 3, 4, 6])]);
    expect(r.welchAnova.f).toBeNull();
    expect(r.welchAnova.reason).toMatch(/zero variance/);
    expect(r.kruskalWallis.h).not.toBeNull();
    expect(r.pairs[0].gamesHowell.t).not.toBeNull(); // one constant group is fine for a Welch pair
  });
  it('all answers equal: H null with a reason, Dunn z null', () => {
    const r = compareConditions([Object.freeze([2, 2]), Object.freeze([2, 2, 2]), Object.freeze([2])]);
    expect(r.kruskalWallis.h).toBeNull();
    expect(r.kruskalWallis.reason).toMatch(/same value/);
    expect(r.pairs.every((p) => p.dunn.z === null)).toBe(true);
    expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);
  });
  it('NaN throws a RangeError naming the condition and index', () => {
    expect(() => compareConditions([[1, 2], [3, NaN], [4, 5]])).toThrow(/conditions\[1\]\[1\]/);
  });
  it('fewer than two conditions, a bad margin or mismatched labels throw', () => {
    expect(() => compareConditions([[1, 2, 3]])).toThrow(RangeError);
    expect(() => compareConditions([[1, 2], [3, 4]], { equivalenceMargin: -1 })).toThrow(RangeError);
    expect(() => compareConditions([[1, 2], [3, 4]], { labels: ['x'] })).toThrow(RangeError);
  });
  it('with a margin every pair carries both equivalence routes', () => {
    const r = compareConditions([Object.freeze([1, 2, 3, 4, 5]), Object.freeze([2, 3, 4, 5, 6]), Object.freeze([1, 3, 5, 7, 9])], {
      equivalenceMargin: 1,
    });
    expect(r.pairs.length).toBe(3);
    for (const p of r.pairs) {
      expect(p.equivalence?.welch.verdict).not.toBeNull();
      expect(p.equivalence?.rank.lower.method).toBeDefined();
    }
    expect(Object.isFrozen(r.pairs[0].equivalence)).toBe(true);
  });
});
