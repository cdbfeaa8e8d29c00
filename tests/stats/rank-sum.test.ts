import kruskalTest from '@stdlib/stats-kruskal-test';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { normalUpperTail } from '../../stats/distributions.js';
import {
  analyseRankSum,
  exactCdf,
  exactDistribution,
  exactSf,
  rankSum,
  rankSumFromAnalysis,
  type RankSumAnalysis,
} from '../../stats/rank-sum.js';
import { fromCounts, fromValues, type Sample } from '../../stats/sample.js';
import type { Alternative, ExactMode } from '../../stats/types.js';
import { exactAnalysis, expectRel, loadFixture, samples } from './fixtures.js';

// ---------------------------------------------------------------------------------------------------
// Fixture: tests/fixtures/r-reference.json, written by tests/reference/make-fixtures.R
// (R 4.2.2 wilcox.test; coin 1.4-2 wilcox_test(distribution = "exact")).
// ---------------------------------------------------------------------------------------------------

interface Case {
  alternative: Alternative;
  confidenceLevel: number;
  wilcoxExact: { W: number; p: number; estimate: number; ciLower: number | null; ciUpper: number | null; achievedLevel: number; exactCoverage: number } | null;
  wilcoxNormal: { W: number; p: number | null };
  wilcoxNormalUncorrected: { p: number | null };
  coinExact: { p: number | null; estimate: number | null; ciLower: number | null; ciUpper: number | null } | null;
}
interface Dataset {
  name: string;
  a: number[];
  b: number[];
  ties: boolean;
  cases: Case[];
}
const fixture = loadFixture<{
  tools: { R: string; coin: string };
  datasets: Dataset[];
}>('r-reference.json');

/**
 * Tolerances (relative) against R:
 *   U = R's W: exact (both are sums of halves, exact in doubles).
 *   normal-method p (R: pnorm; here the erfc-based normal tail of distributions.ts): 1e-9 — the same z,
 *     two accurate tail routines; observed worst about 1e-14. The issue allows 1e-6.
 *   exact p (R's pwilcox and coin's exact distribution, computed by those packages in their own ways; here
 *     the probabilities come from a product-form dynamic programme): 1e-10; observed worst about 1e-14.
 */
const P_NORMAL_TOL = 1e-9;
const P_EXACT_TOL = 1e-10;

