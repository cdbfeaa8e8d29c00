import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { brunnerMunzel, trimmedCount, yuenWelch } from '../../stats/robust.js';
import { expand, fromCounts, fromValues, type Sample } from '../../stats/sample.js';
import type { Alternative, BrunnerMunzelResult, YuenWelchResult } from '../../stats/types.js';
import { loadFixture } from './fixtures.js';

// ── fixtures ─────────────────────────────────────────────────────────────────────────────────────────
interface ScipyCase {
  alternative: Alternative;
  brunnerMunzel: { statistic: number | null; df: number | null; p: number | null; pDirectTail: number | null; reason?: string };
  yuenWelch: { t: number | null; df: number | null; p: number | null; difference: number | null; reason?: string };
  yuenWelchShifted?: { shift: number; t: number | null; df: number | null; p: number | null; difference: number | null };
}
interface ScipyDataset {
  name: string;
  source: 'r-reference.json' | 'script';
  a?: number[];
  b?: number[];
  n: { a: number; b: number };
  sum: { a: number; b: number };
  cases: ScipyCase[];
}
const scipy = loadFixture<{
  tools: { scipy: string; numpy: string; python: string };
  datasetsFrom: string;
  datasets: ScipyDataset[];
}>('scipy-reference.json');
const rReference = loadFixture<{
  datasets: { name: string; a: number[]; b: number[] }[];
}>('r-reference.json');

function dataOf(ds: ScipyDataset): { a: readonly number[]; b: readonly number[] } {
  if (ds.source === 'script') return { a: Object.freeze([...ds.a!]), b: Object.freeze([...ds.b!]) };
  const r = rReference.datasets.find((d) => d.name === ds.name);
  if (r === undefined) throw new Error(`scipy-reference.json names ${ds.name}, which r-reference.json no longer has: rerun make-scipy-fixtures.py`);
  return { a: Object.freeze([...r.a]), b: Object.freeze([...r.b]) };
}

function fsum(x: readonly number[]): number {
  // Neumaier-compensated sum, close enough to math.fsum to detect a changed data set.
  let s = 0;
  let c = 0;
  for (const v of x) {
    const t = s + v;
    c += Math.abs(s) >= Math.abs(v) ? s - t + v : v - t + s;
    s = t;
  }
  return s + c;
}

// ── comparison helpers (failure messages print expected, actual and tolerance) ─────────────────────
function expectRel(actual: number | null, expected: number, tol: number, what: string, absFloor = 0): void {
  expect(actual, `${what}: expected ${expected}, got null`).not.toBeNull();
  const diff = Math.abs(actual! - expected);
  const bound = tol * Math.abs(expected) + absFloor;
  expect(diff, `${what}: expected ${expected}, got ${actual}, |diff| ${diff} > ${bound} (relative ${tol}, floor ${absFloor})`).toBeLessThanOrEqual(bound);
}

function expectNullWithReason(r: { reason?: string }, fields: (number | null)[], what: string): void {
  for (const f of fields) expect(f, what).toBeNull();
  expect(typeof r.reason, `${what}: reason`).toBe('string');
  expect(r.reason!.length).toBeGreaterThan(10);
}

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];

// ── against scipy ────────────────────────────────────────────────────────────────────────────────────
describe('fixtures', () => {
  it('scipy-reference.json is from scipy 1.10.1 and was made from r-reference.json', () => {
    expect(scipy.tools.scipy).toBe('1.10.1');
    expect(scipy.datasetsFrom).toMatch(/r-reference\.json/);
    const fromR = new Set(scipy.datasets.filter((d) => d.source === 'r-reference.json').map((d) => d.name));
    for (const d of rReference.datasets) expect(fromR.has(d.name), `${d.name} missing from scipy-reference.json`).toBe(true);
  });
});

