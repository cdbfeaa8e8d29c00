/**
 * The shared selection of several order statistics of the pairwise differences a_i − b_j
 * (hodges-lehmann.ts): the median's selection keeps its first-round bracket and the pivots it counted
 * (knots), and the interval's ranks start from them with a secant between the nearest knots. The
 * answers must be exactly those of independent selections and of brute force (sorting all n_a·n_b
 * differences): order statistics are values of the data, so the comparisons are exact (tolerance 0).
 * Source of the expected values: brute force in this file (no outside reference is needed for a sort).
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { hodgesLehmann, kthPairwiseDifference, medianAndOrderStatistics } from '../../stats/hodges-lehmann.js';
import { fromValues, fromWeighted, type Sample } from '../../stats/sample.js';

/** All n_a·n_b differences with multiplicity, sorted (brute force). */
function sortedDifferences(a: Sample, b: Sample): Float64Array {
  const out: number[] = [];
  for (let i = 0; i < a.values.length; i++) {
    for (let j = 0; j < b.values.length; j++) {
      const d = a.values[i] - b.values[j];
      for (let c = 0; c < a.counts[i] * b.counts[j]; c++) out.push(d);
    }
  }
  return Float64Array.from(out).sort();
}

function bruteMedian(d: Float64Array): number {
  const N = d.length;
  if (N % 2 === 1) return d[(N - 1) / 2];
  const x = d[N / 2 - 1];
  const y = d[N / 2];
  return x === y ? x : (x + y) / 2;
}

/** Ranks around the median like an interval's, plus the extremes and a few random ones. */
function ranksFor(N: number, extra: readonly number[]): number[] {
  const ks = new Set<number>([1, N, Math.ceil(N / 2)]);
  for (const f of [0.3, 0.45, 0.49, 0.51, 0.55, 0.7]) ks.add(Math.min(N, Math.max(1, Math.round(f * N))));
  for (const u of extra) ks.add(Math.min(N, 1 + Math.floor(u * N)));
  return [...ks];
}

/** Weighted sample: distinct sorted values from a small lattice or a continuum, with counts. */
const weightedSample = (maxDistinct: number) =>
  fc
    .record({
      lattice: fc.boolean(),
      raw: fc.array(fc.integer({ min: -400, max: 400 }), { minLength: 1, maxLength: maxDistinct }),
      counts: fc.array(fc.integer({ min: 1, max: 4 }), { minLength: maxDistinct, maxLength: maxDistinct }),
      unit: fc.boolean(),
    })
    .map(({ lattice, raw, counts, unit }) => {
      const values = [...new Set(raw.map((v) => (lattice ? Math.round(v / 40) : v / 7.3)))].sort((x, y) => x - y);
      return fromWeighted(
        Object.freeze(values),
        Object.freeze(values.map((_, i) => (unit ? 1 : counts[i]))),
      );
    });

describe('shared selection of several ranks (median bracket + knots)', () => {
  it('equals brute force and independent selections on random weighted data', () => {
    fc.assert(
      fc.property(
        weightedSample(70),
        weightedSample(70),
        fc.array(fc.double({ min: 0, max: 0.999999, noNaN: true }), { maxLength: 4 }),
        (a, b, extra) => {
          const d = sortedDifferences(a, b);
          const ks = ranksFor(d.length, extra);
          const shared = medianAndOrderStatistics(a, b, ks, true);
          const independent = medianAndOrderStatistics(a, b, ks, false);
          // exact: the median of the differences as defined in hodges-lehmann.ts (midpoint for even N)
          expect(shared.median).toBe(bruteMedian(d));
          expect(independent.median).toBe(shared.median);
          ks.forEach((k, i) => {
            expect(shared.values[i]).toBe(d[k - 1]); // brute force, exact
            expect(independent.values[i]).toBe(d[k - 1]);
          });
        },
      ),
      { numRuns: 150, seed: 20240607 },
    );
  });

  it('handles continuous data with unit weights large enough for several rounds', () => {
    // 300 × 260 distinct values: 78,000 cells, so the selections take several counting walks each
    const a0 = Object.freeze(Array.from({ length: 300 }, (_, i) => Math.sin(i * 12.9898) * 43758.5453 % 3));
    const b0 = Object.freeze(Array.from({ length: 260 }, (_, i) => 0.2 + (Math.cos(i * 78.233) * 12345.678) % 2.5));
    const a = fromValues(a0);
    const b = fromValues(b0);
    const d = sortedDifferences(a, b);
    const N = d.length;
    const ks = [1, 2, Math.floor(N * 0.47), N / 2 - 300, N / 2 + 301, Math.floor(N * 0.53), N - 1, N];
    const shared = medianAndOrderStatistics(a, b, ks, true);
    expect(shared.median).toBe(bruteMedian(d)); // brute force, exact
    ks.forEach((k, i) => {
      expect(shared.values[i]).toBe(d[k - 1]); // brute force, exact
      expect(shared.values[i]).toBe(kthPairwiseDifference(a, b, k)); // independent selection, exact
    });
  });

  it('gives the same Hodges–Lehmann interval as order statistics picked by brute force (normal method)', () => {
    // 40,000 + 30,000 distinct values (> 65,536 in all, so the estimate keeps its bracket and the
    // interval's ranks use the knots); checked against independent selections of the same ranks.
    let state = 12345;
    const next = () => ((state = (Math.imul(state, 1103515245) + 12345) >>> 0) / 4294967296);
    const normal = () => Math.sqrt(-2 * Math.log(1 - next())) * Math.cos(2 * Math.PI * next());
    const a = fromValues(Object.freeze(Array.from({ length: 40000 }, normal)));
    const b = fromValues(Object.freeze(Array.from({ length: 30000 }, () => 0.05 + 1.2 * normal())));
    const hl = hodgesLehmann(a, b, { alternative: 'two-sided', confidenceLevel: 0.95, exact: 'auto' });
    // the ranks the normal interval uses (header of hodges-lehmann.ts): k = ⌊N/2 − z·√V⌋, N + 1 − k;
    // no ties, so V = n_a n_b (n_a + n_b + 1)/12; z = Φ⁻¹(0.975) = 1.959963984540054 (R qnorm, from memory)
    const N = a.n * b.n;
    const k = Math.floor(N / 2 - 1.959963984540054 * Math.sqrt((a.n * b.n * (a.n + b.n + 1)) / 12));
    expect(hl.ci.lower).toBe(kthPairwiseDifference(a, b, k)); // independent selection, exact
    expect(hl.ci.upper).toBe(kthPairwiseDifference(a, b, N + 1 - k));
    const lo = kthPairwiseDifference(a, b, N / 2);
    const hi = kthPairwiseDifference(a, b, N / 2 + 1);
    expect(hl.estimate).toBe(lo === hi ? lo : (lo + hi) / 2); // midpoint, exact up to rounding of (lo+hi)/2 (same double here)
  });
});
