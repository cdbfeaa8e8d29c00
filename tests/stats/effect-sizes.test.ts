import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { hedgesCorrection, noncentralTCdf, noncentralTUpperTail } from '../../stats/distributions.js';
import { effectSizes, noncentralityInterval } from '../../stats/effect-sizes.js';
import { fromCounts, fromValues } from '../../stats/sample.js';
import { loadFixture, relErrOrAbs } from './fixtures.js';

const freeze = (x: number[]): readonly number[] => Object.freeze(x.slice());
const SLEEP_1 = freeze([0.7, -1.6, -0.2, -1.2, -0.1, 3.4, 3.7, 0.8, 0.0, 2.0]);
const SLEEP_2 = freeze([1.9, 0.8, 1.1, 0.1, -0.1, 4.4, 5.5, 1.6, 4.6, 3.4]);

// Reference: tests/fixtures/r-effect-sizes.json from tests/reference/make-effect-size-fixtures.R (plain R 4.2.2:
// pooled-SD d; J through lbeta; the g interval by uniroot on pt(t, df, ncp), or on integrate() of the
// noncentral-t mixture for df > 4e5; W from wilcox.test).
interface EffectCase {
  confidenceLevel: number; cohensD: number; J: number; hedgesG: number; gLower: number; gUpper: number;
  W: number; rankBiserial: number; probabilityOfSuperiority: number;
}
interface EffectDataset { name: string; a?: number[]; b?: number[]; min?: number; aCounts?: number[]; bCounts?: number[]; cases: EffectCase[] }
const fixture = loadFixture<{
  note: string; tools: { R: string }; generated: string; datasets: EffectDataset[];
}>('r-effect-sizes.json');

describe('effect sizes against R (r-effect-sizes.json)', () => {
  it('fixture header', () => {
    expect(fixture.note).toMatch(/make-effect-size-fixtures\.R/);
    expect(fixture.tools.R).toMatch(/R version/);
    expect(fixture.datasets.length).toBeGreaterThanOrEqual(8);
  });
  for (const ds of fixture.datasets) {
    const a = ds.a ? fromValues(freeze(ds.a)) : fromCounts(freeze(ds.aCounts as number[]), ds.min);
    const b = ds.b ? fromValues(freeze(ds.b)) : fromCounts(freeze(ds.bCounts as number[]), ds.min);
    it(`${ds.name} (n_a = ${a.n}, n_b = ${b.n})`, () => {
      for (const c of ds.cases) {
        const e = effectSizes(a, b, c.W, c.confidenceLevel);
        const where = `${ds.name} (n_a=${a.n}, n_b=${b.n}) level ${c.confidenceLevel}`;
        const near = (what: string, actual: number | null, expected: number, tol: number) => {
          expect(actual, `${where} ${what}: expected ${expected}, actual null`).not.toBeNull();
          const r = relErrOrAbs(actual as number, expected);
          expect(r, `${where} ${what}: expected ${expected}, actual ${actual}, relative error ${r} > tolerance ${tol}`).toBeLessThanOrEqual(tol);
        };
        // d, J, g: relative 1e-12 (R's var() on the expanded million-answer data agrees to 3e-14)
        near("Cohen's d (R, pooled SD)", e.cohensD, c.cohensD, 1e-12);
        near('J (R, via lbeta)', hedgesCorrection(a.n + b.n - 2), c.J, 1e-13);
        near("Hedges' g (R)", e.hedgesG, c.hedgesG, 1e-12);
        // interval: relative 1e-9 (R's pt(ncp), AS 243, is accurate to ~1e-11 absolute, which moves the root by
        // up to ~1e-10; observed ≤ 7e-11)
        near('g lower bound (R uniroot on pt(ncp))', e.hedgesGCi.lower, c.gLower, 1e-9);
        near('g upper bound (R uniroot on pt(ncp))', e.hedgesGCi.upper, c.gUpper, 1e-9);
        expect(e.hedgesGCi.level).toBe(c.confidenceLevel);
        // rank-based: exact arithmetic on W
        near('rank-biserial (2W/(n_a n_b) − 1)', e.rankBiserial, c.rankBiserial, 1e-14);
        near('probability of superiority (W/(n_a n_b))', e.probabilityOfSuperiority, c.probabilityOfSuperiority, 1e-14);
      }
    });
  }
});