describe.each(scipy.datasets)('against scipy 1.10.1: $name', (ds) => {
  const { a, b } = dataOf(ds);
  const sa = fromValues(a, 'a');
  const sb = fromValues(b, 'b');
  const pooledRange = a.length + b.length === 0 ? 0 : Math.max(...a, ...b) - Math.min(...a, ...b);

  it('uses the same data as when the fixture was generated', () => {
    expect([a.length, b.length]).toEqual([ds.n.a, ds.n.b]);
    expectRel(fsum(a), ds.sum.a, 1e-12, 'sum a', 1e-300);
    expectRel(fsum(b), ds.sum.b, 1e-12, 'sum b', 1e-300);
  });

  it.each(ds.cases.map((c) => [c.alternative, c] as const))('brunnerMunzel, %s', (alternative, c) => {
    const r = brunnerMunzel(sa, sb, { alternative });
    const ref = c.brunnerMunzel;
    const what = `${ds.name} ${alternative}`;
    expect(Object.isFrozen(r)).toBe(true);
    if (ref.statistic === null || ref.df === null) {
      // scipy.stats.brunnermunzel gives nan/inf here (statistic ±inf or nan, df 0/0).
      expectNullWithReason(r, [r.df, r.p], `${what}: ${ref.reason}`);
      return;
    }
    // source: scipy.stats.brunnermunzel(a, b, alternative, distribution="t").statistic; relative ≤ 1e-9
    // (floor 1e-12 absolute: scipy forms the statistic from a difference of mean ranks of size ~n, so a
    // statistic near 0 carries ~n·eps absolute rounding; observed worst 2.5e-14 relative)
    // our statistic is positive when a is larger: −1 × scipy's (stats/robust.ts header)
    expectRel(r.statistic === null ? null : -r.statistic, ref.statistic, 1e-9, `${what} statistic`, 1e-12);
    // source: df from Brunner & Munzel (2000) in make-scipy-fixtures.py, which checks scipy's p is the t tail
    // at that df (scipy does not return df); relative ≤ 1e-9
    expectRel(r.df, ref.df, 1e-9, `${what} df`);
    // source: scipy.stats.t.cdf / t.sf at scipy's statistic and df (pDirectTail); relative ≤ 1e-6 for
    // p ≥ 1e-300 (observed worst 4e-13); below 1e-300 only "tiny" is asserted.
    if (ref.pDirectTail! >= 1e-300) expectRel(r.p, ref.pDirectTail!, 1e-6, `${what} p (direct tail)`);
    else expect(r.p!).toBeLessThan(1e-290);
    // source: scipy.stats.brunnermunzel(...).pvalue; relative ≤ 1e-6, plus 1e-15 absolute because scipy's
    // p keeps only absolute precision for "less" and some "two-sided" cases (it returns 0 where the tail is 1e-253).
    expectRel(r.p, ref.p!, 1e-6, `${what} p (scipy)`, 1e-15);
  });

  it.each(ds.cases.map((c) => [c.alternative, c] as const))('yuenWelch trim 0.2, %s', (alternative, c) => {
    const r = yuenWelch(sa, sb, { alternative, trim: 0.2 });
    const what = `${ds.name} ${alternative}`;
    expect(r.trim).toBe(0.2);
    expect(Object.isFrozen(r)).toBe(true);
    const ref = c.yuenWelchShifted ?? c.yuenWelch;
    if (ref.difference === null) expect(r.difference).toBeNull();
    // source: scipy.stats.trim_mean(a, 0.2) − trim_mean(b, 0.2); relative ≤ 1e-9, with an absolute floor
    // of 1e-14 × the pooled range for differences that are (nearly) 0 (observed worst 8e-14 relative)
    else expectRel(r.difference, ref.difference, 1e-9, `${what} difference`, 1e-14 * pooledRange);
    if (ref.t === null) {
      expectNullWithReason(r, [r.t, r.df, r.p], `${what}: ${c.yuenWelch.reason}`);
      return;
    }
    // source: scipy.stats.ttest_ind(a, b, equal_var=False, trim=0.2, alternative).statistic; relative ≤ 1e-9
    expectRel(r.t, ref.t, 1e-9, `${what} t`);
    // source: df from Yuen (1974) in make-scipy-fixtures.py, checked there against scipy's p; relative ≤ 1e-9
    expectRel(r.df, ref.df!, 1e-9, `${what} df`);
    // source: scipy.stats.ttest_ind(...).pvalue (special.stdtr, a direct tail); relative ≤ 1e-6
    expectRel(r.p, ref.p!, 1e-6, `${what} p`);
    if (c.yuenWelchShifted) {
      // The data sit near 1e12 (or 1e6): the primary check above is against scipy on a − c and b − c
      // (exact shifts; t, df, p and the difference are shift-invariant). scipy on the raw values sums
      // numbers near 1e12, where one ulp of the sum is ~2e-3, so its own values are only good to about
      // 1e-3 relative: checked loosely, as a sanity bound (source: scipy.stats.ttest_ind on the raw data).
      const raw = c.yuenWelch;
      expectRel(r.t, raw.t!, 5e-3, `${what} t vs scipy on raw data`);
      expectRel(r.difference, raw.difference!, 5e-3, `${what} difference vs scipy on raw data`);
      expectRel(r.df, raw.df!, 1e-6, `${what} df vs scipy on raw data`);
    }
  });
});

