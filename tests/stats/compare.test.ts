/**
 * The public surface: compare(), compareCounts(), compareSamples().
 * Checks here are internal consistency (counts path = raw path, edge cases never throw, JSON is clean)
 * and the robustness fact that motivates the service. Agreement with R and scipy is checked per
 * statistic in the neighbouring test files.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { compare, compareCounts, compareSamples, fromValues, type Comparison } from '../../stats/index.js';

/** Every number in a result is finite; undefined quantities are null with a reason beside them. */
function assertCleanJson(value: unknown, path = 'result'): void {
  if (typeof value === 'number') {
    expect(Number.isFinite(value), `${path} = ${value} is not finite`).toBe(true);
    return;
  }
  if (value === null || typeof value !== 'object') return;
  const obj = value as Record<string, unknown>;
  const hasNull = Object.values(obj).some((v) => v === null);
  if (hasNull && !Array.isArray(obj) && path !== 'result.groups.a' && path !== 'result.groups.b') {
    // shapiroWilk may be null inside a group summary; that group's reason covers it.
    expect(typeof obj.reason, `${path} has a null field but no reason`).toBe('string');
  }
  for (const [k, v] of Object.entries(obj)) assertCleanJson(v, `${path}.${k}`);
}

function expandCounts(counts: number[], min: number): number[] {
  const out: number[] = [];
  counts.forEach((c, k) => {
    for (let i = 0; i < c; i++) out.push(min + k);
  });
  return out;
}

/** Relative closeness for the counts-vs-raw comparison: summation order differs, so allow 1e-10. */
function expectClose(actual: unknown, expected: unknown, path: string): void {
  if (typeof expected === 'number' && typeof actual === 'number') {
    const tol = 1e-10 * Math.max(1, Math.abs(expected));
    expect(Math.abs(actual - expected), `${path}: counts path ${actual}, raw path ${expected}`).toBeLessThanOrEqual(tol);
    return;
  }
  if (expected === null || typeof expected !== 'object') {
    expect(actual, path).toEqual(expected);
    return;
  }
  for (const key of Object.keys(expected as object)) {
    expectClose((actual as Record<string, unknown>)[key], (expected as Record<string, unknown>)[key], `${path}.${key}`);
  }
}

describe('compare(): shape and conventions', () => {
  const a = Object.freeze([5.1, 4.9, 6.2, 5.8, 6.0, 5.5, 5.3]);
  const b = Object.freeze([6.4, 6.8, 7.1, 6.9, 7.4, 6.6]);

  it('returns a deeply frozen result with every documented block', () => {
    const r = compare(a, b);
    expect(Object.isFrozen(r)).toBe(true);
    expect(Object.isFrozen(r.welch.ci)).toBe(true);
    expect(Object.keys(r).sort()).toEqual(['effectSizes', 'groups', 'hodgesLehmann', 'mannWhitney', 'robust', 'student', 'welch']);
    expect(r.welch.meanDifference).toBeLessThan(0); // a − b: a is lower
    expect(r.hodgesLehmann.estimate).toBeLessThan(0);
    assertCleanJson(JSON.parse(JSON.stringify(r)));
  });

  it('rejects NaN and Infinity naming the group and index', () => {
    expect(() => compare([1, 2, Number.NaN], [1, 2, 3])).toThrow(/a\[2\]/);
    expect(() => compare([1, 2, 3], [1, Number.POSITIVE_INFINITY])).toThrow(/b\[1\]/);
  });

  it('rejects bad options clearly', () => {
    expect(() => compare(a, b, { confidenceLevel: 1 })).toThrow(/confidenceLevel/);
    expect(() => compare(a, b, { alternative: 'bigger' as never })).toThrow(/alternative/);
    expect(() => compare(a, b, { exact: 'sometimes' as never })).toThrow(/exact/);
  });
});

