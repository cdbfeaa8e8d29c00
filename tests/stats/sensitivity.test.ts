import { describe, expect, it } from 'vitest';
import { compare, compareSamples, fromCounts, fromValues, type Sample } from '../../stats/index.js';
import { sensitivity, type SensitivityResult } from '../../stats/sensitivity.js';
import { expand } from '../../stats/sample.js';
import { expectRel, loadFixture } from './fixtures.js';
import { Rng } from '../helpers/rng.js';

interface Both {
  n: { a: number; b: number };
  welch: { estimate: number; lower: number; upper: number; p: number };
  rankSum: { estimate: number; p: number; W: number };
}
const fx = loadFixture<{
  a: number[];
  b: number[];
  full: Both;
  without_far_out: Both & { fencesB: number[] };
  winsorised: Both & { fencesB: number[] };
  without_most_influential: Both & { group: 'a' | 'b'; value: number };
}>('r-sensitivity.json');

const SCALE_0_100 = { min: 0, max: 100, integer: true };
const LABELS = { a: 'Bill first', b: 'Service first' };

/** The counts of a 0–100 item from raw whole-number answers. */
function countsOf(x: readonly number[]): number[] {
  const c = new Array<number>(101).fill(0);
  for (const v of x) c[v]++;
  return c;
}

function expectSameAsCompare(r: SensitivityResult, a: ArrayLike<number>, b: ArrayLike<number>, what: string, exact: 'auto' | 'never' = 'auto'): void {
  // The scenario runs the very functions compare() runs, on the same Samples, so the numbers are identical
  // (tolerance 0; a mismatch prints both).
  const c = compare(a, b, { exact });
  const expected = {
    n: { a: c.groups.a.n, b: c.groups.b.n },
    welch: { estimate: c.welch.meanDifference, lower: c.welch.ci.lower, upper: c.welch.ci.upper, p: c.welch.p },
    rankSum: { estimate: c.hodgesLehmann.estimate, lower: c.hodgesLehmann.ci.lower, upper: c.hodgesLehmann.ci.upper, p: c.mannWhitney.p },
  };
  const actual = { n: r.n, welch: { ...r.welch }, rankSum: { ...r.rankSum } };
  delete (actual.welch as { reason?: string }).reason;
  delete (actual.rankSum as { reason?: string }).reason;
  expect(actual, `${what}: a=${JSON.stringify(Array.from(a))} b=${JSON.stringify(Array.from(b))}`).toEqual(expected);
}

