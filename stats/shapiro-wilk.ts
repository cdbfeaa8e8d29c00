/**
 * Shapiro–Wilk test of normality for one group, with Royston's approximations of the coefficients and
 * of the null distribution of W.
 *
 * What it computes: the statistic W (0 < W ≤ 1; values near 1 are what a normal sample gives) and the
 * p-value P(W' ≤ W) under normality.
 *   H0: the observations are a sample from some normal distribution (any mean, any variance).
 *   H1: they are not. The test is one-sided by construction: departures from normality lower W, so the
 *       p-value is the lower tail of W (the upper tail of the normalised z below).
 *
 * Method. x_(1) ≤ … ≤ x_(n) are the ordered observations, 3 ≤ n ≤ 5000.
 *
 *  1. Expected normal order statistics (Royston 1992, the approximation of m by Blom-type scores):
 *       m_i = Φ⁻¹((i − 3/8) / (n + 1/4)),   m'm = Σ m_i².
 *     Only the upper half is computed (m_{n+1−i} = −m_i; the middle score of an odd n is 0).
 *
 *  2. Coefficients (Royston 1992, polynomial approximations in u = 1/√n; Royston 1995 for the
 *     split at n = 5):
 *       c_i = m_i / √(m'm)
 *       a_n     = c_n     + 0.221157 u − 0.147981 u² − 2.071190 u³ + 4.434685 u⁴ − 2.706056 u⁵
 *       a_{n−1} = c_{n−1} + 0.042981 u − 0.293762 u² − 1.752461 u³ + 5.682633 u⁴ − 3.582633 u⁵
 *     n ≥ 6: both end coefficients come from the polynomials, and the others are normalised by
 *       φ = (m'm − 2m_n² − 2m_{n−1}²) / (1 − 2a_n² − 2a_{n−1}²),   a_i = m_i / √φ   (3 ≤ i ≤ n − 2)
 *     n = 4, 5: only a_n comes from its polynomial, and
 *       ε = (m'm − 2m_n²) / (1 − 2a_n²),   a_i = m_i / √ε   (2 ≤ i ≤ n − 1)
 *     n = 3: a = (−√½, 0, √½) exactly (Shapiro & Wilk 1965; Royston 1995).
 *     The lower half is a_{n+1−i} = −a_i, so Σ a_i = 0 and Σ a_i² = 1 (by the choice of φ or ε).
 *
 *  3. The statistic (Shapiro & Wilk 1965; Royston 1992): W is the squared correlation between the
 *     coefficients and the ordered data,
 *       W = (Σ a_i x_(i))² / (Σ a_i² · Σ (x_i − x̄)²),
 *     computed here as b = Σ_{i ≤ n/2} a_{n+1−i} (x_(n+1−i) − x_(i)) over the upper-half coefficients and
 *     the centred sum of squares (dividing by the computed Σ a_i² removes the rounding of the
 *     normalisation).
 *
 *  4. p-value (Royston 1992 for 4 ≤ n ≤ 11 and n ≥ 12; Royston 1995 for n = 3 and for the range up to
 *     n = 5000):
 *     n = 3, the exact null distribution (Shapiro & Wilk 1965; Royston 1995):
 *       p = (6/π) (arcsin √W − arcsin √(3/4)),   3/4 ≤ W ≤ 1.
 *     4 ≤ n ≤ 11, a normalising transformation of 1 − W with a shift γ and polynomial μ, σ in n:
 *       γ = −2.273 + 0.459 n
 *       μ = 0.5440 − 0.39978 n + 0.025054 n² − 0.0006714 n³
 *       σ = exp(1.3822 − 0.77857 n + 0.062767 n² − 0.0020322 n³)
 *       z = (−ln(γ − ln(1 − W)) − μ) / σ
 *     n ≥ 12, ln(1 − W) is approximately normal with polynomial μ, σ in ln n:
 *       μ = −1.5861 − 0.31082 ln n − 0.083751 (ln n)² + 0.0038915 (ln n)³
 *       σ = exp(−0.4803 − 0.082676 ln n + 0.0030302 (ln n)²)
 *       z = (ln(1 − W) − μ) / σ
 *     and p = P(Z > z) for a standard normal Z (the upper tail through erfc, never 1 − Φ).
 *   The numerical constants above are the published ones, written here from memory of the papers and
 *   confirmed by the agreement with R's shapiro.test in tests/fixtures/r-shapiro.json (W to 1e-12,
 *   p to 1e-9 relative). Equation numbers are not quoted because the printed pages were not at hand;
 *   each step names the paper and the quantity it defines instead.
 *
 * The project's own choices (not defined by the papers):
 *   - Arithmetic: the data are multiplied by a power of two near 2/range (exact), centred at their mean
 *     (with a second pass for the mean's rounding), and every sum is compensated (Neumaier), so data of
 *     any magnitude or offset (1e-12, 1e12, 1e300) give W within about one rounding of the exact W for
 *     the coefficients; the papers work in exact arithmetic. W is capped at 1. (R's shapiro.test is not
 *     location invariant in floating point: shifting the data moves its W by up to 6e-7 relative on data
 *     near 1e12 with a spread of 10, the magnitude-1e12 case of tests/fixtures/r-reference.json.)
 *   - n = 3: W cannot lie below 3/4 (the value when two observations tie at one end). A computed W
 *     within 16 ulps of 3/4 is rounding of that value, and its p-value is 0 (the exact distribution
 *     puts no mass below 3/4). W = 1 gives p = 1 for every n.
 *   - 4 ≤ n ≤ 11: if γ − ln(1 − W) ≤ 0 the transformation is undefined; z → +∞ as W decreases towards
 *     that point, so p = 0 there. (This needs W < 0.36 at n = 4 and cannot happen for n ≥ 5; the smallest
 *     attainable W at n = 4 is about 0.63, so in practice it does not occur.)
 *   - p is clamped to [0, 1].
 *
 * Undefined (result null with a reason, never an exception): n < 3, n > 5000 (the range of Royston's
 * approximations), and constant data (W = 0/0).
 *
 * References (DOIs from memory):
 *   Shapiro, S. S., Wilk, M. B. (1965). An analysis of variance test for normality (complete samples).
 *     Biometrika 52(3–4), 591–611. doi:10.1093/biomet/52.3-4.591
 *   Royston, P. (1992). Approximating the Shapiro–Wilk W-test for non-normality. Statistics and
 *     Computing 2(3), 117–119. doi:10.1007/BF01891203
 *   Royston, P. (1995). Remark AS R94: A remark on algorithm AS 181: the W-test for normality.
 *     Journal of the Royal Statistical Society, Series C (Applied Statistics) 44(4), 547–551.
 *     doi:10.2307/2986146
 *   Blom, G. (1958). Statistical Estimates and Transformed Beta-Variables. Wiley (the scores in step 1).
 *
 * Cost: O(n) time and memory for the expanded order statistics and the ⌊n/2⌋ coefficients
 * (n ≤ 5000; the size check is O(1) on a Sample of counts, which is never expanded beyond 5000).
 */