describe("published and closed-form values", () => {
  it("sleep data: d = −0.832; Hedges' approximation J ≈ 1 − 3/(4df − 1) (Hedges 1981, eq. 6e; from memory) agrees to 1e-3", () => {
    const e = effectSizes(fromValues(SLEEP_1), fromValues(SLEEP_2), 25.5, 0.95);
    // d by hand: (0.75 − 2.33) / √((1.789² + 2.002²)/2) = −0.832
    expect(Math.abs((e.cohensD as number) + 0.832)).toBeLessThan(5e-4);
    const approximateJ = 1 - 3 / (4 * 18 - 1);
    expect(Math.abs((e.hedgesG as number) - approximateJ * (e.cohensD as number))).toBeLessThan(1e-3);
    // U = 25.5 is R's W for wilcox.test(sleep group 1, group 2) (R 4.2.2): PS = 25.5/100, r = 2·0.255 − 1
    expect(e.probabilityOfSuperiority).toBe(0.255);
    expect(e.rankBiserial).toBeCloseTo(-0.49, 15);
    expect(Object.isFrozen(e) && Object.isFrozen(e.hedgesGCi)).toBe(true);
  });

  it('the interval bounds solve the defining equations P(T > t | ncp_L) = α/2 and P(T ≤ t | ncp_U) = α/2', () => {
    for (const [t, df, level] of [[-1.86, 18, 0.95], [0.4, 5, 0.9], [12, 40, 0.99], [250, 2e6, 0.95], [-3, 2, 0.95]] as const) {
      const ci = noncentralityInterval(t, df, level);
      expect(ci).not.toBeNull();
      const half = (1 - level) / 2;
      expect(relErrOrAbs(noncentralTUpperTail(t, df, ci!.lower), half), `lower t=${t} df=${df}`).toBeLessThan(1e-10);
      expect(relErrOrAbs(noncentralTCdf(t, df, ci!.upper), half), `upper t=${t} df=${df}`).toBeLessThan(1e-10);
      expect(ci!.lower).toBeLessThan(t);
      expect(ci!.upper).toBeGreaterThan(t);
    }
  });
});