// ── edge cases ───────────────────────────────────────────────────────────────────────────────────────
const S = (x: number[]): Sample => fromValues(Object.freeze(x));

describe('brunnerMunzel edge cases (null with a reason, never throws)', () => {
  it('n < 2 in a group (scipy: nan, its variance divides by n − 1)', () => {
    for (const [a, b] of [[[], [1, 2, 3]], [[1], [1, 2, 3]], [[1, 2, 3], [5]], [[], []]] as number[][][]) {
      const r = brunnerMunzel(S(a), S(b), { alternative: 'two-sided' });
      expectNullWithReason(r, [r.statistic, r.df, r.p], `${a} vs ${b}`);
      expect(r.reason).toMatch(/at least 2/);
    }
  });

  it('both groups constant, different values: variance 0 (scipy: statistic ±inf, df nan)', () => {
    const r = brunnerMunzel(S([2, 2, 2]), S([5, 5, 5, 5]), { alternative: 'less' });
    expectNullWithReason(r, [r.statistic, r.df, r.p], 'both constant');
    expect(r.reason).toMatch(/variance estimate is 0/);
  });

  it('all values equal across groups: 0/0 (scipy: nan)', () => {
    const r = brunnerMunzel(S([4, 4, 4]), S([4, 4]), { alternative: 'two-sided' });
    expectNullWithReason(r, [r.statistic, r.df, r.p], 'all equal');
    expect(r.reason).toMatch(/0\/0/);
  });

  it('complete separation without ties: variance 0 (scipy: inf; see also script-n2-groups)', () => {
    const r = brunnerMunzel(S([1, 2, 3]), S([4, 5, 6]), { alternative: 'greater' });
    expectNullWithReason(r, [r.statistic, r.df, r.p], 'separated');
  });

  it('one group constant inside the other: defined, df = n_other − 1 (scipy 1.10.1 on script-a-constant gives df 6)', () => {
    const r = brunnerMunzel(S([3, 3, 3, 3, 3, 3]), S([1, 2, 3, 4, 5, 6, 7]), { alternative: 'two-sided' });
    // source: scipy.stats.brunnermunzel([3]*6, [1..7]) → statistic 0.7947194142390261 (scipy-reference.json); df by formula: 7 − 1
    expectRel(r.statistic, -0.7947194142390261, 1e-12, 'statistic (−1 × scipy: our sign is positive when a is larger)');
    expect(r.df).toBe(6);
  });

  it('rejects an unknown alternative', () => {
    expect(() => brunnerMunzel(S([1, 2]), S([3, 4]), { alternative: 'both' as Alternative })).toThrow(RangeError);
  });
});