import { timesPowerOfTwo } from './descriptives.js';
import { normalQuantile, normalUpperTail } from './distributions.js';
import { expand, type Sample } from './sample.js';
import type { ShapiroWilk } from './types.js';

/** Smallest n for which W is defined. */
export const SHAPIRO_WILK_MIN_N = 3;
/** Largest n covered by Royston's approximations. */
export const SHAPIRO_WILK_MAX_N = 5000;

/** Royston (1992): a_n − c_n as a polynomial in u = 1/√n, coefficients of u¹ … u⁵. */
const LAST_COEFFICIENT_CORRECTION = [0.221157, -0.147981, -2.07119, 4.434685, -2.706056] as const;
/** Royston (1992): a_{n−1} − c_{n−1} as a polynomial in u = 1/√n, coefficients of u¹ … u⁵. */
const SECOND_LAST_COEFFICIENT_CORRECTION = [0.042981, -0.293762, -1.752461, 5.682633, -3.582633] as const;

/** Royston (1992), 4 ≤ n ≤ 11: γ, μ and ln σ as polynomials in n (constant term first). */
const SMALL_N_GAMMA = [-2.273, 0.459] as const;
const SMALL_N_MEAN = [0.544, -0.39978, 0.025054, -0.0006714] as const;
const SMALL_N_LOG_SD = [1.3822, -0.77857, 0.062767, -0.0020322] as const;
/** Royston (1992), n ≥ 12: μ and ln σ of ln(1 − W) as polynomials in ln n (constant term first). */
const LARGE_N_MEAN = [-1.5861, -0.31082, -0.083751, 0.0038915] as const;
const LARGE_N_LOG_SD = [-0.4803, -0.082676, 0.0030302] as const;

