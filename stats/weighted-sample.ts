/**
 * WeightedSample — the representation of one condition's answers with survey weights, and the weighted
 * descriptive statistics that are functions of it.
 *
 * What it is: the distinct answer values in strictly increasing order and, per value, the number of answers
 * (`counts`), the sum of their weights (`weightSums`, Σw) and the sum of their squared weights
 * (`weightSquareSums`, Σw²). That is what storage keeps per value of a bounded integer item (per condition and
 * excluded flag), so every weighted statistic in `stats/` costs O(distinct values) whatever the number of
 * answers. A continuous item gives one entry per distinct answer.
 *
 * A weight is a sampling (inverse-probability) weight of a weights-only, single-stage, with-replacement design
 * — R's svydesign(id = ~1, weights = ~w) — not a frequency weight: the sample size stays the number of answers n,
 * not Σw (treating Σw as the sample size gives wrong standard errors).
 *
 * Constructors:
 *   weightedFromPairs(values, weights)                         raw (value, weight) pairs, any order   O(n log n)
 *   weightedFromSums(values, counts, weightSums, weightSquareSums, { name?, maxWeights? })
 *                                                              per-value sums, values increasing      O(K)
 *   weightedFromIntegerSums(counts, weightSums, weightSquareSums, min)
 *                                                              bounded integer item: entry k is the value min + k
 *                                                              (entries with count 0 are dropped)     O(K)
 * Bad input (NaN, ±Infinity, a weight ≤ 0, a negative or fractional count, sums that no set of positive weights
 * can have) throws a RangeError naming the index. Inputs are never mutated.
 *
 * Descriptives (weightedDescribe), each the estimate of the population quantity under the design:
 *   mean      ȳ_w = Σ w y / Σ w                                                  (R: svymean)
 *   sd        √( n/(n − 1) · Σ w (y − ȳ_w)² / Σ w )                              (R: sqrt(svyvar)), n ≥ 2
 *   quantile  the lower inverse of the weighted CDF ("math" rule): the smallest value y with F̂(y) ≥ p, where
 *             F̂(y) = Σ w·1(y_i ≤ y) / Σ w                                         (R: svyquantile(qrule = "math"),
             which agrees except for p below F̂ of the smallest value, where survey 4.1.1 returns the second
             smallest observation and this rule, by definition, the smallest)
 *   Kish's effective sample size  n_eff = (Σ w)² / Σ w²           Kish (1965) Survey Sampling, Wiley, §11.7
 *   design effect of unequal weighting  1 + CV² = n Σ w² / (Σ w)² = n / n_eff  (CV with divisor n)   — Kish (1965)
 *   largest weight: exact from raw pairs; from per-value sums the largest of Σw²/Σw over values, a lower bound
 *             (Σw² ≤ w_max Σw), exact when the answers sharing a value share their weight (`maxWeightExact`).
 *
 * Cost: O(K) for K distinct values once the sample is built.
 */
import type { Sample } from './sample.js';
import { freezeDeep } from './types.js';

export interface WeightedSample {
  /** Distinct values, strictly increasing. */
  readonly values: Float64Array;
  /** counts[i] = number of answers equal to values[i]; positive whole numbers. */
  readonly counts: Float64Array;
  /** weightSums[i] = Σ w over the answers equal to values[i]; > 0. */
  readonly weightSums: Float64Array;
  /** weightSquareSums[i] = Σ w² over the answers equal to values[i]; > 0. */
  readonly weightSquareSums: Float64Array;
  /** Number of answers (Σ counts). */
  readonly n: number;
  /** Σ w over all answers (the estimated population size). */
  readonly totalWeight: number;
  /** Σ w² over all answers. */
  readonly totalWeightSquared: number;
  /** The largest single weight (a lower bound when maxWeightExact is false); null for an empty sample. */
  readonly maxWeight: number | null;
  readonly maxWeightExact: boolean;
}

function checkFinite(x: number, index: number, name: string): void {
  if (typeof x !== 'number' || !Number.isFinite(x)) {
    throw new RangeError(`${name}[${index}] is ${String(x)}; every value must be a finite number`);
  }
}

