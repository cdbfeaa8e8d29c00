/**
 * weighted-ttest.ts — the design-based t test of a difference in weighted means between two conditions, for
 * answers carrying sampling weights (a weights-only, single-stage design sampled with replacement; R:
 * svyttest(y ~ g, svydesign(id = ~1, weights = ~w))).
 *
 * Hypotheses: H0: the population means of the two conditions are equal (Δ = μ_a − μ_b = 0), against
 *   "two-sided": Δ ≠ 0;  "greater": Δ > 0 (a larger);  "less": Δ < 0.
 *
 * Method (linearisation, worked out from the estimator itself):
 *   Each group's mean is a ratio estimator ȳ_g = Σ_g w y / Σ_g w = Ŷ_g / Ŵ_g. Its influence (linearised) value
 *   for answer i is z_i = w_i (y_i − ȳ_g) / Ŵ_g for i in g and 0 otherwise, so Δ̂ = ȳ_a − ȳ_b has the
 *   influence values z_i = w_i (y_i − ȳ_a)/Ŵ_a in a and −w_i (y_i − ȳ_b)/Ŵ_b in b. Under with-replacement
 *   sampling of n = n_a + n_b units the variance of a total Σ z_i is estimated by n/(n − 1) Σ (z_i − z̄)²; here
 *   z̄ = 0, so
 *     se² = n/(n − 1) · [ Σ_a w² (y − ȳ_a)² / Ŵ_a²  +  Σ_b w² (y − ȳ_b)² / Ŵ_b² ].
 *   With per-value sums (Σw, Σw² at each distinct value v) the bracket is Σ_v Σw²_v (v − ȳ_g)² / Ŵ_g², so the
 *   cost is O(distinct values).
 *   t = Δ̂ / se with df = n − 2 (the design's degrees of freedom n − 1, less one for the second mean — the rule
 *   of survey::svyttest, checked numerically: df = 198 for n = 200). p from Student's t with df; the interval
 *   Δ̂ ± t_{df, 1−α/2} · se (one-sided alternatives: one bound null).
 *   When all weights are equal the standard error is √(n/(n−1)) · √(Σ_a (y−ȳ_a)²/n_a² + Σ_b (y−ȳ_b)²/n_b²),
 *   close to but not equal to Welch's.
 * References:
 *   Binder, D. A. (1983). On the variances of asymptotically normal estimators from complex surveys.
 *     International Statistical Review 51, 279–292. doi:10.2307/1402588 (linearisation by influence functions).
 *   Lumley, T. (2010). Complex Surveys: A Guide to Analysis Using R. Wiley. doi:10.1002/9780470580066, ch. 2–3.
 *   Kish, L. (1965). Survey Sampling. Wiley (with-replacement variance estimator, design effects).
 *
 * Undefined cases (null with a reason): a group with no answers; fewer than three answers in all (df < 1);
 * a standard error of 0 (every answer equals its group's mean).
 *
 * Cost: O(K_a + K_b) in the number of distinct values.
 */
import { checkConfidenceLevel, pValue, studentQuantile, studentUpperTail } from './distributions.js';
import type { Alternative, Interval, TTestResult } from './types.js';
import { freezeDeep } from './types.js';
import type { WeightedSample } from './weighted-sample.js';

export interface WeightedTestOptions {
  alternative?: Alternative;
  confidenceLevel?: number;
}

export function resolveWeightedOptions(options: WeightedTestOptions): { alternative: Alternative; confidenceLevel: number } {
  const alternative = options.alternative ?? 'two-sided';
  const confidenceLevel = options.confidenceLevel ?? 0.95;
  if (alternative !== 'two-sided' && alternative !== 'less' && alternative !== 'greater') {
    throw new RangeError(`alternative is ${String(alternative)}; expected "two-sided", "less" or "greater"`);
  }
  checkConfidenceLevel(confidenceLevel);
  return { alternative, confidenceLevel };
}

/** One group's values (already transformed, e.g. into ranks) with its per-value weight sums. */
export interface WeightedValues {
  readonly values: ArrayLike<number>;
  readonly weightSums: ArrayLike<number>;
  readonly weightSquareSums: ArrayLike<number>;
  readonly n: number;
  readonly totalWeight: number;
}