describe('yuenWelch edge cases', () => {
  it('n = 2 in each group: h = 2 after trimming, still defined (scipy-reference script-n2-groups)', () => {
    const r = yuenWelch(S([1.0, 2.5]), S([3.0, 3.75]), { alternative: 'two-sided' });
    // source: scipy.stats.ttest_ind([1, 2.5], [3, 3.75], equal_var=False, trim=0.2): t = -1.9379255804998177, p = 0.23585108842343758
    expectRel(r.t, -1.9379255804998177, 1e-12, 't');
    expectRel(r.p, 0.23585108842343758, 1e-9, 'p');
    expectRel(r.difference, -1.625, 0, 'difference');
  });

  it('one observation left after trimming: t undefined, difference still reported', () => {
    const r = yuenWelch(S([1, 2, 3, 4, 5]), S([2, 4, 6, 8, 10]), { alternative: 'two-sided', trim: 0.4 });
    expectNullWithReason(r, [r.t, r.df, r.p], 'h = 1');
    expect(r.difference).toBe(3 - 6); // the medians: trimming 2 of 5 from each end keeps one value
    expect(r.reason).toMatch(/at least 2/);
  });

  it('n = 1 and n = 0', () => {
    const one = yuenWelch(S([1]), S([1, 2, 3]), { alternative: 'less' });
    expectNullWithReason(one, [one.t, one.df, one.p], 'n = 1');
    expect(one.difference).toBe(-1);
    const none = yuenWelch(S([]), S([1, 2, 3]), { alternative: 'less' });
    expectNullWithReason(none, [none.t, none.df, none.p, none.difference], 'n = 0');
  });

  it('both winsorized variances 0: null with reason; difference kept (scipy: ±inf)', () => {
    // b = [5, 5, 5, 5, 5, 5, -40, 80, 5, 5] winsorizes to all 5s; a constant too.
    const r = yuenWelch(S([7, 7, 7, 7, 7]), S([5, 5, 5, 5, 5, 5, -40, 80, 5, 5]), { alternative: 'greater' });
    expectNullWithReason(r, [r.t, r.df, r.p], 'both winsorized constant');
    expect(r.difference).toBe(2);
  });

  it('one group constant: df = h_other − 1 (scipy-reference script-a-constant: df 4)', () => {
    const r = yuenWelch(S([3, 3, 3, 3, 3, 3]), S([1, 2, 3, 4, 5, 6, 7]), { alternative: 'two-sided' });
    // source: scipy.stats.ttest_ind([3]*6, [1..7], equal_var=False, trim=0.2): t = -1.0540925533894598, df 4 (h_b = 7 − 2·1 = 5)
    expectRel(r.t, -1.0540925533894598, 1e-12, 't');
    expectRel(r.df, 4, 1e-15, 'df');
  });

  it('trim 0 is Welch\'s t test (R 4.2.2 t.test(x, y) on the sleep data: t = -1.860813, df = 17.77647)', () => {
    const g1 = [0.7, -1.6, -0.2, -1.2, -0.1, 3.4, 3.7, 0.8, 0.0, 2.0];
    const g2 = [1.9, 0.8, 1.1, 0.1, -0.1, 4.4, 5.5, 1.6, 4.6, 3.4];
    const r = yuenWelch(S(g1), S(g2), { alternative: 'two-sided', trim: 0 });
    // source: R t.test(extra ~ group, data = sleep) as printed (7 significant digits): relative ≤ 1e-6
    expectRel(r.t, -1.860813, 1e-6, 't');
    expectRel(r.df, 17.77647, 1e-6, 'df');
    expectRel(r.p, 0.07939414, 1e-6, 'p');
  });

  it('trimming count g = ⌊γ·n⌋ read as the decimal γ stands for (the project\'s rule, stats/robust.ts header)', () => {
    // 0.29 × 100 = 28.999999999999996 in double precision; the decimal product is 29 (hand arithmetic).
    expect(0.29 * 100).toBeLessThan(29);
    expect(trimmedCount(100, 0.29)).toBe(29);
    // Exact products and ordinary cases (hand arithmetic): ⌊0.2·10⌋ = 2, ⌊0.2·15⌋ = 3, ⌊0.2·14⌋ = 2, ⌊0.1·30⌋ = 3,
    // ⌊0.4·5⌋ = 2, ⌊0.2·4⌋ = 0, and 0 for γ = 0 or n ≤ 1.
    const cases: [number, number, number][] = [[10, 0.2, 2], [15, 0.2, 3], [14, 0.2, 2], [30, 0.1, 3], [5, 0.4, 2], [4, 0.2, 0], [7, 0, 0], [1, 0.4, 0], [0, 0.2, 0]];
    for (const [n, trim, g] of cases) expect(trimmedCount(n, trim), `trimmedCount(${n}, ${trim})`).toBe(g);
    // Every γ = k/100 and n ≤ 200: g is the whole part of the exact rational k·n/100 (checked in integers).
    for (let k = 0; k < 50; k++) {
      for (let n = 0; n <= 200; n++) expect(trimmedCount(n, k / 100), `trimmedCount(${n}, ${k}/100)`).toBe(Math.floor((k * n) / 100));
    }
    // At least one value is always kept.
    expect(trimmedCount(2, 0.49999999999999994)).toBe(0);
    // Through yuenWelch: a = 1², 2², …, 100² with γ = 0.29 keeps ranks 30 … 71, whose mean is
    // (Σ_{i≤71} i² − Σ_{i≤29} i²)/42 = (121836 − 8555)/42 = 113281/42; b = [0, 0] keeps both (⌊0.58⌋ = 0).
    const squares = Array.from({ length: 100 }, (_, i) => (i + 1) ** 2);
    const r = yuenWelch(S(squares), S([0, 0]), { alternative: 'two-sided', trim: 0.29 });
    expectRel(r.difference, 113281 / 42, 4 * Number.EPSILON, 'difference (pure arithmetic: relative 4ε)');
  });

  it('rejects a bad trim or alternative', () => {
    for (const trim of [-0.1, 0.5, 0.7, Number.NaN, Infinity]) {
      expect(() => yuenWelch(S([1, 2, 3]), S([4, 5, 6]), { alternative: 'two-sided', trim })).toThrow(RangeError);
    }
    expect(() => yuenWelch(S([1, 2, 3]), S([4, 5, 6]), { alternative: 'up' as Alternative })).toThrow(RangeError);
  });
});