describe('rankSum against R wilcox.test and coin::wilcox_test (tests/fixtures/r-reference.json)', () => {
  it('the fixture comes from R 4.2.2 and coin 1.4.2 and has ≥ 30 data sets, tied and tie-free', () => {
    expect(fixture.tools.R).toMatch(/^R version 4\.2\.2/);
    expect(fixture.tools.coin).toBe('1.4.2');
    expect(fixture.datasets.length).toBeGreaterThanOrEqual(30);
    expect(fixture.datasets.some((d) => d.ties)).toBe(true);
    expect(fixture.datasets.some((d) => !d.ties)).toBe(true);
  });

  for (const d of fixture.datasets) {
    it(`${d.name} (n_a = ${d.a.length}, n_b = ${d.b.length}${d.ties ? ', ties' : ''})`, () => {
      const { a, b } = samples(d);
      const label = `${d.name} (n_a = ${a.n}, n_b = ${b.n})`;
      const normal = analyseRankSum(a, b, 'never');
      const exact = exactAnalysis(a, b, d.ties);
      const allEqual = normal.variance === 0;
      for (const c of d.cases) {
        const what = `${label} ${c.alternative} ${c.confidenceLevel}`;
        // R 4.2.2 wilcox.test(a, b, exact = FALSE, correct = TRUE): W and p
        const rn = rankSumFromAnalysis(normal, c.alternative);
        expect(rn.u, `${what}: U vs R's W`).toBe(c.wilcoxNormal.W);
        expect(rn.method).toBe('normal');
        expect(rn.continuityCorrection).toBe(true);
        expect(rn.tieCorrection).toBe(d.ties);
        if (allEqual) {
          // R divides 0 by 0 here (z = ±Inf or NaN, p = 0, 1 or NaN); the project reports null with a reason.
          expect(rn.z).toBeNull();
          expect(rn.p).toBeNull();
          expect(rn.reason).toMatch(/no variance/);
        } else {
          expectRel(rn.p, c.wilcoxNormal.p as number, P_NORMAL_TOL, `${what}: normal p vs R wilcox.test(correct = TRUE)`);
          // R 4.2.2 wilcox.test(..., exact = FALSE, correct = FALSE): checks U and the tie-corrected variance
          const z0 = ((normal.u as number) - (a.n * b.n) / 2) / Math.sqrt(normal.variance as number);
          const p0 =
            c.alternative === 'less' ? normalUpperTail(-z0) : c.alternative === 'greater' ? normalUpperTail(z0) : Math.min(1, 2 * normalUpperTail(Math.abs(z0)));
          expectRel(p0, c.wilcoxNormalUncorrected.p as number, P_NORMAL_TOL, `${what}: uncorrected normal p vs R wilcox.test(correct = FALSE)`);
        }
        // R 4.2.2 wilcox.test(a, b, exact = TRUE): exact p where R computes exactly (no ties, both n < 50)
        if (c.wilcoxExact !== null) {
          expect(exact, `${what}: exact analysis must be within limits`).not.toBeNull();
          const re = rankSumFromAnalysis(exact as RankSumAnalysis, c.alternative);
          expect(re.method).toBe('exact');
          expect(re.u).toBe(c.wilcoxExact.W);
          expectRel(re.p, c.wilcoxExact.p, P_EXACT_TOL, `${what}: exact p vs R wilcox.test(exact = TRUE)`);
          // the "auto" rule picks exactly where R does
          expect(rankSum(a, b, { alternative: c.alternative, exact: 'auto' }).method).toBe('exact');
        }
        // coin 1.4-2 wilcox_test(distribution = "exact"): the exact conditional distribution given ties
        if (c.coinExact !== null && c.coinExact.p !== null && exact !== null && !allEqual) {
          const re = rankSumFromAnalysis(exact, c.alternative);
          expectRel(re.p, c.coinExact.p, P_EXACT_TOL, `${what}: exact p vs coin::wilcox_test(distribution = "exact")`);
          expect(re.tieCorrection).toBe(d.ties);
        }
      }
      if (!d.ties && (a.n >= 50 || b.n >= 50)) {
        // R's rule: no exact computation when a group has 50 or more observations
        expect(rankSum(a, b, { alternative: 'two-sided', exact: 'auto' }).method).toBe('normal');
      }
    });
  }
});

// ---------------------------------------------------------------------------------------------------
// Published values
// ---------------------------------------------------------------------------------------------------

describe('published tables and worked examples', () => {
  it('two-sided 5 % critical value of U for n_a = n_b = 10 is 23 (Siegel & Castellan 1988, Table J; Mann & Whitney 1947)', () => {
    const dist = exactDistribution(10, 10, new Array(20).fill(1));
    // critical value 23: P(U ≤ 23) ≤ 0.025 < P(U ≤ 24)
    expect(exactCdf(dist, 23)).toBeLessThanOrEqual(0.025);
    expect(exactCdf(dist, 24)).toBeGreaterThan(0.025);
    // R 4.2.2: pwilcox(23, 10, 10) = 0.021628526272489117, pwilcox(24, 10, 10) = 0.026212951135551749 (digits = 17);
    // tolerance 1e-12 relative (both are sums of exact counts divided by choose(20, 10))
    expectRel(exactCdf(dist, 23), 0.021628526272489117, 1e-12, 'pwilcox(23, 10, 10)');
    expectRel(exactCdf(dist, 24), 0.026212951135551749, 1e-12, 'pwilcox(24, 10, 10)');
  });

  it('Hollander & Wolfe (1973) two-sample example from R\'s ?wilcox.test: W = 35, p-value = 0.1272 ("greater")', () => {
    // R 4.2.2: wilcox.test(x, y, alternative = "g") prints "W = 35, p-value = 0.1272";
    // print(p.value, digits = 17) gives 0.1272061272061272.
    const x = Object.freeze([0.8, 0.83, 1.89, 1.04, 1.45, 1.38, 1.91, 1.64, 0.73, 1.46]);
    const y = Object.freeze([1.15, 0.88, 0.9, 0.74, 1.21]);
    const r = rankSum(fromValues(x), fromValues(y), { alternative: 'greater', exact: 'auto' });
    expect(r.u).toBe(35);
    expect(r.method).toBe('exact');
    expect((r.p as number).toFixed(4)).toBe('0.1272');
    expectRel(r.p, 0.1272061272061272, 1e-12, 'H&W greater p');
    // R 4.2.2: two-sided p-value = 0.2544122544122544
    const two = rankSum(fromValues(x), fromValues(y), { alternative: 'two-sided', exact: 'auto' });
    expectRel(two.p, 0.2544122544122544, 1e-12, 'H&W two-sided p');
  });
});