/** Σ c_k t^k (constant term first), by Horner's rule. */
function evaluatePolynomial(coefficients: readonly number[], t: number): number {
  let value = 0;
  for (let k = coefficients.length - 1; k >= 0; k--) value = value * t + coefficients[k];
  return value;
}

/**
 * Royston's coefficients for a sample of n (3 ≤ n ≤ 5000), upper half only: weights[k] = a_{n−k}
 * for k = 0 … ⌊n/2⌋ − 1, all positive (weights[0] multiplies the largest observation). The lower
 * half is −weights by symmetry, and the middle coefficient of an odd n is 0. O(n).
 */
function roystonWeights(n: number): Float64Array {
  const half = Math.floor(n / 2);
  const weights = new Float64Array(half);
  if (n === 3) {
    weights[0] = Math.SQRT1_2;
    return weights;
  }
  // Step 1: Blom-type scores of the upper half, m_{n−k} = −Φ⁻¹((k + 1 − 3/8) / (n + 1/4)).
  const scores = new Float64Array(half);
  const squares = new CompensatedSum();
  for (let k = 0; k < half; k++) {
    scores[k] = -normalQuantile((k + 1 - 0.375) / (n + 0.25));
    squares.add(scores[k] * scores[k]);
  }
  const scoreNormSquared = 2 * squares.value(); // m'm (the middle score of an odd n is 0)
  const scoreNorm = Math.sqrt(scoreNormSquared);

  // Step 2: the polynomial end coefficients, then the normalisation of the rest.
  const u = 1 / Math.sqrt(n);
  const last = scores[0] / scoreNorm + u * evaluatePolynomial(LAST_COEFFICIENT_CORRECTION, u);
  weights[0] = last;
  let fixedCount = 1;
  let fixedScoreSquares = 2 * scores[0] * scores[0];
  let fixedWeightSquares = 2 * last * last;
  if (n > 5) {
    const secondLast = scores[1] / scoreNorm + u * evaluatePolynomial(SECOND_LAST_COEFFICIENT_CORRECTION, u);
    weights[1] = secondLast;
    fixedCount = 2;
    fixedScoreSquares += 2 * scores[1] * scores[1];
    fixedWeightSquares += 2 * secondLast * secondLast;
  }
  // φ (n ≥ 6) or ε (n = 4, 5): the remaining coefficients share what is left of Σ a_i² = 1.
  const normalisation = (scoreNormSquared - fixedScoreSquares) / (1 - fixedWeightSquares);
  const scale = 1 / Math.sqrt(normalisation);
  for (let k = fixedCount; k < half; k++) weights[k] = scores[k] * scale;
  return weights;
}

/**
 * W of sorted data x (ascending, not constant) with the upper-half weights of roystonWeights(x.length):
 * the squared correlation of the coefficients with the ordered data. O(n).
 */
function statisticW(sorted: Float64Array, weights: Float64Array): number {
  const n = sorted.length;
  // Work in units of about a quarter of the range: multiplying by a power of two is exact, the half
  // range computed as max/2 − min/2 cannot overflow, and afterwards no square can overflow or underflow.
  const halfRange = sorted[n - 1] / 2 - sorted[0] / 2;
  const exponent = -Math.floor(Math.log2(halfRange));
  const scaled = new Float64Array(n);
  for (let i = 0; i < n; i++) scaled[i] = timesPowerOfTwo(sorted[i], exponent);
  // Centre at the mean; the second pass (meanDeviation) removes what rounding left of the mean.
  const total = new CompensatedSum();
  for (let i = 0; i < n; i++) total.add(scaled[i]);
  const mean = total.value() / n;
  const deviations = new Float64Array(n);
  const drift = new CompensatedSum();
  for (let i = 0; i < n; i++) {
    const d = scaled[i] - mean;
    deviations[i] = d;
    drift.add(d);
  }
  const meanDeviation = drift.value() / n;
  const squares = new CompensatedSum();
  for (let i = 0; i < n; i++) {
    const d = deviations[i] - meanDeviation;
    squares.add(d * d);
  }
  const sumOfSquares = squares.value();
  const projectionSum = new CompensatedSum();
  const weightSquaresSum = new CompensatedSum();
  for (let k = 0; k < weights.length; k++) {
    projectionSum.add(weights[k] * (deviations[n - 1 - k] - deviations[k]));
    weightSquaresSum.add(weights[k] * weights[k]);
  }
  const projection = projectionSum.value();
  const weightSquares = weightSquaresSum.value();
  const w = (projection * projection) / (2 * weightSquares * sumOfSquares);
  return Math.min(w, 1);
}

