/**
 * Shapiro–Wilk test of normality for one sample: W and its p-value by Royston's algorithm AS R94.
 *
 * Hypotheses: H0 — the observations are a sample from some normal distribution (any mean, any
 * variance); H1 — they are not. Small W (and small p) is evidence against normality. One-sided by
 * construction: there is no `alternative` option.
 *
 * Method (Royston 1995, exactly as R's `shapiro.test` → swilk.c in R ≥ 3.x, all in double precision):
 *   Sort x (n values, 3 ≤ n ≤ 5000). If the range x(n) − x(1) is 0 the test is undefined (R stops with
 *   "all 'x' values are identical"); if the range is below 1e-10, R first divides x by it, and so do we.
 *   Coefficients: m_i = Φ⁻¹((i − 3/8)/(n + 1/4)) for i = 1 … ⌊n/2⌋, summ2 = 2·Σ m_i², u = 1/√n;
 *     a_1 = poly(c1, u) − m_1/√summ2 (c1 = 0, .221157, −.147981, −2.07119, 4.434685, −2.706056);
 *     for n > 5 also a_2 = poly(c2, u) − m_2/√summ2 (c2 = 0, .042981, −.293762, −1.752461, 5.682633, −3.582633),
 *     and the remaining a_i = −m_i/φ with φ chosen so that Σ a_i² = 1 over both halves
 *     (φ² = (summ2 − 2m_1² − 2m_2²)/(1 − 2a_1² − 2a_2²); for n ≤ 5 only a_1 is replaced);
 *     for n = 3, a_1 = 0.70710678 (R's truncated √½).
 *   W is the squared correlation between the ordered x (scaled by the range) and the antisymmetric
 *   coefficient vector; 1 − W is computed as (√(SaSx) − Sax)(√(SaSx) + Sax)/(SaSx) to keep precision
 *   when W is near 1.
 *   p-value: n = 3: exact, p = (6/π)(asin √W − asin √¾), clamped at 0.
 *            4 ≤ n ≤ 11: γ = −2.273 + 0.459n; if log(1 − W) ≥ γ, p = 1e-99 (R's fixed value);
 *              otherwise y = −log(γ − log(1 − W)), μ = 0.544 − 0.39978n + 0.025054n² − 0.0006714n³,
 *              σ = exp(1.3822 − 0.77857n + 0.062767n² − 0.0020322n³).
 *            n ≥ 12: y = log(1 − W), with ν = log n, μ = −1.5861 − 0.31082ν − 0.083751ν² + 0.0038915ν³,
 *              σ = exp(−0.4803 − 0.082676ν + 0.0030302ν²).
 *            p = P(Z > (y − μ)/σ), upper normal tail (erfc, never 1 − cdf).
 *   The order of every sum follows swilk.c, so that rounding agrees with R as far as possible.
 *
 * References:
 *   Royston, P. (1995). Remark AS R94: A remark on Algorithm AS 181: The W-test for normality.
 *     Applied Statistics 44(4), 547–551. doi:10.2307/2986146
 *   Royston, P. (1992). Approximating the Shapiro–Wilk W-test for non-normality. Statistics and
 *     Computing 2, 117–119. doi:10.1007/BF01891203
 *   Shapiro, S. S. & Wilk, M. B. (1965). An analysis of variance test for normality (complete samples).
 *     Biometrika 52, 591–611. doi:10.1093/biomet/52.3-4.591
 *   R Core Team, src/library/stats/src/swilk.c and shapiro.test (R 4.2.2).
 *
 * Cost: O(n) time after expanding the Sample into its n sorted observations (n ≤ 5000), plus ⌊n/2⌋
 * normal quantiles; O(n) memory.
 */
import { normalQuantile, normalUpperTail } from './distributions.js';
import { expand, type Sample } from './sample.js';
import { freezeDeep, type ShapiroWilk } from './types.js';

/** Smallest and largest sample sizes for which Royston's approximation is defined. */
export const SHAPIRO_WILK_MIN_N = 3;
export const SHAPIRO_WILK_MAX_N = 5000;

const C1 = [0, 0.221157, -0.147981, -2.07119, 4.434685, -2.706056] as const;
const C2 = [0, 0.042981, -0.293762, -1.752461, 5.682633, -3.582633] as const;
const G = [-2.273, 0.459] as const;
const C3 = [0.544, -0.39978, 0.025054, -6.714e-4] as const;
const C4 = [1.3822, -0.77857, 0.062767, -0.0020322] as const;
const C5 = [-1.5861, -0.31082, -0.083751, 0.0038915] as const;
const C6 = [-0.4803, -0.082676, 0.0030302] as const;
const SMALL = 1e-19;

/** Polynomial cc[0] + cc[1]x + … evaluated as AS 181.2 (and swilk.c's poly) does. */
function poly(cc: readonly number[], x: number): number {
  const nord = cc.length;
  let result = cc[0];
  if (nord > 1) {
    let p = x * cc[nord - 1];
    for (let j = nord - 2; j > 0; j--) p = (p + cc[j]) * x;
    result += p;
  }
  return result;
}