function build(
  values: Float64Array,
  counts: Float64Array,
  weightSums: Float64Array,
  weightSquareSums: Float64Array,
  maxWeight: number | null,
  maxWeightExact: boolean,
): WeightedSample {
  let n = 0;
  let totalWeight = 0;
  let totalWeightSquared = 0;
  for (let i = 0; i < values.length; i++) {
    n += counts[i];
    totalWeight += weightSums[i];
    totalWeightSquared += weightSquareSums[i];
  }
  return Object.freeze({ values, counts, weightSums, weightSquareSums, n, totalWeight, totalWeightSquared, maxWeight, maxWeightExact });
}

/** Build a WeightedSample from raw answers and their weights (any order). O(n log n). */
export function weightedFromPairs(values: ArrayLike<number>, weights: ArrayLike<number>, name = 'values'): WeightedSample {
  const n = values.length;
  if (weights.length !== n) throw new RangeError(`${name}: ${n} values but ${weights.length} weights`);
  const order = new Array<number>(n);
  for (let i = 0; i < n; i++) {
    checkFinite(values[i], i, name);
    checkFinite(weights[i], i, `${name}.weights`);
    if (!(weights[i] > 0)) throw new RangeError(`${name}.weights[${i}] is ${weights[i]}; every weight must be > 0`);
    order[i] = i;
  }
  order.sort((i, j) => values[i] - values[j]);
  let distinct = 0;
  for (let k = 0; k < n; k++) if (k === 0 || values[order[k]] !== values[order[k - 1]]) distinct++;
  const v = new Float64Array(distinct);
  const c = new Float64Array(distinct);
  const s1 = new Float64Array(distinct);
  const s2 = new Float64Array(distinct);
  let j = -1;
  let maxWeight: number | null = null;
  for (let k = 0; k < n; k++) {
    const x = values[order[k]];
    const w = weights[order[k]];
    if (k === 0 || x !== values[order[k - 1]]) {
      j++;
      v[j] = x === 0 ? 0 : x;
    }
    c[j] += 1;
    s1[j] += w;
    s2[j] += w * w;
    if (maxWeight === null || w > maxWeight) maxWeight = w;
  }
  return build(v, c, s1, s2, maxWeight, true);
}

/** Relative slack allowed in the Cauchy–Schwarz checks on stored sums (they are accumulated in floating point). */
const SUM_CHECK_SLACK = 1e-9;

/**
 * Build a WeightedSample from per-value sums: values strictly increasing; counts whole numbers > 0; weightSums
 * and weightSquareSums > 0 and consistent with `counts` positive weights ((Σw)²/count ≤ Σw² ≤ (Σw)², allowing
 * a relative 1e-9 for rounding in stored sums). `maxWeights`, when given, holds the largest single weight per
 * value (then `maxWeight` is exact). O(K).
 */