/**
 * A running sum with Neumaier's compensation (the rounding error of each addition is carried
 * separately), so that sums of up to 5000 terms keep close to full precision. O(1) per term.
 */
class CompensatedSum {
  private sum = 0;
  private compensation = 0;
  add(term: number): void {
    const next = this.sum + term;
    this.compensation += Math.abs(this.sum) >= Math.abs(term) ? this.sum - next + term : term - next + this.sum;
    this.sum = next;
  }
  value(): number {
    return this.sum + this.compensation;
  }
}

/** Royston's p-value P(W' ≤ w) under normality for a sample of n (3 ≤ n ≤ 5000). O(1). */
function shapiroWilkPValue(w: number, n: number): number {
  if (w >= 1) return 1;
  if (n === 3) {
    // Exact (Shapiro & Wilk 1965): W ≥ 3/4 with an arcsine-uniform law above it.
    if (w <= 0.75 * (1 + 16 * Number.EPSILON)) return 0;
    const p = (6 / Math.PI) * (Math.asin(Math.sqrt(w)) - Math.PI / 3);
    return Math.min(Math.max(p, 0), 1);
  }
  const logOneMinusW = Math.log1p(-w);
  let z: number;
  if (n <= 11) {
    const gamma = evaluatePolynomial(SMALL_N_GAMMA, n);
    const shifted = gamma - logOneMinusW;
    if (!(shifted > 0)) return 0; // outside the transformation's domain: z → +∞ (see header)
    const mean = evaluatePolynomial(SMALL_N_MEAN, n);
    const sd = Math.exp(evaluatePolynomial(SMALL_N_LOG_SD, n));
    z = (-Math.log(shifted) - mean) / sd;
  } else {
    const logN = Math.log(n);
    const mean = evaluatePolynomial(LARGE_N_MEAN, logN);
    const sd = Math.exp(evaluatePolynomial(LARGE_N_LOG_SD, logN));
    z = (logOneMinusW - mean) / sd;
  }
  return Math.min(Math.max(normalUpperTail(z), 0), 1);
}

/**
 * Shapiro–Wilk W and Royston's p-value of one Sample. `result` is null with a `reason` when the test is
 * undefined: fewer than 3 or more than 5000 observations, or all observations identical. O(n) for
 * n ≤ 5000 (checked before anything is expanded).
 */
export function shapiroWilk(s: Sample): { result: ShapiroWilk | null; reason?: string } {
  const n = s.n;
  if (n < SHAPIRO_WILK_MIN_N) {
    return Object.freeze({
      result: null,
      reason: `the Shapiro–Wilk test needs at least ${SHAPIRO_WILK_MIN_N} observations; this group has ${n}.`,
    });
  }
  if (n > SHAPIRO_WILK_MAX_N) {
    return Object.freeze({
      result: null,
      reason: `Royston's approximation of the Shapiro–Wilk test is defined for at most ${SHAPIRO_WILK_MAX_N} observations; this group has ${n}.`,
    });
  }
  if (s.values.length < 2) {
    return Object.freeze({
      result: null,
      reason: 'all observations are identical, so the Shapiro–Wilk W is undefined (0/0).',
    });
  }
  const sorted = expand(s);
  const w = statisticW(sorted, roystonWeights(n));
  const p = shapiroWilkPValue(w, n);
  return Object.freeze({ result: Object.freeze({ w, p }) });
}