// ---------------------------------------------------------------------------------------------------
// Cross-check at test time: @stdlib/stats-kruskal-test 0.2.3 with two groups
// ---------------------------------------------------------------------------------------------------

describe('Kruskal–Wallis H of @stdlib/stats-kruskal-test equals the square of the uncorrected rank-sum z', () => {
  // stdlib computes H = 12/(N(N+1)) Σ R_g²/n_g − 3(N+1), divided by 1 − Σ(t³ − t)/(N³ − N) (its own tie
  // correction, the same as ours). Its short-cut formula subtracts two numbers of size about 3(N + 1), so
  // the tolerance is absolute: 1e-12·3(N + 1), plus 1e-10 relative.
  function check(x: readonly number[], y: readonly number[], label: string): void {
    const an = analyseRankSum(fromValues(x), fromValues(y), 'never');
    const z0 = ((an.u as number) - (x.length * y.length) / 2) / Math.sqrt(an.variance as number);
    const h = kruskalTest([...x], [...y]).statistic;
    const N = x.length + y.length;
    const tol = 1e-12 * 3 * (N + 1) + 1e-10 * Math.abs(h);
    expect(Math.abs(h - z0 * z0), `${label}: stdlib H = ${h}, z² = ${z0 * z0}, tolerance ${tol}`).toBeLessThanOrEqual(tol);
  }

  for (const d of fixture.datasets.filter((ds) => ds.a.length + ds.b.length <= 2000)) {
    it(`${d.name}`, () => {
      const { a, b } = samples(d);
      if (analyseRankSum(a, b, 'never').variance === 0) return; // all values equal: H is 0/0 in stdlib
      check(Object.freeze([...d.a]), Object.freeze([...d.b]), d.name);
    });
  }
});

// ---------------------------------------------------------------------------------------------------
// Brute force: the exact distribution against enumeration of all C(N, n_a) splits (N ≤ 14)
// ---------------------------------------------------------------------------------------------------

/** U of the first group by direct pair counting. */
function bruteU(a: readonly number[], b: readonly number[]): number {
  let u = 0;
  for (const x of a) for (const y of b) u += x > y ? 1 : x === y ? 0.5 : 0;
  return u;
}

/** Distribution of U over all splits of `pooled` into a group of size m and the rest (as counts). */
function enumerateSplits(pooled: readonly number[], m: number): Map<number, number> {
  const N = pooled.length;
  const out = new Map<number, number>();
  const chosen: number[] = [];
  const recurse = (start: number): void => {
    if (chosen.length === m) {
      const inA = new Set(chosen);
      const a = chosen.map((i) => pooled[i]);
      const b = pooled.filter((_, i) => !inA.has(i));
      const u = bruteU(a, b);
      out.set(u, (out.get(u) ?? 0) + 1);
      return;
    }
    for (let i = start; i <= N - (m - chosen.length); i++) {
      chosen.push(i);
      recurse(i + 1);
      chosen.pop();
    }
  };
  recurse(0);
  return out;
}

function choose(n: number, k: number): number {
  let r = 1;
  for (let i = 1; i <= k; i++) r = (r * (n - k + i)) / i;
  return Math.round(r);
}

function tieSizes(pooled: readonly number[]): number[] {
  const sorted = [...pooled].sort((x, y) => x - y);
  const sizes: number[] = [];
  for (let i = 0; i < sorted.length; ) {
    let j = i;
    while (j < sorted.length && sorted[j] === sorted[i]) j++;
    sizes.push(j - i);
    i = j;
  }
  return sizes;
}