describe('sensitivity against R t.test / wilcox.test on the reduced data (tests/fixtures/r-sensitivity.json, R 4.2.2)', () => {
  const a = Object.freeze(fx.a.slice());
  const b = Object.freeze(fx.b.slice());
  const sa = fromCounts(countsOf(a), 0, 'a');
  const sb = fromCounts(countsOf(b), 0, 'b');
  const cmp = compareSamples(sa, sb, { exact: 'never' });
  const s = sensitivity(cmp, { a: sa, b: sb }, { alpha: 0.05, scale: SCALE_0_100, labels: LABELS, exact: 'never' });
  // Tolerances: the mean difference is pure arithmetic (relative 16·EPSILON); interval bounds and p-values pass through
  // the t and normal distributions (incomplete beta, erfc): relative 1e-10, as in the other R checks of welch and rank-sum.
  const ARITH = 16 * Number.EPSILON;
  const SPECIAL = 1e-10;
  const check = (r: SensitivityResult | null, e: Both, what: string): void => {
    expect(r, what).not.toBeNull();
    const x = r as SensitivityResult;
    expect(x.n, what).toEqual(e.n);
    expectRel(x.welch.estimate, e.welch.estimate, ARITH, `${what} welch estimate`);
    expectRel(x.welch.lower, e.welch.lower, SPECIAL, `${what} welch lower`);
    expectRel(x.welch.upper, e.welch.upper, SPECIAL, `${what} welch upper`);
    expectRel(x.welch.p, e.welch.p, SPECIAL, `${what} welch p`);
    expectRel(x.rankSum.estimate, e.rankSum.estimate, ARITH, `${what} Hodges–Lehmann estimate (median of pairwise differences)`);
    expectRel(x.rankSum.p, e.rankSum.p, SPECIAL, `${what} rank-sum p (normal, continuity-corrected)`);
  };
  it('full data', () => check(s.full, fx.full, 'full'));
  it('without the far-out answers (fences from R quantile type 7)', () => {
    const sc = s.scenarios.find((x) => x.code === 'without_far_out')!;
    expect(sc.fences?.b).toEqual({ low: fx.without_far_out.fencesB[0], high: fx.without_far_out.fencesB[1] });
    check(sc.result, fx.without_far_out, 'without_far_out');
    expect(sc.affected).toEqual({ a: 0, b: 3 });
    expect(sc.conclusionChanges).toEqual({ welch: true, rankSum: true });
    expect(sc.sentence).toBe(
      'Without the 3 far-out answers (100, 98, 97 in "Service first"), Welch\'s p moves from 0.011 to 0.057; the rank-sum p moves from 0.035 to 0.090.',
    );
  });
  it('winsorised at the inner fences', () => {
    const sc = s.scenarios.find((x) => x.code === 'winsorised')!;
    expect(sc.fences?.b).toEqual({ low: fx.winsorised.fencesB[0], high: fx.winsorised.fencesB[1] });
    check(sc.result, fx.winsorised, 'winsorised');
    expect(sc.conclusionChanges).toEqual({ welch: false, rankSum: false });
    expect(sc.sentence).toBeNull();
  });
  it('without the most influential answer (R: brute-force leave-one-out over every answer)', () => {
    const sc = s.scenarios.find((x) => x.code === 'without_most_influential')!;
    expect(sc.values).toEqual([{ group: fx.without_most_influential.group, value: fx.without_most_influential.value, count: 1 }]);
    check(sc.result, fx.without_most_influential, 'without_most_influential');
  });
  it('does not change its inputs', () => {
    expect(expand(sa)).toEqual(Float64Array.from(a).sort());
    expect(expand(sb)).toEqual(Float64Array.from(b).sort());
  });
});

