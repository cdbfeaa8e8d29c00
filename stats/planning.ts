/**
 * Sample-size planning and power for comparing two conditions on one item.
 *
 * What it computes: the smallest number of answers per condition, [n_a, n_b] with n_b = ⌈ratio · n_a⌉, at which
 * the planned test reaches the requested power against the expected effect, and the power achieved at those
 * whole numbers; or, with `power()`, the power for given sizes.
 * Hypotheses: H0 "no difference between a and b" against the alternative: "two-sided" (they differ),
 * "greater" (a tends to be larger: mean a − b > 0, P(A > B) > ½) or "less" (the opposite).
 *
 * Methods:
 *  - test "welch": power of the two-sample t-test from the noncentral t distribution, planning with one common
 *    SD (at the planning stage the two SDs are rarely known apart; with equal SDs and the planned sizes Welch's
 *    and Student's test have practically the same power). With d = difference / sd (Cohen's d, a − b):
 *      df = n_a + n_b − 2, ncp = d · √(n_a n_b / (n_a + n_b)), T ~ noncentral t(df, ncp)
 *      two-sided: power = P(T > t_{1−α/2, df}) + P(T < −t_{1−α/2, df})   (both tails, as pwr::pwr.t2n.test
 *                 and R's power.t.test(strict = TRUE))
 *      greater:   power = P(T > t_{1−α, df});   less: power = P(T < −t_{1−α, df})
 *    For ratio 1 this is R's power.t.test(n, delta, sd, sig.level, type = "two.sample", strict = TRUE), whose
 *    continuous solution n rounds up to ours; for other ratios pwr::pwr.t2n.test(n1 = n_a, n2 = n_b, d).
 *  - test "rank-sum": Noether's (1987) formula for the Wilcoxon–Mann–Whitney test in terms of
 *    p = P(A > B) (+ ½ P(A = B)), the probability of superiority:
 *      N = (z_{1−α/s} + z_{power})² / (12 c (1 − c) (p − ½)²),  c = n_a / N,  s = 2 for two-sided, 1 otherwise
 *    equivalently power = Φ(√(12 n_a n_b / N) · |p − ½| − z_{1−α/s}) (the far tail is ignored, as Noether does).
 *    p comes either directly (`probabilityOfSuperiority`, useful for ordinal items where a mean shift is not
 *    the natural effect) or from the normal shift model: p = Φ(d / √2). The reported effectSize is then d, or
 *    √2 · Φ⁻¹(p) when p was given.
 *  - The smallest n_a is found by bisection over whole numbers (power is non-decreasing in n_a), n_a ≥ 2.
 *
 * References:
 *   Cohen J (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed., ch. 2.
 *   Noether GE (1987). Sample size determination for some common nonparametric tests. JASA 82:645–647.
 *     doi:10.1080/01621459.1987.10478478
 *   Lenth RV (1989). Algorithm AS 243: cumulative distribution function of the non-central t distribution.
 *     Applied Statistics 38:185–189. doi:10.2307/2347693
 *   R Core Team, power.t.test (stats); Champely S, pwr: basic functions for power analysis (pwr.t2n.test).
 *
 * Cost: power O(1) noncentral-t evaluations (each O(iterations of AS 243), typically < 100);
 * sampleSize O(log n) power evaluations.
 */

import { noncentralTCdf, noncentralTUpperTail, normalCdf, normalQuantile, normalUpperTail, studentQuantile } from './distributions.js';
import { freezeDeep, type Alternative } from './types.js';

export type PlanningTest = 'welch' | 'rank-sum';

export interface EffectInput {
  test: PlanningTest;
  /** Expected mean a − b (with `sd`). */
  difference?: number | null;
  /** Expected common standard deviation (with `difference`). */
  sd?: number | null;
  /** Expected Cohen's d = (mean a − mean b) / sd, instead of difference and sd. */
  effectSize?: number | null;
  /** rank-sum only: expected P(A > B) + ½ P(A = B), instead of a mean shift. */
  probabilityOfSuperiority?: number | null;
  /** Significance level in (0, 1). */
  alpha: number;
  /** Default "two-sided". */
  alternative?: Alternative;
}

export interface SampleSizeInput extends EffectInput {
  /** Target power in (0, 1). */
  power: number;
  /** n_b / n_a, > 0; default 1. */
  ratio?: number;
}

export interface PowerInput extends EffectInput {
  /** [n_a, n_b], whole numbers ≥ 2. */
  perCondition: readonly [number, number] | readonly number[];
}