describe('exact distribution against enumeration of every split (N ≤ 14)', () => {
  const cases: { pooled: number[]; m: number; label: string }[] = [
    { pooled: [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14], m: 7, label: 'no ties, 7 + 7' },
    { pooled: [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13], m: 4, label: 'no ties, 4 + 9' },
    { pooled: [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11], m: 8, label: 'no ties, 8 + 3 (larger group first)' },
    { pooled: [1, 1, 2, 2, 2, 3, 4, 4, 5, 5, 5, 5, 6, 7], m: 6, label: 'ties of sizes 2, 3, 4, 1 (even groups: half units)' },
    { pooled: [1, 1, 1, 2, 3, 3, 3, 4, 4, 4, 4, 4, 5], m: 5, label: 'odd tie groups only (whole units)' },
    { pooled: [3, 3, 3, 3, 3, 3, 7, 7, 7, 7, 7, 7], m: 5, label: 'two tie groups (a 1–2 item)' },
    { pooled: [1, 2, 2, 3, 3, 3, 4, 4, 4, 4], m: 1, label: 'n_a = 1 with ties' },
    { pooled: [5, 5, 5, 5, 5, 5, 5, 5, 5, 9], m: 9, label: 'nine tied and one other, 9 + 1' },
  ];
  for (const { pooled, m, label } of cases) {
    it(label, () => {
      const frozen = Object.freeze([...pooled]);
      const counts = enumerateSplits(frozen, m);
      const total = choose(frozen.length, m);
      const dist = exactDistribution(m, frozen.length - m, tieSizes(frozen));
      let sum = 0;
      for (let i = 0; i < dist.probabilities.length; i++) {
        const u = i / dist.unitsPerU;
        const expected = (counts.get(u) ?? 0) / total;
        const got = dist.probabilities[i];
        sum += got;
        // counts/choose(N, m) against products of ratios: relative 1e-12
        if (expected === 0) expect(got, `${label}: P(U = ${u}) should be 0`).toBe(0);
        else expectRel(got, expected, 1e-12, `${label}: P(U = ${u})`);
      }
      for (const u of counts.keys()) expect(Number.isInteger(u * dist.unitsPerU), `${label}: U = ${u} on the grid`).toBe(true);
      expect(Math.abs(sum - 1)).toBeLessThanOrEqual(1e-13);
      expect(dist.tieFree).toBe(tieSizes(frozen).every((t) => t === 1));
    });
  }

  it('exact p-values equal the enumerated tail probabilities for every split of a tied pooled sample', () => {
    const pooled = Object.freeze([1, 1, 2, 2, 2, 3, 4, 4, 5, 5, 6]);
    const m = 5;
    const counts = enumerateSplits(pooled, m);
    const total = choose(pooled.length, m);
    const E = (m * (pooled.length - m)) / 2;
    const prob = (pred: (u: number) => boolean): number => {
      let s = 0;
      for (const [u, c] of counts) if (pred(u)) s += c;
      return s / total;
    };
    // a few splits: a takes the first m of a permutation
    const splits = [
      [0, 1, 2, 3, 4],
      [6, 7, 8, 9, 10],
      [0, 3, 5, 7, 9],
      [1, 2, 5, 8, 10],
    ];
    for (const idx of splits) {
      const a = idx.map((i) => pooled[i]);
      const b = pooled.filter((_, i) => !idx.includes(i));
      const u = bruteU(a, b);
      const sa = fromValues(Object.freeze(a));
      const sb = fromValues(Object.freeze(b));
      const less = rankSum(sa, sb, { alternative: 'less', exact: 'always' });
      const greater = rankSum(sa, sb, { alternative: 'greater', exact: 'always' });
      const two = rankSum(sa, sb, { alternative: 'two-sided', exact: 'always' });
      expect(less.u).toBe(u);
      expectRel(less.p, prob((v) => v <= u), 1e-12, `less at U = ${u}`);
      expectRel(greater.p, prob((v) => v >= u), 1e-12, `greater at U = ${u}`);
      // coin's two-sided convention: P(|U − E| ≥ |u − E|)
      expectRel(two.p, u === E ? 1 : prob((v) => Math.abs(v - E) >= Math.abs(u - E)), 1e-12, `two-sided at U = ${u}`);
    }
  });

  it('sums to 1 at larger sizes, with and without ties', () => {
    const shapes: [number, number, number[]][] = [
      [49, 49, new Array(98).fill(1)],
      [30, 45, [5, 10, 20, 15, 10, 10, 5]],
      [12, 200, new Array(53).fill(4)],
    ];
    for (const [na, nb, sizes] of shapes) {
      const d = exactDistribution(na, nb, sizes);
      let s = 0;
      for (const p of d.probabilities) s += p;
      expect(Math.abs(s - 1), `${na} + ${nb}`).toBeLessThanOrEqual(1e-12);
      // symmetric without ties: P(U ≤ u) = P(U ≥ n_a n_b − u)
      if (d.tieFree) expectRel(exactCdf(d, 1000), exactSf(d, na * nb - 1000), 1e-12, 'symmetry');
    }
  });
});

// ---------------------------------------------------------------------------------------------------
// Properties (fast-check)
// ---------------------------------------------------------------------------------------------------

