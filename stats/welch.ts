/**
 * welch.ts — two-sample t tests of a difference in means: Welch's unequal-variance test and Student's
 * pooled-variance test, with the confidence interval for the mean difference a − b.
 *
 * Hypotheses: H0: μ_a − μ_b = 0 against
 *   "two-sided": μ_a ≠ μ_b;  "greater": μ_a > μ_b;  "less": μ_a < μ_b.
 *
 * Method (as R's t.test(a, b, var.equal = FALSE / TRUE))
 *   Welch (1947): se = √(s_a²/n_a + s_b²/n_b); t = (x̄_a − x̄_b)/se;
 *     df = se⁴ / [ (s_a²/n_a)²/(n_a − 1) + (s_b²/n_b)²/(n_b − 1) ]   (Welch–Satterthwaite).
 *   Student (1908): s_p² = [(n_a − 1)s_a² + (n_b − 1)s_b²]/(n_a + n_b − 2); se = s_p √(1/n_a + 1/n_b);
 *     df = n_a + n_b − 2 (a group of one contributes no variance term, as in R).
 *   p-value from Student's t with df (distributions.ts: incomplete beta, tails computed directly).
 *   Confidence interval at level L: two-sided (x̄_a − x̄_b) ± t_{1−(1−L)/2, df}·se; "greater" gives
 *   [diff − t_{L,df}·se, +∞) and "less" (−∞, diff + t_{L,df}·se]; the infinite bound is null with a reason.
 *   Welch, B. L. (1947). The generalization of 'Student's' problem when several different population
 *   variances are involved. Biometrika 34, 28–35. doi:10.1093/biomet/34.1-2.28.
 *   Satterthwaite, F. E. (1946). Biometrics Bulletin 2, 110–114. doi:10.2307/3002019.
 *   Student (1908). The probable error of a mean. Biometrika 6, 1–25. doi:10.1093/biomet/6.1.1.
 *
 * Undefined cases (null with a reason, never an exception): a group with fewer than two observations
 * (Welch; Student needs n_a, n_b ≥ 1 and n_a + n_b ≥ 3); both groups with zero variance (se = 0, so t is
 * undefined — R stops there with "data are essentially constant"). One constant group is fine for Welch when
 * the other varies (df = n − 1 of the varying group). Note: R also stops when se < 10·ε·max(|x̄_a|, |x̄_b|);
 * this module computes the variance accurately (descriptives.ts) and reports t whenever se > 0.
 *
 * Scale: data whose largest magnitude lies outside [2^-200, 2^200] (e.g. values near 1e-300 or 1e300) are
 * multiplied by an exact power of two before the variances are formed, and the difference, se and interval
 * are scaled back; t, df and p are unchanged by such scaling.
 *
 * Cost: O(K_a + K_b) for the moments (none when welchTest / studentTest receive them precomputed, as from
 * compareSamples); O(1) from moments (welchFromMoments / studentFromMoments), which lets a caller recompute
 * the test after removing one observation (leave-one-out) without touching the data.
 */

import type { Alternative, Interval, TTestResult } from './types.js';
import { freezeDeep } from './types.js';
import type { Sample } from './sample.js';
import { scaledMoments, timesPowerOfTwo, type Moments, type ScaledMoments } from './descriptives.js';
import { checkConfidenceLevel, pValue, studentQuantile, studentUpperTail } from './distributions.js';

export interface TTestOptions {
  alternative: Alternative;
  /** confidence level of the interval, 0 < level < 1 */
  confidenceLevel: number;
}

function checkOptions(opts: TTestOptions): void {
  checkConfidenceLevel(opts.confidenceLevel);
  if (opts.alternative !== 'two-sided' && opts.alternative !== 'less' && opts.alternative !== 'greater') {
    throw new RangeError(`alternative is ${String(opts.alternative)}; expected "two-sided", "less" or "greater"`);
  }
}