describe('sensitivity equals compare() on the reduced data', () => {
  // Invented answers to the 0–100 "fair price" style item: a tight group and one with a few answers near the top.
  const a = Object.freeze([31, 35, 38, 40, 40, 41, 42, 44, 45, 45, 46, 47, 48, 50, 52, 39, 43, 44, 41, 37]);
  const b = Object.freeze([33, 36, 37, 39, 40, 40, 41, 42, 43, 43, 44, 45, 46, 47, 95, 97, 100, 38, 41, 42]);
  const sa = fromCounts(countsOf(a), 0, 'a');
  const sb = fromCounts(countsOf(b), 0, 'b');
  const cmp = compareSamples(sa, sb);
  const s = sensitivity(cmp, { a: sa, b: sb }, { alpha: 0.05, scale: SCALE_0_100, labels: LABELS });

  it('full data equals compare() on the raw answers', () => expectSameAsCompare(s.full, a, b, 'full'));

  it('without_far_out equals compare() with the answers beyond Q1 − 3·IQR / Q3 + 3·IQR removed', () => {
    const sc = s.scenarios[0];
    expect(sc.code).toBe('without_far_out');
    const q = cmp.groups.b;
    const hi = (q.q3 as number) + 3 * ((q.q3 as number) - (q.q1 as number));
    expect(hi).toBeLessThan(95); // the three top answers are far out in b
    const qa = cmp.groups.a;
    const loA = (qa.q1 as number) - 3 * ((qa.q3 as number) - (qa.q1 as number));
    const hiA = (qa.q3 as number) + 3 * ((qa.q3 as number) - (qa.q1 as number));
    const keptA = a.filter((v) => v >= loA && v <= hiA);
    const lo = (q.q1 as number) - 3 * ((q.q3 as number) - (q.q1 as number));
    const keptB = b.filter((v) => v >= lo && v <= hi);
    expect(sc.affected).toEqual({ a: a.length - keptA.length, b: 3 });
    expectSameAsCompare(sc.result!, keptA, keptB, 'without_far_out');
    expect(sc.values.filter((v) => v.group === 'b').map((v) => v.value)).toEqual([100, 97, 95]);
  });

  it('winsorised equals compare() with the values clamped to the inner fences', () => {
    const sc = s.scenarios[1];
    const fa = sc.fences!.a!;
    const fb = sc.fences!.b!;
    const clamp = (f: { low: number; high: number }) => (v: number) => Math.min(f.high, Math.max(f.low, v));
    expectSameAsCompare(sc.result!, a.map(clamp(fa)), b.map(clamp(fb)), 'winsorised');
  });

  it('without_most_influential equals compare() without the answer that moves t the most (checked by brute force)', () => {
    const sc = s.scenarios[2];
    const tFull = compare(a, b).welch.t as number;
    let best = { group: 'a' as 'a' | 'b', value: NaN, shift: -1 };
    for (const group of ['a', 'b'] as const) {
      const x = group === 'a' ? a : b;
      for (const v of [...new Set(x)].sort((p, q) => p - q)) {
        const i = x.indexOf(v);
        const rest = x.filter((_, j) => j !== i);
        const t1 = (group === 'a' ? compare(rest, b) : compare(a, rest)).welch.t as number;
        // Downdated moments and a full recomputation agree to rounding; a shift must beat the best by more than that.
        if (Math.abs(t1 - tFull) > best.shift + 1e-12) best = { group, value: v, shift: Math.abs(t1 - tFull) };
      }
    }
    expect(sc.values).toEqual([{ group: best.group, value: best.value, count: 1 }]);
    const x = best.group === 'a' ? a : b;
    const i = x.indexOf(best.value);
    const rest = x.filter((_, j) => j !== i);
    expectSameAsCompare(sc.result!, best.group === 'a' ? rest : a, best.group === 'b' ? rest : b, 'without_most_influential');
  });

  it('continuous values give the same numbers as counts of the same answers', () => {
    const ca = compare(a, b);
    const va = fromValues(a, 'a');
    const vb = fromValues(b, 'b');
    const s2 = sensitivity(ca, { a: va, b: vb }, { alpha: 0.05, scale: { min: 0, max: 100, integer: false }, labels: LABELS });
    expect(s2.scenarios.map((x) => x.result)).toEqual(s.scenarios.map((x) => x.result));
  });
});