/** Royston's coefficients a[1 … ⌊n/2⌋] (index 0 unused), as swilk.c computes them. */
function coefficients(n: number): Float64Array {
  const nn2 = Math.floor(n / 2);
  const a = new Float64Array(nn2 + 1);
  if (n === 3) {
    a[1] = 0.70710678; // R's constant: √½ truncated to 8 digits
    return a;
  }
  const an = n;
  const an25 = an + 0.25;
  let summ2 = 0;
  for (let i = 1; i <= nn2; i++) {
    a[i] = normalQuantile((i - 0.375) / an25);
    summ2 += a[i] * a[i];
  }
  summ2 *= 2;
  const ssumm2 = Math.sqrt(summ2);
  const rsn = 1 / Math.sqrt(an);
  const a1 = poly(C1, rsn) - a[1] / ssumm2;
  let i1: number;
  let fac: number;
  if (n > 5) {
    i1 = 3;
    const a2 = -a[2] / ssumm2 + poly(C2, rsn);
    fac = Math.sqrt((summ2 - 2 * (a[1] * a[1]) - 2 * (a[2] * a[2])) / (1 - 2 * (a1 * a1) - 2 * (a2 * a2)));
    a[2] = a2;
  } else {
    i1 = 2;
    fac = Math.sqrt((summ2 - 2 * (a[1] * a[1])) / (1 - 2 * (a1 * a1)));
  }
  a[1] = a1;
  for (let i = i1; i <= nn2; i++) a[i] /= -fac;
  return a;
}

function fail(reason: string): { result: null; reason: string } {
  return Object.freeze({ result: null, reason });
}

/**
 * Shapiro–Wilk W and p-value of one Sample (Royston 1995, as R's shapiro.test).
 * Returns `{ result: { w, p } }`, or `{ result: null, reason }` when n < 3, n > 5000 or all values are
 * equal (R stops with an error in those cases). Never throws on a valid Sample. O(n).
 */
export function shapiroWilk(s: Sample): { result: ShapiroWilk | null; reason?: string } {
  const n = s.n;
  if (n < SHAPIRO_WILK_MIN_N) {
    return fail(`the Shapiro–Wilk test needs at least ${SHAPIRO_WILK_MIN_N} observations; this group has ${n}.`);
  }
  if (n > SHAPIRO_WILK_MAX_N) {
    return fail(
      `Royston's Shapiro–Wilk approximation is defined for at most ${SHAPIRO_WILK_MAX_N} observations (as R's shapiro.test); this group has ${n}.`,
    );
  }
  if (s.values.length < 2) {
    return fail('all values are identical, so the Shapiro–Wilk statistic is undefined (R: "all \'x\' values are identical").');
  }
  const x = expand(s); // sorted, non-decreasing
  // shapiro.test: if the range is tiny, rescale by it before calling swilk (R ≥ 4.0).
  const rng0 = x[n - 1] - x[0];
  if (rng0 < 1e-10) for (let i = 0; i < n; i++) x[i] = x[i] / rng0;

  const a = coefficients(n);
  const range = x[n - 1] - x[0];
  if (!(range >= SMALL)) {
    return fail('the range of the values is too small for the Shapiro–Wilk computation.');
  }

  // First pass (swilk.c): mean of the range-scaled x and of the signed coefficient vector.
  let sx = x[0] / range;
  let sa = -a[1];
  for (let i = 1, j = n - 1; i < n; j--) {
    const xi = x[i] / range;
    sx += xi;
    i++;
    if (i !== j) sa += Math.sign(i - j) * a[Math.min(i, j)];
  }
  sa /= n;
  sx /= n;

  // Second pass: squared correlation between the coefficients and the scaled data.
  let ssa = 0;
  let ssx = 0;
  let sax = 0;
  for (let i = 0, j = n - 1; i < n; i++, j--) {
    const asa = i !== j ? Math.sign(i - j) * a[1 + Math.min(i, j)] - sa : -sa;
    const xsx = x[i] / range - sx;
    ssa += asa * asa;
    ssx += xsx * xsx;
    sax += asa * xsx;
  }
  const ssassx = Math.sqrt(ssa * ssx);
  const w1 = ((ssassx - sax) * (ssassx + sax)) / (ssa * ssx);
  const w = 1 - w1;
  if (!Number.isFinite(w) || !(w1 >= 0)) {
    return fail('the Shapiro–Wilk statistic could not be computed in floating point for these values.');
  }

  let p: number;
  if (n === 3) {
    const pi6 = 1.90985931710274; // 6/π, as in swilk.c
    const stqr = 1.0471975511966; // asin(√¾) = π/3, as in swilk.c
    p = pi6 * (Math.asin(Math.sqrt(w)) - stqr);
    if (p < 0) p = 0;
  } else {
    let y = Math.log(w1);
    const logN = Math.log(n);
    let m: number;
    let sd: number;
    if (n <= 11) {
      const gamma = poly(G, n);
      if (y >= gamma) {
        return Object.freeze({ result: freezeDeep({ w, p: 1e-99 }) }); // swilk.c's fixed "obvious" value
      }
      y = -Math.log(gamma - y);
      m = poly(C3, n);
      sd = Math.exp(poly(C4, n));
    } else {
      m = poly(C5, logN);
      sd = Math.exp(poly(C6, logN));
    }
    if (!Number.isFinite(y)) {
      // w1 = 0: the data lie exactly on the coefficient line (W = 1); the upper tail at −∞ is 1.
      p = 1;
    } else {
      p = normalUpperTail((y - m) / sd);
    }
  }
  if (p > 1) p = 1;
  return Object.freeze({ result: freezeDeep({ w, p }) });
}
