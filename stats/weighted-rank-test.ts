/**
 * weighted-rank-test.ts — the design-based rank test of Lumley & Scott (2013) for two conditions whose answers
 * carry sampling weights (weights-only design, with replacement; cf. R survey::svyranktest).
 *
 * Hypotheses: H0: a randomly chosen member of the population answering under condition a is as likely to give
 * the larger answer as one under condition b (equal mean rank in the population), against
 *   "two-sided": the mean ranks differ;  "greater": a tends to answer higher;  "less": a tends to answer lower.
 *
 * Method (Lumley & Scott 2013, §2–3): rank every answer on the estimated population distribution of both
 * conditions together, F̂(y) = Σ_i w_i 1(y_i ≤ y) / Σ_i w_i, with mid-ranks for ties:
 *   r(y) = ( F̂(y−) + F̂(y) ) / 2     (a number in (0, 1); "rank score" on the scale of F̂)
 * then test the difference in weighted mean rank score between the conditions with the design-based t test of
 * weighted-ttest.ts (linearised standard error, df = n − 2), treating the ranks as the outcome. The estimate is
 * r̄_a − r̄_b. Ties get one rank per distinct value, so the whole test runs on per-value sums in O(K).
 *
 * Agreement with R (survey 4.1.1, run as a black box): when no two tied answers carry different weights the
 * result equals svyranktest to rounding. When tied answers carry different weights, svyranktest's rank for a
 * tied answer depends on the order of the rows in the data (reversing the rows changes its t), while the
 * mid-rank above is the same for every answer sharing a value and independent of order; the two then differ,
 * and this module matches the paper's mid-ranks fed through svyglm instead (see tests/fixtures/r-weighted.json).
 *
 * Reference: Lumley, T. & Scott, A. J. (2013). Two-sample rank tests under complex sampling. Biometrika 100(4),
 *   831–842. doi:10.1093/biomet/ast031.
 *
 * Undefined cases (null with a reason): as the weighted t test (a group with no answers, fewer than three
 * answers in all, a standard error of 0 — e.g. every answer equal).
 *
 * Cost: O(K_a + K_b) (one merge of the two sorted value lists).
 */
import type { Alternative } from './types.js';
import { freezeDeep } from './types.js';
import type { WeightedSample } from './weighted-sample.js';
import { linearisedDifference, resolveWeightedOptions, tInference, type WeightedTestOptions, type WeightedValues } from './weighted-ttest.js';

export interface WeightedRankTestResult {
  /** r̄_a − r̄_b: difference in weighted mean rank score (ranks on the 0–1 scale of the estimated CDF). */
  estimate: number | null;
  se: number | null;
  t: number | null;
  df: number | null;
  p: number | null;
  alternative: Alternative;
  reason?: string;
}

/** Mid-rank scores (F̂(v−) + F̂(v))/2 of each group's distinct values on the pooled weighted CDF. O(K_a + K_b). */
export function pooledMidRanks(a: WeightedSample, b: WeightedSample): { a: Float64Array; b: Float64Array } {
  const ra = new Float64Array(a.values.length);
  const rb = new Float64Array(b.values.length);
  const total = a.totalWeight + b.totalWeight;
  let below = 0;
  let i = 0;
  let j = 0;
  while (i < a.values.length || j < b.values.length) {
    const takeA = j >= b.values.length || (i < a.values.length && a.values[i] <= b.values[j]);
    const takeB = i >= a.values.length || (j < b.values.length && b.values[j] <= a.values[i]);
    const tieWeight = (takeA ? a.weightSums[i] : 0) + (takeB ? b.weightSums[j] : 0);
    const score = (below + tieWeight / 2) / total;
    if (takeA) ra[i++] = score;
    if (takeB) rb[j++] = score;
    below += tieWeight;
  }
  return { a: ra, b: rb };
}

/** Design-based rank test of Lumley & Scott (2013), a − b. O(K_a + K_b). */
export function weightedRankTest(a: WeightedSample, b: WeightedSample, options: WeightedTestOptions = {}): WeightedRankTestResult {
  const opts = resolveWeightedOptions(options);
  const empty = (reason: string): WeightedRankTestResult =>
    freezeDeep({ estimate: null, se: null, t: null, df: null, p: null, alternative: opts.alternative, reason });
  if (a.n === 0 || b.n === 0) return empty('Each condition needs at least one answer.');
  const ranks = pooledMidRanks(a, b);
  const ga: WeightedValues = { ...a, values: ranks.a };
  const gb: WeightedValues = { ...b, values: ranks.b };
  const d = linearisedDifference(ga, gb);
  if ('reason' in d) return empty(d.reason);
  const inf = tInference(d.difference, d.se, d.df, opts.alternative, 0.95);
  return freezeDeep({ estimate: d.difference, se: d.se, t: inf.t, df: d.df, p: inf.p, alternative: opts.alternative });
}