// ── properties ───────────────────────────────────────────────────────────────────────────────────────
/**
 * The Brunner–Munzel statistic (scipy's sign: positive when b tends to be larger) and df on expanded data,
 * straight from the definitions of Brunner & Munzel (2000): mid-ranks counted pairwise
 * (R = #(<) + (#(=) + 1)/2) among all N observations and within each group, S²_i = Σ (R − R^(i) − R̄_i +
 * (n_i + 1)/2)² / (n_i − 1), σ̂²_i = S²_i / (N − n_i)², σ̂²_N = N·Σ σ̂²_i / n_i, W = (R̄_b − R̄_a) / (√N·σ̂_N),
 * f̂ = (Σ N σ̂²_i / n_i)² / Σ (N σ̂²_i / n_i)² / (n_i − 1). O(N²), for checks only.
 */
function bmNaive(a: readonly number[], b: readonly number[]): { statistic: number; df: number } {
  const midrank = (v: number, among: readonly number[]): number => {
    let less = 0;
    let equal = 0;
    for (const w of among) {
      if (w < v) less++;
      else if (w === v) equal++;
    }
    return less + (equal + 1) / 2;
  };
  const all = [...a, ...b];
  const N = all.length;
  const parts = [a, b].map((x) => {
    const n = x.length;
    const overall = x.map((v) => midrank(v, all));
    const own = x.map((v) => midrank(v, x));
    const meanRank = overall.reduce((s, r) => s + r, 0) / n;
    const s2 = overall.reduce((s, r, k) => s + (r - own[k] - meanRank + (n + 1) / 2) ** 2, 0) / (n - 1);
    const sigma2 = s2 / (N - n) ** 2;
    return { n, meanRank, sigma2 };
  });
  const [pa, pb] = parts;
  const termA = (N * pa.sigma2) / pa.n;
  const termB = (N * pb.sigma2) / pb.n;
  const sigmaN = Math.sqrt(N * (pa.sigma2 / pa.n + pb.sigma2 / pb.n));
  const statistic = (pb.meanRank - pa.meanRank) / (Math.sqrt(N) * sigmaN);
  const df = (termA + termB) ** 2 / (termA ** 2 / (pa.n - 1) + termB ** 2 / (pb.n - 1));
  return { statistic, df };
}

const group = fc.array(fc.integer({ min: -40, max: 40 }), { minLength: 0, maxLength: 40 }).map((xs) => xs.map((v) => v / 4));
const alternative = fc.constantFrom<Alternative>('two-sided', 'less', 'greater');