describe('sensitivity on many random samples: the scenarios against brute force over the raw answers', () => {
  // Seeded invented data: whole numbers (many ties) or doubles, with a few far answers on either side.
  const rng = new Rng(20261203);
  const draw = (n: number, ties: boolean): number[] =>
    Array.from({ length: n }, () => {
      const far = rng.uniform() < 0.06 ? (rng.uniform() < 0.5 ? -1 : 1) * (20 + 30 * rng.uniform()) : 0;
      const v = 50 + 8 * rng.normal() + far;
      return ties ? Math.round(v) + 0 : v; // + 0: no -0 (a Sample stores 0)
    });
  /** What a scenario must list: per group the answers beyond the fences, the ten farthest from the fences' midpoint first. */
  const listed = (x: readonly number[], f: { low: number; high: number } | null, group: 'a' | 'b') => {
    if (!f) return [];
    const tally = new Map<number, number>();
    for (const v of x) if (v < f.low || v > f.high) tally.set(v, (tally.get(v) ?? 0) + 1);
    const mid = (f.low + f.high) / 2;
    return [...tally]
      .sort((p, q) => p[0] - q[0])
      .map(([value, count]) => ({ group, value, count }))
      .sort((p, q) => Math.abs(q.value - mid) - Math.abs(p.value - mid))
      .slice(0, 10);
  };

  for (let round = 0; round < 40; round++) {
    const ties = round % 2 === 0;
    const a = draw(15 + Math.floor(rng.uniform() * 150), ties);
    const b = draw(15 + Math.floor(rng.uniform() * 150), ties);
    it(`round ${round} (${ties ? 'whole numbers' : 'doubles'}, n = ${a.length} + ${b.length})`, () => {
      const sa = fromValues(a, 'a');
      const sb = fromValues(b, 'b');
      const s = sensitivity(compareSamples(sa, sb), { a: sa, b: sb }, { alpha: 0.05, scale: { min: -100, max: 200, integer: false }, labels: LABELS });
      const [far, wins, infl] = s.scenarios;
      for (const [sc, keepOrClamp] of [
        [far, 'keep'],
        [wins, 'clamp'],
      ] as const) {
        const fa = sc.fences!.a;
        const fb = sc.fences!.b;
        const alter = (x: number[], f: { low: number; high: number } | null) =>
          !f ? x : keepOrClamp === 'keep' ? x.filter((v) => v >= f.low && v <= f.high) : x.map((v) => Math.min(f.high, Math.max(f.low, v)));
        const beyond = (x: number[], f: { low: number; high: number } | null) => (f ? x.filter((v) => v < f.low || v > f.high).length : 0);
        expect(sc.affected).toEqual({ a: beyond(a, fa), b: beyond(b, fb) });
        expect(sc.values).toEqual([...listed(a, fa, 'a'), ...listed(b, fb, 'b')]);
        if (sc.result) expectSameAsCompare(sc.result, alter(a, fa), alter(b, fb), sc.code);
        else expect(sc.affected).toEqual({ a: 0, b: 0 });
      }
      // The most influential answer: brute-force leave-one-out over every raw answer, by |Δt| (first of equals kept).
      const tFull = compare(a, b).welch.t as number;
      let best: { group: 'a' | 'b'; value: number; shift: number } | null = null;
      for (const group of ['a', 'b'] as const) {
        const x = group === 'a' ? a : b;
        const seen = new Set<number>();
        for (const v of [...x].sort((p, q) => p - q)) {
          if (seen.has(v)) continue;
          seen.add(v);
          const i = x.indexOf(v);
          const rest = [...x.slice(0, i), ...x.slice(i + 1)];
          const t = compare(group === 'a' ? rest : a, group === 'b' ? rest : b).welch.t as number;
          const shift = Math.abs(t - tFull);
          if (best === null || shift > best.shift + 1e-9 * Math.abs(best.shift)) best = { group, value: v, shift };
        }
      }
      expect(infl.values.map((v) => [v.group, v.value])).toEqual([[best!.group, best!.value]]);
    });
  }
});

describe('sensitivity: when a scenario does not apply', () => {
  it('a short rating scale (0–10) has no fences; the influential-answer scenario still runs', () => {
    const a = Object.freeze([0, 5, 5, 6, 6, 7, 7, 7, 8, 10]);
    const b = Object.freeze([3, 4, 4, 5, 5, 5, 6, 6, 6, 7]);
    const sa: Sample = fromValues(a, 'a');
    const sb: Sample = fromValues(b, 'b');
    const s = sensitivity(compareSamples(sa, sb), { a: sa, b: sb }, { alpha: 0.05, scale: { min: 0, max: 10, integer: true }, labels: LABELS });
    expect(s.scenarios.map((x) => [x.code, x.result === null])).toEqual([
      ['without_far_out', true],
      ['winsorised', true],
      ['without_most_influential', false],
    ]);
    expect(s.scenarios[0].reason).toBe('A whole-number scale of 11 points or fewer has no fences: every point is a legitimate answer.');
    expect(Object.isFrozen(s)).toBe(true);
  });

  it('groups of two answers: nothing can be left out; bad alpha throws', () => {
    const sa = fromValues([1, 2], 'a');
    const sb = fromValues([3, 4], 'b');
    const cmp = compareSamples(sa, sb);
    const s = sensitivity(cmp, { a: sa, b: sb }, { alpha: 0.05, scale: { min: 0, max: 100, integer: false }, labels: LABELS });
    expect(s.scenarios.every((x) => x.result === null && x.sentence === null)).toBe(true);
    expect(() => sensitivity(cmp, { a: sa, b: sb }, { alpha: 1, scale: SCALE_0_100, labels: LABELS })).toThrow(RangeError);
  });
});