const smallInts = fc.array(fc.integer({ min: 0, max: 6 }), { minLength: 1, maxLength: 25 });
const reals = fc.array(fc.double({ min: -1e3, max: 1e3, noNaN: true, noDefaultInfinity: true }), { minLength: 1, maxLength: 60 });
const modes = fc.constantFrom<ExactMode>('auto', 'always', 'never');

describe('properties', () => {
  it('U_a + U_b = n_a·n_b; swapping a and b keeps the two-sided p, exchanges "less" and "greater" and negates z', () => {
    fc.assert(
      fc.property(fc.oneof(smallInts, reals), fc.oneof(smallInts, reals), modes, (x, y, mode) => {
        const a = fromValues(Object.freeze([...x]));
        const b = fromValues(Object.freeze([...y]));
        const ab = rankSum(a, b, { alternative: 'two-sided', exact: mode });
        const ba = rankSum(b, a, { alternative: 'two-sided', exact: mode });
        expect((ab.u as number) + (ba.u as number)).toBe(a.n * b.n);
        if (ab.p === null) {
          expect(ba.p).toBeNull();
          return;
        }
        expect(Math.abs((ab.p as number) - (ba.p as number))).toBeLessThanOrEqual(1e-12);
        expect(Math.abs((ab.z as number) + (ba.z as number))).toBeLessThanOrEqual(1e-12 * (1 + Math.abs(ab.z as number)));
        const less = rankSum(a, b, { alternative: 'less', exact: mode }).p as number;
        const greaterSwapped = rankSum(b, a, { alternative: 'greater', exact: mode }).p as number;
        expect(Math.abs(less - greaterSwapped)).toBeLessThanOrEqual(1e-12);
      }),
      { numRuns: 150 },
    );
  });

  it('every p is in [0, 1], every result is frozen and JSON-safe', () => {
    fc.assert(
      fc.property(fc.oneof(smallInts, reals), fc.oneof(smallInts, reals), modes, fc.constantFrom<Alternative>('two-sided', 'less', 'greater'), (x, y, mode, alt) => {
        const r = rankSum(fromValues(Object.freeze([...x])), fromValues(Object.freeze([...y])), { alternative: alt, exact: mode });
        expect(Object.isFrozen(r)).toBe(true);
        if (r.p !== null) {
          expect(r.p).toBeGreaterThanOrEqual(0);
          expect(r.p).toBeLessThanOrEqual(1);
        }
        expect(JSON.parse(JSON.stringify(r))).toEqual(r);
      }),
      { numRuns: 150 },
    );
  });

  it('the counts path equals the raw-data path (integer items)', () => {
    fc.assert(
      fc.property(fc.array(fc.nat({ max: 9 }), { minLength: 5, maxLength: 5 }), fc.array(fc.nat({ max: 9 }), { minLength: 5, maxLength: 5 }), modes, (ca, cb, mode) => {
        if (ca.every((c) => c === 0) || cb.every((c) => c === 0)) return;
        const raw = (counts: number[]): number[] => counts.flatMap((c, k) => new Array<number>(c).fill(k + 1));
        for (const alt of ['two-sided', 'less', 'greater'] as const) {
          const viaCounts = rankSum(fromCounts(Object.freeze([...ca]), 1), fromCounts(Object.freeze([...cb]), 1), { alternative: alt, exact: mode });
          const viaRaw = rankSum(fromValues(Object.freeze(raw(ca))), fromValues(Object.freeze(raw(cb))), { alternative: alt, exact: mode });
          expect(viaCounts).toEqual(viaRaw);
        }
      }),
      { numRuns: 60 },
    );
  });
});

// ---------------------------------------------------------------------------------------------------
// Edge cases and the method rule
// ---------------------------------------------------------------------------------------------------