function pInRange(r: BrunnerMunzelResult | YuenWelchResult): void {
  if (r.p !== null) {
    expect(r.p).toBeGreaterThanOrEqual(0);
    expect(r.p).toBeLessThanOrEqual(1);
  } else {
    expect(typeof r.reason).toBe('string');
  }
}

describe('properties (fast-check)', () => {
  it('swapping a and b negates the BM statistic and the Yuen t and difference; two-sided p unchanged', () => {
    fc.assert(
      fc.property(group, group, (x, y) => {
        const a = S(x);
        const b = S(y);
        const bm1 = brunnerMunzel(a, b, { alternative: 'two-sided' });
        const bm2 = brunnerMunzel(b, a, { alternative: 'two-sided' });
        expect(bm2.statistic === null).toBe(bm1.statistic === null);
        if (bm1.statistic !== null) {
          expect(bm2.statistic).toBe(-bm1.statistic || 0); // exact: the numerator n_a n_b/2 − U is exact
          expect(bm2.df).toBe(bm1.df); // the df formula is symmetric in the two groups
          expect(bm2.p).toBe(bm1.p);
        }
        const yw1 = yuenWelch(a, b, { alternative: 'two-sided' });
        const yw2 = yuenWelch(b, a, { alternative: 'two-sided' });
        expect(yw2.t === null).toBe(yw1.t === null);
        if (yw1.difference !== null) expect(yw2.difference).toBe(-yw1.difference || 0);
        if (yw1.t !== null) {
          expect(yw2.t).toBe(-yw1.t || 0);
          expect(yw2.df).toBe(yw1.df);
          expect(yw2.p).toBe(yw1.p);
        }
      }),
      { numRuns: 300 },
    );
  });

  it('every p ∈ [0, 1]; "less" and "greater" add to 1 (continuous t tails)', () => {
    fc.assert(
      fc.property(group, group, alternative, (x, y, alt) => {
        const a = S(x);
        const b = S(y);
        const bm = brunnerMunzel(a, b, { alternative: alt });
        const yw = yuenWelch(a, b, { alternative: alt });
        pInRange(bm);
        pInRange(yw);
        const bl = brunnerMunzel(a, b, { alternative: 'less' }).p;
        const bg = brunnerMunzel(a, b, { alternative: 'greater' }).p;
        if (bl !== null) expect(bl + bg!).toBeCloseTo(1, 12);
        const yl = yuenWelch(a, b, { alternative: 'less' }).p;
        const yg = yuenWelch(a, b, { alternative: 'greater' }).p;
        if (yl !== null) expect(yl + yg!).toBeCloseTo(1, 12);
      }),
      { numRuns: 300 },
    );
  });

  it('BM from the O(K) merge equals the paper\'s rank formulas evaluated on the expanded data', () => {
    fc.assert(
      fc.property(group, group, (x, y) => {
        const r = brunnerMunzel(S(x), S(y), { alternative: 'two-sided' });
        if (r.statistic === null) return;
        const naive = bmNaive(x, y);
        // pure arithmetic on half-integers: relative 1e-12 (absolute 1e-12 near 0)
        expectRel(r.statistic, -naive.statistic, 1e-12, 'statistic (−1 × scipy sign)', 1e-12);
        expectRel(r.df, naive.df, 1e-12, 'df');
      }),
      { numRuns: 300 },
    );
  });

  it('counts and expanded values give identical results (a 1–7 item)', () => {
    const counts = fc.array(fc.integer({ min: 0, max: 30 }), { minLength: 7, maxLength: 7 });
    fc.assert(
      fc.property(counts, counts, alternative, (ca, cb, alt) => {
        const a1 = fromCounts(Object.freeze(ca), 1);
        const b1 = fromCounts(Object.freeze(cb), 1);
        const a2 = fromValues(expand(a1));
        const b2 = fromValues(expand(b1));
        expect(brunnerMunzel(a1, b1, { alternative: alt })).toEqual(brunnerMunzel(a2, b2, { alternative: alt }));
        expect(yuenWelch(a1, b1, { alternative: alt })).toEqual(yuenWelch(a2, b2, { alternative: alt }));
      }),
      { numRuns: 200 },
    );
  });
});