describe('edge cases', () => {
  const noBadNumbers = (r: unknown) => expect(JSON.stringify(r)).not.toMatch(/NaN|Infinity/);

  it('an empty group: everything null, with a reason', () => {
    const e = effectSizes(fromValues([]), fromValues(freeze([1, 2, 3])), null, 0.95);
    expect(e).toMatchObject({ cohensD: null, hedgesG: null, rankBiserial: null, probabilityOfSuperiority: null });
    expect(e.hedgesGCi).toMatchObject({ lower: null, upper: null });
    expect(e.reason).toBeTruthy();
    noBadNumbers(e);
  });

  it('n_a + n_b = 2: no pooled SD; n_a + n_b = 3: d defined but J(1) = 0 so g is null', () => {
    const two = effectSizes(fromValues(freeze([1])), fromValues(freeze([2])), 0, 0.95);
    expect(two.cohensD).toBeNull();
    expect(two.rankBiserial).toBe(-1);
    const three = effectSizes(fromValues(freeze([4])), fromValues(freeze([1, 3])), 2, 0.95);
    // pooled SD from b alone: √2, d = (4 − 2)/√2
    expect(three.cohensD).toBeCloseTo(Math.SQRT2, 14);
    expect(three.hedgesG).toBeNull();
    expect(three.reason).toMatch(/J\(df\) is 0/);
    noBadNumbers(three);
  });

  it('both groups constant: d and g null (pooled SD 0); rank-based sizes still defined', () => {
    const e = effectSizes(fromValues(freeze([3, 3, 3])), fromValues(freeze([5, 5])), 0, 0.95);
    expect(e.cohensD).toBeNull();
    expect(e.hedgesG).toBeNull();
    expect(e.reason).toMatch(/pooled SD is 0/);
    expect(e.probabilityOfSuperiority).toBe(0);
    expect(e.rankBiserial).toBe(-1);
    noBadNumbers(e);
  });

  it('one group constant: d uses the other group’s spread', () => {
    const e = effectSizes(fromValues(freeze([5, 5, 5, 5])), fromValues(freeze([1, 3, 5, 7])), 10, 0.95);
    const sp = Math.sqrt((3 * 0 + 3 * (20 / 3)) / 6);
    expect(e.cohensD).toBeCloseTo((5 - 4) / sp, 14);
    expect(e.hedgesGCi.lower).not.toBeNull();
  });

  it('U not supplied or out of range', () => {
    const a = fromValues(SLEEP_1);
    const b = fromValues(SLEEP_2);
    const e = effectSizes(a, b, null, 0.95);
    expect(e.rankBiserial).toBeNull();
    expect(e.reason).toMatch(/not supplied/);
    expect(e.cohensD).not.toBeNull();
    expect(() => effectSizes(a, b, 101, 0.95)).toThrow(RangeError);
    expect(() => effectSizes(a, b, Number.NaN, 0.95)).toThrow(RangeError);
    expect(() => effectSizes(a, b, 10, 0)).toThrow(RangeError);
  });

  it('a million answers per group (counts): finite interval around g, computed from the counts alone', () => {
    const counts = Array.from({ length: 101 }, (_, k) => Math.round(1e6 * Math.exp(-((k - 50) ** 2) / 450) / Math.sqrt(450 * Math.PI)));
    const shifted = [0, 0, ...counts.slice(0, 99)];
    const a = fromCounts(freeze(shifted), 0);
    const b = fromCounts(freeze(counts), 0);
    const e = effectSizes(a, b, null, 0.95);
    expect(e.hedgesGCi.lower as number).toBeLessThan(e.hedgesG as number);
    expect(e.hedgesGCi.upper as number).toBeGreaterThan(e.hedgesG as number);
    // the interval half-width is about 1.96·√(2/n) for n ≈ 1e6 per group
    const halfWidth = ((e.hedgesGCi.upper as number) - (e.hedgesGCi.lower as number)) / 2;
    expect(Math.abs(halfWidth - 1.96 * Math.sqrt(2 / a.n)) / halfWidth).toBeLessThan(0.01);
  });
});

describe('properties (fast-check)', () => {
  const group = fc.array(fc.integer({ min: -40, max: 40 }).map((k) => k / 8), { minLength: 2, maxLength: 20 });

  it('swapping a and b negates d and g, mirrors the g interval and the rank-biserial; r = 2·PS − 1', () => {
    fc.assert(
      fc.property(group, group, fc.constantFrom(0.9, 0.95, 0.99), (x, y, level) => {
        const a = fromValues(freeze(x));
        const b = fromValues(freeze(y));
        let u = 0;
        for (const xi of x) for (const yj of y) u += xi > yj ? 1 : xi === yj ? 0.5 : 0;
        const ab = effectSizes(a, b, u, level);
        const ba = effectSizes(b, a, x.length * y.length - u, level);
        expect(ba.rankBiserial).toBeCloseTo(-(ab.rankBiserial as number), 14);
        expect(ab.rankBiserial).toBeCloseTo(2 * (ab.probabilityOfSuperiority as number) - 1, 14);
        if (ab.cohensD === null) {
          expect(ba.cohensD).toBeNull();
          return;
        }
        expect(ba.cohensD).toBe(-ab.cohensD);
        expect(ba.hedgesG).toBe(-(ab.hedgesG as number));
        const scale = 1 + Math.abs(ab.hedgesG as number);
        expect(Math.abs((ba.hedgesGCi.lower as number) + (ab.hedgesGCi.upper as number))).toBeLessThan(1e-10 * scale);
        expect(Math.abs((ba.hedgesGCi.upper as number) + (ab.hedgesGCi.lower as number))).toBeLessThan(1e-10 * scale);
        expect(ab.hedgesGCi.lower as number).toBeLessThanOrEqual(ab.hedgesG as number);
        expect(ab.hedgesGCi.upper as number).toBeGreaterThanOrEqual(ab.hedgesG as number);
      }),
      { numRuns: 60 },
    );
  });
});