describe('edge cases', () => {
  const S = (x: number[]): Sample => fromValues(Object.freeze(x));

  it('an empty group: u, z, p null with a reason, for every exact mode, without throwing', () => {
    for (const mode of ['auto', 'always', 'never'] as const) {
      for (const [a, b] of [
        [S([]), S([1, 2])],
        [S([1]), S([])],
        [S([]), S([])],
      ]) {
        const r = rankSum(a, b, { alternative: 'two-sided', exact: mode });
        expect(r.u).toBeNull();
        expect(r.z).toBeNull();
        expect(r.p).toBeNull();
        expect(r.reason).toMatch(/no observations/);
      }
    }
  });

  it('all values equal across both groups: U = n_a n_b / 2, z and p null with a reason', () => {
    for (const mode of ['auto', 'always', 'never'] as const) {
      const r = rankSum(S([4, 4, 4]), S([4, 4]), { alternative: 'less', exact: mode });
      expect(r.u).toBe(3);
      expect(r.z).toBeNull();
      expect(r.p).toBeNull();
      expect(r.reason).toMatch(/equal/);
    }
  });

  it('n = 1 in each group works (exact: P(U = 0) = P(U = 1) = ½, two-sided p = 1)', () => {
    const r = rankSum(S([2]), S([1]), { alternative: 'greater', exact: 'auto' });
    expect(r.u).toBe(1);
    expect(r.method).toBe('exact');
    expect(r.p).toBe(0.5);
    expect(rankSum(S([2]), S([1]), { alternative: 'two-sided', exact: 'auto' }).p).toBe(1);
    const tie = rankSum(S([1]), S([1, 2]), { alternative: 'two-sided', exact: 'never' });
    expect(tie.u).toBe(0.5);
    expect(tie.p).not.toBeNull();
  });

  it('one constant group and both groups constant but different still give p', () => {
    const r = rankSum(S([3, 3, 3, 3]), S([1, 2, 4, 5, 6]), { alternative: 'two-sided', exact: 'always' });
    expect(r.p).not.toBeNull();
    const sep = rankSum(S([5, 5, 5]), S([1, 1]), { alternative: 'greater', exact: 'always' });
    expect(sep.u).toBe(6);
    // every split with both groups constant: only the split observed puts all of a above b: 1/C(5, 3)
    expectRel(sep.p, 1 / 10, 1e-12, 'both constant, greater');
  });

  it('the auto rule: exact without ties below 50 per group (R), exact conditional with cheap ties, else normal', () => {
    const seq = (n: number, offset: number): number[] => Array.from({ length: n }, (_, i) => i * 2 + offset);
    expect(rankSum(S(seq(49, 0)), S(seq(49, 1)), { alternative: 'two-sided', exact: 'auto' }).method).toBe('exact');
    expect(rankSum(S(seq(50, 0)), S(seq(3, 1)), { alternative: 'two-sided', exact: 'auto' }).method).toBe('normal');
    const likert = (n: number): number[] => Array.from({ length: n }, (_, i) => (i % 7) + 1);
    const small = rankSum(S(likert(40)), S(likert(35)), { alternative: 'two-sided', exact: 'auto' });
    expect(small.method).toBe('exact');
    expect(small.tieCorrection).toBe(true);
    expect(small.continuityCorrection).toBe(false);
    const large = rankSum(S(likert(400)), S(likert(350)), { alternative: 'two-sided', exact: 'auto' });
    expect(large.method).toBe('normal');
    expect(large.continuityCorrection).toBe(true);
  });

  it('exact: "always" beyond the documented limit throws a RangeError; "never" never computes it', () => {
    const big = S(Array.from({ length: 2000 }, (_, i) => i));
    const big2 = S(Array.from({ length: 2000 }, (_, i) => i + 0.5));
    expect(() => rankSum(big, big2, { alternative: 'two-sided', exact: 'always' })).toThrow(RangeError);
    expect(rankSum(big, big2, { alternative: 'two-sided', exact: 'never' }).method).toBe('normal');
  });

  it('bad options throw a RangeError', () => {
    expect(() => rankSum(S([1]), S([2]), { alternative: 'sideways' as Alternative, exact: 'auto' })).toThrow(RangeError);
    expect(() => rankSum(S([1]), S([2]), { alternative: 'less', exact: 'sometimes' as ExactMode })).toThrow(RangeError);
  });

  it('tiny p-values keep their precision (normal tail via erfc): 500 vs 500 completely separated', () => {
    const a = S(Array.from({ length: 500 }, (_, i) => 1000 + i));
    const b = S(Array.from({ length: 500 }, (_, i) => i));
    const r = rankSum(a, b, { alternative: 'greater', exact: 'never' });
    // R 4.2.2: wilcox.test(1000:1499, 0:499, alternative = "greater", exact = FALSE)$p.value
    // = 2.9281214567498033e-165 (print digits = 17); tolerance 1e-9 relative
    expect(r.u).toBe(250000);
    expectRel(r.p, 2.9281214567498033e-165, 1e-9, 'separated, greater');
  });
});