export interface SampleSizeResult {
  perCondition: [number, number] | null;
  total: number | null;
  achievedPower: number | null;
  method: string;
  /** Cohen's d used (for rank-sum given P(A > B): the normal-shift equivalent √2 Φ⁻¹(p)). */
  effectSize: number;
  /** P(A > B) used by the rank-sum plan; null for welch. */
  probabilityOfSuperiority: number | null;
  reason?: string;
}

export interface PowerResult {
  power: number;
  method: string;
  effectSize: number;
  probabilityOfSuperiority: number | null;
}

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];
const MAX_PER_CONDITION = 1e8;

interface ResolvedEffect {
  test: PlanningTest;
  d: number;
  pSup: number | null;
  alpha: number;
  alternative: Alternative;
}

function isGiven(x: number | null | undefined): x is number {
  return x !== undefined && x !== null;
}

function resolveEffect(input: EffectInput): ResolvedEffect {
  const { test } = input;
  if (test !== 'welch' && test !== 'rank-sum') throw new RangeError(`test is ${String(test)}; use "welch" or "rank-sum"`);
  const alpha = input.alpha;
  if (typeof alpha !== 'number' || !(alpha > 0 && alpha < 1)) throw new RangeError(`alpha is ${String(alpha)}; it must be strictly between 0 and 1`);
  const alternative = input.alternative ?? 'two-sided';
  if (!ALTERNATIVES.includes(alternative)) throw new RangeError(`alternative is ${String(alternative)}; use one of ${ALTERNATIVES.join(', ')}`);
  const hasShift = isGiven(input.difference) || isGiven(input.sd);
  const hasD = isGiven(input.effectSize);
  const hasP = isGiven(input.probabilityOfSuperiority);
  if (Number(hasShift) + Number(hasD) + Number(hasP) !== 1) {
    throw new RangeError('give exactly one of: difference and sd, effectSize, or (rank-sum only) probabilityOfSuperiority');
  }
  let d: number;
  let pSup: number | null = null;
  if (hasShift) {
    const diff = input.difference;
    const sd = input.sd;
    if (!isGiven(diff) || !Number.isFinite(diff)) throw new RangeError(`difference is ${String(diff)}; it must be a finite number when sd is given`);
    if (!isGiven(sd) || !Number.isFinite(sd) || !(sd > 0)) throw new RangeError(`sd is ${String(sd)}; it must be a finite number > 0`);
    d = diff / sd;
  } else if (hasD) {
    d = input.effectSize as number;
    if (!Number.isFinite(d)) throw new RangeError(`effectSize is ${String(d)}; it must be finite`);
  } else {
    if (test !== 'rank-sum') throw new RangeError('probabilityOfSuperiority is only used by the rank-sum plan');
    const p = input.probabilityOfSuperiority as number;
    if (!Number.isFinite(p) || !(p > 0 && p < 1)) throw new RangeError(`probabilityOfSuperiority is ${String(p)}; it must be strictly between 0 and 1`);
    pSup = p;
    d = Math.SQRT2 * normalQuantile(p);
  }
  if (test === 'rank-sum' && pSup === null) pSup = normalCdf(d / Math.SQRT2);
  if (!Number.isFinite(d) || Math.abs(d) > 1e6) throw new RangeError(`effect size ${d} is out of range`);
  return { test, d, pSup, alpha, alternative };
}

const METHOD_WELCH =
  'two-sample t-test power from the noncentral t distribution (equal SDs assumed for planning; both tails for two-sided)';
const METHOD_NOETHER = "Noether (1987) normal approximation for the Wilcoxon–Mann–Whitney test in terms of P(A > B)";

function powerResolved(e: ResolvedEffect, na: number, nb: number): number {
  if (e.test === 'welch') {
    const df = na + nb - 2;
    const ncp = e.d * Math.sqrt((na * nb) / (na + nb));
    if (e.alternative === 'two-sided') {
      const tc = -studentQuantile(e.alpha / 2, df); // upper α/2 quantile by symmetry, no 1 − p rounding
      return noncentralTUpperTail(tc, df, ncp) + noncentralTCdf(-tc, df, ncp);
    }
    const tc = -studentQuantile(e.alpha, df);
    return e.alternative === 'greater' ? noncentralTUpperTail(tc, df, ncp) : noncentralTCdf(-tc, df, ncp);
  }
  const p = e.pSup as number;
  const sides = e.alternative === 'two-sided' ? 2 : 1;
  const zc = -normalQuantile(e.alpha / sides);
  const shift = e.alternative === 'two-sided' ? Math.abs(p - 0.5) : e.alternative === 'greater' ? p - 0.5 : 0.5 - p;
  return normalCdf(Math.sqrt((12 * na * nb) / (na + nb)) * shift - zc);
}