/** Weighted mean with one correction pass (sum of weighted residuals), accurate for large offsets. O(K). */
function accurateMean(g: WeightedValues): number {
  let sum = 0;
  for (let i = 0; i < g.values.length; i++) sum += g.weightSums[i] * g.values[i];
  let mean = sum / g.totalWeight;
  let correction = 0;
  for (let i = 0; i < g.values.length; i++) correction += g.weightSums[i] * (g.values[i] - mean);
  mean += correction / g.totalWeight;
  return mean;
}

/** Σ w² (y − ȳ)² / Ŵ² of one group: its share of the linearised variance before the n/(n−1) factor. O(K). */
function influenceSquares(g: WeightedValues, mean: number): number {
  let s = 0;
  for (let i = 0; i < g.values.length; i++) {
    const d = g.values[i] - mean;
    s += g.weightSquareSums[i] * d * d;
  }
  return s / (g.totalWeight * g.totalWeight);
}

export interface LinearisedDifference {
  meanA: number;
  meanB: number;
  difference: number;
  se: number;
  df: number;
}

/**
 * The difference of two weighted means with its linearised standard error and df = n − 2 (header above), or a
 * reason when undefined. Shared by the t test (values) and the rank test (values turned into ranks). O(K).
 */
export function linearisedDifference(a: WeightedValues, b: WeightedValues): LinearisedDifference | { reason: string } {
  if (a.n === 0 || b.n === 0) return { reason: 'Each condition needs at least one answer.' };
  const n = a.n + b.n;
  if (n < 3) return { reason: 'The design-based test needs at least three answers in all (df = n − 2).' };
  const meanA = accurateMean(a);
  const meanB = accurateMean(b);
  const variance = (n / (n - 1)) * (influenceSquares(a, meanA) + influenceSquares(b, meanB));
  const se = Math.sqrt(variance);
  if (!(se > 0)) return { reason: 'Every answer equals its condition’s weighted mean, so the standard error is 0 and t is undefined.' };
  return { meanA, meanB, difference: meanA - meanB, se, df: n - 2 };
}

/** Interval and p-value of an estimate with a t reference distribution. */
export function tInference(
  estimate: number,
  se: number,
  df: number,
  alternative: Alternative,
  confidenceLevel: number,
): { t: number; p: number; ci: Interval } {
  const t = estimate / se;
  const p = pValue(t, alternative, (x) => studentUpperTail(x, df));
  let ci: Interval;
  if (alternative === 'two-sided') {
    const q = studentQuantile(1 - (1 - confidenceLevel) / 2, df);
    ci = { level: confidenceLevel, lower: estimate - q * se, upper: estimate + q * se };
  } else {
    const q = studentQuantile(confidenceLevel, df);
    ci =
      alternative === 'greater'
        ? { level: confidenceLevel, lower: estimate - q * se, upper: null, reason: 'One-sided interval: unbounded above.' }
        : { level: confidenceLevel, lower: null, upper: estimate + q * se, reason: 'One-sided interval: unbounded below.' };
  }
  return { t, p, ci };
}

/** Design-based t test of the weighted mean difference a − b (R: svyttest on a weights-only design). O(K). */
export function weightedTTest(a: WeightedSample, b: WeightedSample, options: WeightedTestOptions = {}): TTestResult {
  const opts = resolveWeightedOptions(options);
  const d = linearisedDifference(a, b);
  if ('reason' in d) {
    const meanDifference = a.n > 0 && b.n > 0 ? accurateMean(a) - accurateMean(b) : null;
    return freezeDeep({
      t: null, df: null, p: null, meanDifference, se: null,
      ci: { level: opts.confidenceLevel, lower: null, upper: null, reason: d.reason },
      reason: d.reason,
    });
  }
  const inf = tInference(d.difference, d.se, d.df, opts.alternative, opts.confidenceLevel);
  return freezeDeep({ t: inf.t, df: d.df, p: inf.p, meanDifference: d.difference, se: d.se, ci: inf.ci });
}
