/**
 * welchOmegaSquared: est. ω² = df1·(F − 1)/(df1·(F − 1) + N), floored at 0.
 * Sources: R's PlantGrowth and InsectSprays through tests/fixtures/r-omnibus.json (oneway.test's F and df1), the
 * formula evaluated by hand; with the classic F the same formula must equal the classic ω² that the fixture
 * computes from the sums of squares (an identity: ω² = df1(F − 1)/(df1(F − 1) + N) when F = MS_b/MS_w).
 * Tolerance: pure arithmetic on fixture values, 8·EPSILON relative.
 */
import { describe, expect, it } from 'vitest';
import { welchOmegaSquared } from '../../stats/welch-anova-effect.js';
import { expectRel, loadFixture } from './fixtures.js';

interface D {
  name: string;
  groups: number[][];
  welch: { f: number; df1: number };
  classic: { f: number; df1: number; omegaSquared: number };
}
const fixture = loadFixture<{ datasets: D[] }>('r-omnibus.json');
const TOL = 8 * Number.EPSILON;

describe('welchOmegaSquared', () => {
  for (const name of ['PlantGrowth', 'InsectSprays']) {
    it(`${name}: the formula on R's Welch F, and the classic ω² identity`, () => {
      const d = fixture.datasets.find((x) => x.name === name)!;
      const n = d.groups.reduce((s, g) => s + g.length, 0);
      const byHand = (d.welch.df1 * (d.welch.f - 1)) / (d.welch.df1 * (d.welch.f - 1) + n);
      expectRel(welchOmegaSquared(d.welch.f, d.welch.df1, n).omegaSquared, byHand, TOL, `${name} est. ω² (inputs F=${d.welch.f}, df1=${d.welch.df1}, N=${n})`);
      // From the classic F the estimator is the classic ω² (relative 1e-9: the fixture's ω² went through R's sums of squares).
      expectRel(welchOmegaSquared(d.classic.f, d.classic.df1, n).omegaSquared, d.classic.omegaSquared, 1e-9, `${name} classic identity`);
    });
  }

  it('is 0 when F < 1, null with a reason when F is undefined, and refuses bad input', () => {
    expect(welchOmegaSquared(0.5, 2, 30)).toEqual({ omegaSquared: 0 });
    expect(welchOmegaSquared(null, 2, 30)).toEqual({ omegaSquared: null, reason: "Welch's F is not defined for these data." });
    expect(Object.isFrozen(welchOmegaSquared(3, 2, 30))).toBe(true);
    expect(() => welchOmegaSquared(Number.NaN, 2, 30)).toThrow(RangeError);
    expect(() => welchOmegaSquared(2, 2, 0)).toThrow(RangeError);
  });
});