function checkMoments(m: Moments, name: string): void {
  if (!(m.n >= 0) || !Number.isInteger(m.n)) throw new RangeError(`${name}.n is ${m.n}; a whole number ≥ 0 is required`);
  if (m.n >= 1 && (m.mean === null || !Number.isFinite(m.mean))) throw new RangeError(`${name}.mean is ${m.mean}; a finite mean is required when n ≥ 1`);
  if (m.n >= 2 && (m.variance === null || Number.isNaN(m.variance) || m.variance < 0)) {
    throw new RangeError(`${name}.variance is ${m.variance}; a variance ≥ 0 is required when n ≥ 2`);
  }
}

/** Check the options and both groups' moments; the level and the mean difference a − b (null if a group is empty). */
function checkInputs(ma: Moments, mb: Moments, opts: TTestOptions): { level: number; difference: number | null } {
  checkOptions(opts);
  checkMoments(ma, 'a');
  checkMoments(mb, 'b');
  const difference = ma.n >= 1 && mb.n >= 1 ? (ma.mean as number) - (mb.mean as number) : null;
  return { level: opts.confidenceLevel, difference };
}

const OVERFLOW = 'The variances exceed the double-precision range, so the test is not computed from these moments.';

function undefinedResult(level: number, meanDifference: number | null, reason: string): TTestResult {
  return freezeDeep({
    t: null,
    df: null,
    p: null,
    meanDifference,
    se: null,
    ci: { level, lower: null, upper: null, reason: 'No interval: the test is undefined for these data.' },
    reason,
  });
}

/** Complete a t test from its difference, standard error and degrees of freedom (se > 0, df > 0). */
function tTestResult(difference: number, se: number, df: number, opts: TTestOptions): TTestResult {
  const t = difference / se;
  const p = pValue(t, opts.alternative, (x) => studentUpperTail(x, df));
  const level = opts.confidenceLevel;
  let ci: Interval;
  if (opts.alternative === 'two-sided') {
    const q = studentQuantile(1 - (1 - level) / 2, df);
    ci = { level, lower: difference - q * se, upper: difference + q * se };
  } else if (opts.alternative === 'greater') {
    const q = studentQuantile(level, df);
    ci = { level, lower: difference - q * se, upper: null, reason: 'One-sided interval for the alternative "greater": unbounded above.' };
  } else {
    const q = studentQuantile(level, df);
    ci = { level, lower: null, upper: difference + q * se, reason: 'One-sided interval for the alternative "less": unbounded below.' };
  }
  if ((ci.lower !== null && !Number.isFinite(ci.lower)) || (ci.upper !== null && !Number.isFinite(ci.upper))) {
    ci = { level, lower: null, upper: null, reason: 'The t quantile is beyond the range of double precision for these degrees of freedom.' };
  }
  return freezeDeep({ t, df, p, meanDifference: difference, se, ci });
}

/**
 * Welch's t test from the two groups' {n, mean, variance} (variance with n − 1; null when n < 2). O(1).
 * For leave-one-out recomputation by the quality flags.
 */
export function welchFromMoments(ma: Moments, mb: Moments, opts: TTestOptions): TTestResult {
  const { level, difference } = checkInputs(ma, mb, opts);
  const parts = welchParts(ma, mb);
  if ('reason' in parts) return undefinedResult(level, difference, parts.reason);
  return tTestResult(parts.difference, parts.se, parts.df, opts);
}

/**
 * Welch's mean difference, standard error and degrees of freedom from the two groups' moments, or why they are
 * undefined: the one rule behind welchFromMoments, and behind welchT for callers that rank many leave-one-out
 * variants by t alone (no p-value, no quantile). Inputs are not checked here (welchFromMoments checks them). O(1).
 */