export function weightedFromSums(
  values: ArrayLike<number>,
  counts: ArrayLike<number>,
  weightSums: ArrayLike<number>,
  weightSquareSums: ArrayLike<number>,
  options: { name?: string; maxWeights?: ArrayLike<number> } = {},
): WeightedSample {
  const name = options.name ?? 'values';
  const K = values.length;
  if (counts.length !== K || weightSums.length !== K || weightSquareSums.length !== K) {
    throw new RangeError(`${name}: values, counts, weightSums and weightSquareSums must have the same length`);
  }
  const maxWeights = options.maxWeights;
  if (maxWeights !== undefined && maxWeights.length !== K) throw new RangeError(`${name}: maxWeights must have one entry per value`);
  const v = new Float64Array(K);
  const c = new Float64Array(K);
  const s1 = new Float64Array(K);
  const s2 = new Float64Array(K);
  let maxWeight: number | null = null;
  for (let i = 0; i < K; i++) {
    checkFinite(values[i], i, name);
    checkFinite(counts[i], i, `${name}.counts`);
    checkFinite(weightSums[i], i, `${name}.weightSums`);
    checkFinite(weightSquareSums[i], i, `${name}.weightSquareSums`);
    if (i > 0 && !(values[i] > values[i - 1])) {
      throw new RangeError(`${name}[${i}] is not greater than ${name}[${i - 1}]; distinct increasing values were expected`);
    }
    if (!(counts[i] > 0) || !Number.isInteger(counts[i])) throw new RangeError(`${name}.counts[${i}] is ${counts[i]}; counts must be whole numbers > 0`);
    if (!(weightSums[i] > 0)) throw new RangeError(`${name}.weightSums[${i}] is ${weightSums[i]}; a sum of positive weights must be > 0`);
    if (!(weightSquareSums[i] > 0)) throw new RangeError(`${name}.weightSquareSums[${i}] is ${weightSquareSums[i]}; a sum of squared positive weights must be > 0`);
    const s = weightSums[i];
    const q = weightSquareSums[i];
    if (q < ((s * s) / counts[i]) * (1 - SUM_CHECK_SLACK) || q > s * s * (1 + SUM_CHECK_SLACK)) {
      throw new RangeError(
        `${name}.weightSquareSums[${i}] is ${q}; with ${counts[i]} positive weights summing to ${s} it must lie between ${(s * s) / counts[i]} and ${s * s}`,
      );
    }
    v[i] = values[i] === 0 ? 0 : values[i];
    c[i] = counts[i];
    s1[i] = s;
    s2[i] = q;
    let m: number;
    if (maxWeights !== undefined) {
      checkFinite(maxWeights[i], i, `${name}.maxWeights`);
      m = maxWeights[i];
      if (!(m > 0) || m > s * (1 + SUM_CHECK_SLACK) || m < (s / counts[i]) * (1 - SUM_CHECK_SLACK)) {
        throw new RangeError(`${name}.maxWeights[${i}] is ${m}; it must lie between the mean weight ${s / counts[i]} and the sum ${s}`);
      }
    } else {
      m = counts[i] === 1 ? s : q / s;
    }
    if (maxWeight === null || m > maxWeight) maxWeight = m;
  }
  // Without maxWeights the bound Σw²/Σw is exact only where every value's answers share one weight, which the
  // sums reveal when Σw² = (Σw)²/count; the test below is exact-arithmetic equality up to rounding.
  let exact = maxWeights !== undefined;
  if (!exact) {
    exact = true;
    for (let i = 0; i < K; i++) {
      const equalWeights = Math.abs(s2[i] - (s1[i] * s1[i]) / c[i]) <= SUM_CHECK_SLACK * s2[i];
      if (!equalWeights) {
        exact = false;
        break;
      }
    }
  }
  return build(v, c, s1, s2, maxWeight, exact);
}

/**
 * Build a WeightedSample of a bounded integer item from per-value arrays indexed by offset: entry k describes
 * the value min + k; entries with count 0 must have zero sums and are dropped. O(K).
 */
export function weightedFromIntegerSums(
  counts: ArrayLike<number>,
  weightSums: ArrayLike<number>,
  weightSquareSums: ArrayLike<number>,
  min = 0,
  name = 'counts',
): WeightedSample {
  checkFinite(min, 0, 'min');
  if (weightSums.length !== counts.length || weightSquareSums.length !== counts.length) {
    throw new RangeError(`${name}: counts, weightSums and weightSquareSums must have the same length`);
  }
  const keep: number[] = [];
  for (let k = 0; k < counts.length; k++) {
    checkFinite(counts[k], k, name);
    if (counts[k] < 0 || !Number.isInteger(counts[k])) throw new RangeError(`${name}[${k}] is ${counts[k]}; counts must be whole numbers ≥ 0`);
    if (counts[k] === 0) {
      if (weightSums[k] !== 0 || weightSquareSums[k] !== 0) {
        throw new RangeError(`${name}[${k}] is 0 but its weight sums are ${weightSums[k]} and ${weightSquareSums[k]}; both must be 0`);
      }
    } else keep.push(k);
  }
  return weightedFromSums(
    keep.map((k) => min + k),
    keep.map((k) => counts[k]),
    keep.map((k) => weightSums[k]),
    keep.map((k) => weightSquareSums[k]),
    { name },
  );
}