function checkSizes(n: readonly number[]): [number, number] {
  if (!Array.isArray(n) || n.length !== 2) throw new RangeError('perCondition must be [n_a, n_b]');
  for (let i = 0; i < 2; i++) {
    if (!Number.isInteger(n[i]) || n[i] < 2 || n[i] > MAX_PER_CONDITION) {
      throw new RangeError(`perCondition[${i}] is ${String(n[i])}; it must be a whole number between 2 and ${MAX_PER_CONDITION}`);
    }
  }
  return [n[0], n[1]];
}

/** Power of the planned test at the given sizes per condition. O(1) distribution evaluations. */
export function power(input: PowerInput): PowerResult {
  const e = resolveEffect(input);
  const [na, nb] = checkSizes(input.perCondition);
  return freezeDeep({
    power: powerResolved(e, na, nb),
    method: e.test === 'welch' ? METHOD_WELCH : METHOD_NOETHER,
    effectSize: e.d,
    probabilityOfSuperiority: e.test === 'rank-sum' ? e.pSup : null,
  });
}

/**
 * Smallest per-condition sizes [n_a, ⌈ratio · n_a⌉] (n_a ≥ 2) whose power reaches `power`. When the effect
 * is zero, points the wrong way for a one-sided alternative, or needs more than 1e8 answers per condition,
 * the sizes are null with a reason. O(log n) power evaluations.
 */
export function sampleSize(input: SampleSizeInput): SampleSizeResult {
  const e = resolveEffect(input);
  const target = input.power;
  if (typeof target !== 'number' || !(target > 0 && target < 1)) throw new RangeError(`power is ${String(target)}; it must be strictly between 0 and 1`);
  const ratio = input.ratio ?? 1;
  if (typeof ratio !== 'number' || !Number.isFinite(ratio) || !(ratio > 0) || ratio > 1e4 || ratio < 1e-4) {
    throw new RangeError(`ratio is ${String(ratio)}; it must be a number between 1e-4 and 1e4 (n_b / n_a)`);
  }
  const method = e.test === 'welch' ? METHOD_WELCH : METHOD_NOETHER;
  const pSup = e.test === 'rank-sum' ? e.pSup : null;
  const fail = (reason: string): SampleSizeResult =>
    freezeDeep({ perCondition: null, total: null, achievedPower: null, method, effectSize: e.d, probabilityOfSuperiority: pSup, reason });

  const signedEffect = e.test === 'welch' ? e.d : (pSup as number) - 0.5;
  if (signedEffect === 0) return fail('The expected effect is zero: no sample size gives more power than the significance level.');
  if ((e.alternative === 'greater' && signedEffect < 0) || (e.alternative === 'less' && signedEffect > 0)) {
    return fail(`The expected effect points the other way from the one-sided alternative "${e.alternative}": power cannot exceed the significance level.`);
  }
  const nbOf = (na: number): number => Math.max(2, Math.ceil(ratio * na - 1e-9));
  const pw = (na: number): number => powerResolved(e, na, nbOf(na));
  let lo = 2;
  if (pw(lo) >= target) {
    return freezeDeep({ perCondition: [lo, nbOf(lo)], total: lo + nbOf(lo), achievedPower: pw(lo), method, effectSize: e.d, probabilityOfSuperiority: pSup });
  }
  let hi = 4;
  while (pw(hi) < target) {
    lo = hi;
    hi *= 2;
    if (hi > MAX_PER_CONDITION) {
      if (pw(MAX_PER_CONDITION) < target) return fail(`The expected effect is too small: more than ${MAX_PER_CONDITION} answers per condition would be needed.`);
      hi = MAX_PER_CONDITION;
      break;
    }
  }
  // Invariant: pw(lo) < target ≤ pw(hi)
  while (hi - lo > 1) {
    const mid = Math.floor((lo + hi) / 2);
    if (pw(mid) >= target) hi = mid;
    else lo = mid;
  }
  const nb = nbOf(hi);
  return freezeDeep({ perCondition: [hi, nb], total: hi + nb, achievedPower: pw(hi), method, effectSize: e.d, probabilityOfSuperiority: pSup });
}