function welchParts(ma: Moments, mb: Moments): { difference: number; se: number; df: number } | { reason: string } {
  if (ma.n < 2 || mb.n < 2) return { reason: "Welch's test needs at least two observations in each group (a sample variance for each)." };
  const va = (ma.variance as number) / ma.n;
  const vb = (mb.variance as number) / mb.n;
  const se2 = va + vb;
  if (se2 === Infinity) return { reason: OVERFLOW };
  if (!(se2 > 0)) {
    return { reason: 'Both groups have zero variance, so the standard error is 0 and t is undefined (R stops with "data are essentially constant").' };
  }
  const se = Math.sqrt(se2);
  // df = se⁴ / (va²/(na−1) + vb²/(nb−1)), written as a ratio of squares of ratios to avoid over/underflow.
  const ra = va / se2;
  const rb = vb / se2;
  const df = 1 / ((ra * ra) / (ma.n - 1) + (rb * rb) / (mb.n - 1));
  return { difference: (ma.mean as number) - (mb.mean as number), se, df };
}

/** Welch's t from moments — exactly welchFromMoments(…).t (the same operations), without its p-value and interval. O(1). */
export function welchT(ma: Moments, mb: Moments): number | null {
  const parts = welchParts(ma, mb);
  return 'reason' in parts ? null : parts.difference / parts.se;
}

/**
 * Student's pooled-variance t test from {n, mean, variance} of the two groups. O(1).
 * A group with n = 1 contributes no variance term (as R's t.test(var.equal = TRUE)).
 */
export function studentFromMoments(ma: Moments, mb: Moments, opts: TTestOptions): TTestResult {
  const { level, difference } = checkInputs(ma, mb, opts);
  if (ma.n < 1 || mb.n < 1 || ma.n + mb.n < 3) {
    return undefinedResult(level, difference, "Student's pooled t test needs at least one observation in each group and three in all.");
  }
  const df = ma.n + mb.n - 2;
  let pooled = 0;
  if (ma.n > 1) pooled += (ma.n - 1) * (ma.variance as number);
  if (mb.n > 1) pooled += (mb.n - 1) * (mb.variance as number);
  pooled /= df;
  const se = Math.sqrt(pooled * (1 / ma.n + 1 / mb.n));
  if (se === Infinity) return undefinedResult(level, difference, OVERFLOW);
  if (!(se > 0)) {
    return undefinedResult(
      level,
      difference,
      'The pooled variance is zero (every group constant), so t is undefined (R stops with "data are essentially constant").',
    );
  }
  return tTestResult(difference as number, se, df, opts);
}

/** Undo a power-of-two rescaling on the quantities that carry units (difference, se, interval). */
function unscale(r: TTestResult, k: number): TTestResult {
  if (k === 0) return r;
  const back = (v: number | null) => (v === null ? null : timesPowerOfTwo(v, -k));
  const ci = { ...r.ci, lower: back(r.ci.lower), upper: back(r.ci.upper) };
  return freezeDeep({ ...r, meanDifference: back(r.meanDifference), se: back(r.se), ci });
}

function runScaled(a: Sample, b: Sample, opts: TTestOptions, test: typeof welchFromMoments, known?: ScaledMoments): TTestResult {
  // Data near 1e-300 or 1e300 are rescaled by an exact power of two so that variances neither underflow
  // nor overflow; t, df and p are scale-free and the units are restored afterwards.
  const m = known ?? scaledMoments(a, b);
  return unscale(test(m.a, m.b, opts), m.exponent);
}

/**
 * Welch's unequal-variance t test of a − b. O(K_a + K_b); O(1) when `known` (scaledMoments(a, b) of
 * these very Samples, as compareSamples shares it) is given.
 */
export function welchTest(a: Sample, b: Sample, opts: TTestOptions, known?: ScaledMoments): TTestResult {
  return runScaled(a, b, opts, welchFromMoments, known);
}

/** Student's pooled-variance t test of a − b. O(K_a + K_b); O(1) with `known` as for welchTest. */
export function studentTest(a: Sample, b: Sample, opts: TTestOptions, known?: ScaledMoments): TTestResult {
  return runScaled(a, b, opts, studentFromMoments, known);
}