describe('edge cases never throw and give null with a reason', () => {
  const cases: [string, number[], number[]][] = [
    ['both empty', [], []],
    ['one empty', [], [1, 2, 3]],
    ['n = 1 each', [1], [2]],
    ['n = 2 each', [1, 2], [3, 5]],
    ['both constant, different values', [4, 4, 4], [6, 6, 6, 6]],
    ['one constant', [4, 4, 4, 4], [1, 5, 6, 9]],
    ['all values equal across groups', [3, 3, 3], [3, 3]],
    ['huge magnitudes', [1e12 + 1, 1e12 + 2, 1e12 + 3, 1e12 + 5], [1e12 + 2, 1e12 + 4, 1e12 + 6, 1e12 + 9]],
    ['near zero', [1e-12, 2e-12, 3e-12, 5e-12], [2e-12, 4e-12, 6e-12, 9e-12]],
  ];
  for (const [name, a, b] of cases) {
    it(name, () => {
      let r: Comparison | undefined;
      expect(() => {
        r = compare(Object.freeze(a), Object.freeze(b));
      }).not.toThrow();
      assertCleanJson(JSON.parse(JSON.stringify(r)));
    });
  }

  it('huge magnitudes keep the difference exactly (no cancellation)', () => {
    const r = compare([1e12 + 1, 1e12 + 2, 1e12 + 3], [1e12 + 4, 1e12 + 5, 1e12 + 6]);
    expect(r.welch.meanDifference).toBe(-3);
    expect(r.groups.a.sd).toBeCloseTo(1, 12);
  });
});

describe('compareCounts() equals compare() on the expanded data', () => {
  it('on a 0–10 item with heavy ties', () => {
    const ca = [1, 0, 2, 3, 5, 8, 9, 12, 7, 4, 2];
    const cb = [0, 1, 1, 2, 4, 5, 9, 11, 10, 8, 6];
    for (const alternative of ['two-sided', 'less', 'greater'] as const) {
      const fromCounts = compareCounts(ca, cb, { min: 0, alternative });
      const fromRaw = compare(expandCounts(ca, 0), expandCounts(cb, 0), { alternative });
      expectClose(fromCounts, fromRaw, alternative);
    }
  });

  it('property: random count vectors on a 1–7 scale', () => {
    fc.assert(
      fc.property(
        fc.array(fc.integer({ min: 0, max: 12 }), { minLength: 7, maxLength: 7 }),
        fc.array(fc.integer({ min: 0, max: 12 }), { minLength: 7, maxLength: 7 }),
        (ca, cb) => {
          const r1 = compareCounts(ca, cb, { min: 1 });
          const r2 = compare(expandCounts(ca, 1), expandCounts(cb, 1));
          expectClose(r1, r2, 'comparison');
        },
      ),
      { numRuns: 60 },
    );
  });

  it('rejects a fractional or negative count naming its index', () => {
    expect(() => compareCounts([1, 2.5], [1, 1])).toThrow(/countsA\[1\]/);
    expect(() => compareCounts([1, 2], [1, -1])).toThrow(/countsB\[1\]/);
  });
});

describe('compareSamples() on pre-built samples equals compare()', () => {
  it('same numbers either way', () => {
    const a = [3.2, 1.5, 4.4, 2.2, 5.1, 3.3];
    const b = [2.1, 0.4, 1.9, 3.0, 1.1];
    expect(JSON.stringify(compareSamples(fromValues(a), fromValues(b)))).toBe(JSON.stringify(compare(a, b)));
  });
});

describe('the robustness fact behind the service (common practice, no source)', () => {
  it('a few extreme but valid answers move the mean and Welch p a long way, the median and rank-sum p barely', () => {
    // Invented 0–200 amounts: two groups that differ clearly.
    const a = Array.from({ length: 40 }, (_, i) => 60 + ((i * 7) % 23));
    const b = Array.from({ length: 40 }, (_, i) => 70 + ((i * 11) % 23));
    const before = compare(a, b);
    const withExtremes = compare([...a, 200, 199, 198], b);
    const meanShift = Math.abs((withExtremes.groups.a.mean ?? 0) - (before.groups.a.mean ?? 0));
    const medianShift = Math.abs((withExtremes.groups.a.median ?? 0) - (before.groups.a.median ?? 0));
    expect(meanShift).toBeGreaterThan(5 * Math.max(medianShift, 0.5));
    // Before: both tests find the difference. After: Welch no longer does, the rank-sum test still does.
    expect(before.welch.p).toBeLessThan(0.001);
    expect(before.mannWhitney.p).toBeLessThan(0.001);
    expect(withExtremes.welch.p).toBeGreaterThan(0.05);
    expect(withExtremes.mannWhitney.p).toBeLessThan(0.001);
    // On a log scale Welch p moves at least three times as far as the rank-sum p.
    const welchMove = Math.log10((withExtremes.welch.p ?? 1) / (before.welch.p ?? 1));
    const rankMove = Math.log10((withExtremes.mannWhitney.p ?? 1) / (before.mannWhitney.p ?? 1));
    expect(welchMove).toBeGreaterThan(3 * rankMove);
  });
});