/** The unweighted Sample (distinct values and counts) of a WeightedSample, for the unweighted tests. O(K). */
export function unweighted(s: WeightedSample): Sample {
  return Object.freeze({ values: s.values, counts: s.counts, n: s.n });
}

/** Σ w y / Σ w, or null for an empty sample. O(K). */
export function weightedMean(s: WeightedSample): number | null {
  if (s.n === 0) return null;
  let sum = 0;
  for (let i = 0; i < s.values.length; i++) sum += s.weightSums[i] * s.values[i];
  const mean = sum / s.totalWeight;
  // Guard the rounding of a constant sample and keep the mean inside the data's range.
  return Math.min(Math.max(mean, s.values[0]), s.values[s.values.length - 1]);
}

/**
 * The lower inverse of the weighted CDF ("math" rule): the smallest value y with Σ_{y_i ≤ y} w ≥ p·Σ w.
 * p in [0, 1]; null for an empty sample. O(K).
 */
export function weightedQuantile(s: WeightedSample, p: number): number | null {
  if (!(p >= 0 && p <= 1)) throw new RangeError(`p is ${String(p)}; a probability in [0, 1] is required`);
  if (s.n === 0) return null;
  const target = p * s.totalWeight;
  let cum = 0;
  for (let i = 0; i < s.values.length; i++) {
    cum += s.weightSums[i];
    if (cum >= target) return s.values[i];
  }
  return s.values[s.values.length - 1];
}

export interface WeightedGroupSummary {
  /** Number of answers. */
  n: number;
  /** Σ w. */
  totalWeight: number;
  mean: number | null;
  /** √ of the design-based variance estimate n/(n−1) · Σ w (y − ȳ)² / Σ w (as R's svyvar). */
  sd: number | null;
  /** Quartiles by the lower inverse of the weighted CDF ("math" rule, as R's svyquantile(qrule = "math")). */
  q1: number | null;
  median: number | null;
  q3: number | null;
  min: number | null;
  max: number | null;
  /** Kish's effective sample size (Σ w)² / Σ w². */
  effectiveN: number | null;
  /** Kish's design effect of unequal weighting 1 + CV² = n Σ w² / (Σ w)² = n / effectiveN. */
  designEffect: number | null;
  /** Largest single weight and its share of Σ w (a lower bound when maxWeightExact is false). */
  maxWeight: number | null;
  maxWeightShare: number | null;
  maxWeightExact: boolean;
  reason?: string;
}

/** Weighted summary of one group. O(K). */
export function weightedDescribe(s: WeightedSample): WeightedGroupSummary {
  if (s.n === 0) {
    return freezeDeep({
      n: 0, totalWeight: 0, mean: null, sd: null, q1: null, median: null, q3: null, min: null, max: null,
      effectiveN: null, designEffect: null, maxWeight: null, maxWeightShare: null, maxWeightExact: s.maxWeightExact,
      reason: 'No answers in this group.',
    });
  }
  const mean = weightedMean(s) as number;
  let sd: number | null = null;
  let reason: string | undefined;
  if (s.n >= 2) {
    let ss = 0;
    for (let i = 0; i < s.values.length; i++) {
      const d = s.values[i] - mean;
      ss += s.weightSums[i] * d * d;
    }
    sd = Math.sqrt(((s.n / (s.n - 1)) * ss) / s.totalWeight);
  } else reason = 'The standard deviation needs at least two answers.';
  const summary: WeightedGroupSummary = {
    n: s.n,
    totalWeight: s.totalWeight,
    mean,
    sd,
    q1: weightedQuantile(s, 0.25),
    median: weightedQuantile(s, 0.5),
    q3: weightedQuantile(s, 0.75),
    min: s.values[0],
    max: s.values[s.values.length - 1],
    effectiveN: (s.totalWeight * s.totalWeight) / s.totalWeightSquared,
    designEffect: (s.n * s.totalWeightSquared) / (s.totalWeight * s.totalWeight),
    maxWeight: s.maxWeight,
    maxWeightShare: s.maxWeight === null ? null : s.maxWeight / s.totalWeight,
    maxWeightExact: s.maxWeightExact,
  };
  if (reason !== undefined) summary.reason = reason;
  return freezeDeep(summary);
}
