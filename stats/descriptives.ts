/**
 * descriptives.ts — per-group summary statistics of a Sample (distinct sorted values + counts).
 *
 * What it computes (no hypothesis test here):
 *   n; mean; sd (n − 1 denominator); median, q1, q3 (quantile type 7: R's default `quantile()`,
 *   numpy's default `percentile`); iqr = q3 − q1; min; max;
 *   skewness g1 = m3 / m2^(3/2) and excess kurtosis g2 = m4 / m2² − 3 with m_k = (1/n) Σ (x − mean)^k
 *   (the moment estimators, scipy.stats.skew / kurtosis defaults, bias=True);
 *   mad = 1.4826 · median(|x − median|) (R's mad() with its default constant).
 *
 * Method
 *   - Mean: two passes with Neumaier-compensated sums. Pass 1: m0 = Σ w_i v_i with w_i = c_i / n (bounded
 *     partial sums, no overflow). Pass 2: mean = m0 + Σ w_i (v_i − m0), which removes pass 1's rounding:
 *     the error left is a few ulps of |mean| plus ~ε·spread, so 1e12 + tiny offsets keep their digits.
 *   - Central moments: deviations d_i = v_i − mean are scaled by s = max |d_i| before being raised to
 *     powers (LAPACK-style), so values near 1e-300 do not underflow and values near 1e300 do not overflow:
 *     S_k = Σ c_i (d_i/s)^k with compensation, then re-centred on the exact mean with d̄ = S_1/n
 *     (n·m2 = S2 − n d̄², n·m3 = S3 − 3d̄S2 + 2n d̄³, n·m4 = S4 − 4d̄S3 + 6d̄²S2 − 3n d̄⁴): the "corrected
 *     two-pass" algorithm (Chan, Golub & LeVeque 1983, doi:10.1080/00031305.1983.10483115) carried to the
 *     third and fourth moments, which removes the rounding of the mean (half an ulp, 6e-5 at 1e12).
 *   - Type 7 quantile of probability p: h = (n − 1)p (0-based); with j = ⌊h⌋ and x_(j) the order statistics,
 *     Q(p) = (1 − (h − j))·x_(j) + (h − j)·x_(j+1), with the second term added only when the two order
 *     statistics differ, so that Q(p) is exactly x_(j) when they are equal (no rounding from the weights);
 *     the values match R's quantile(x, p, type = 7). Hyndman, R. J. & Fan, Y. (1996). Sample quantiles in statistical packages.
 *     The American Statistician 50, 361–365. doi:10.1080/00031305.1996.10473566.
 *     Order statistics are found from cumulative counts by binary search, so no expansion is needed.
 *   - MAD: the absolute deviations from the median form two sorted runs (values below the median, read
 *     downwards, and values above, read upwards); merging the runs walks the deviations in increasing
 *     order with their counts, and the median of the deviations is read off at ranks ⌊(n−1)/2⌋, ⌈(n−1)/2⌉.
 *     Hampel, F. R. (1974). The influence curve and its role in robust estimation. JASA 69, 383–393.
 *     doi:10.1080/01621459.1974.10482962.
 *
 * Scale: when the largest |value| lies outside [2^-200, 2^200] (values near 1e-300 or 1e300), the moment
 * statistics and the MAD are computed on a copy multiplied by an exact power of two and scaled back
 * (rescaleExponent, scaleSample; timesPowerOfTwo is exported for the t tests to restore units); order
 * statistics always come from the original values. A result that does not fit in a double (the sd of
 * values near ±1e308) is null with a reason.
 *
 * Undefined values: n = 0 → every statistic null; n = 1 → sd, skewness and kurtosis null; a constant
 * group (one distinct value) → sd = 0, mad = 0, skewness and kurtosis null. Each null is explained in
 * `reason`.
 *
 * Cost: O(K) for K distinct values (quantiles add O(log K) each); the Sample's construction is the caller's.
 * scaledMoments(a, b) gives the moments the t tests and effect sizes share, so a caller computes them once.
 */

import type { GroupSummary } from './types.js';
import { freezeDeep } from './types.js';
import type { Sample } from './sample.js';

/** Neumaier's compensated summation accumulator. */
class CompensatedSum {
  private sum = 0;
  private compensation = 0;
  add(x: number): void {
    const t = this.sum + x;
    if (Math.abs(this.sum) >= Math.abs(x)) this.compensation += this.sum - t + x;
    else this.compensation += x - t + this.sum;
    this.sum = t;
  }
  value(): number {
    return this.sum + this.compensation;
  }
}

export interface Moments {
  n: number;
  /** null when n = 0 */
  mean: number | null;
  /** sample variance with the n − 1 denominator; null when n < 2 */
  variance: number | null;
}

/**
 * The moments of a group of (n ≥ 3, mean, variance) with one answer x left out: mean' = (n·mean − x)/(n − 1) and the
 * sum-of-squares downdate SS' = SS − (x − mean)(x − mean'), clamped at 0. O(1): how the quality flags and the
 * sensitivity view recompute Welch's test without one answer.
 */
export function momentsWithout(g: { n: number; mean: number; variance: number }, x: number): { n: number; mean: number; variance: number } {
  const n1 = g.n - 1;
  const mean1 = (g.n * g.mean - x) / n1;
  const ss = g.variance * (g.n - 1) - (x - g.mean) * (x - mean1);
  return { n: n1, mean: mean1, variance: Math.max(0, ss / (n1 - 1)) };
}

/** Mean of a non-empty Sample by the compensated two-pass method. O(K). */
function sampleMean(s: Sample): number {
  const { values, counts, n } = s;
  if (values.length === 1) return values[0];
  const first = new CompensatedSum();
  for (let i = 0; i < values.length; i++) first.add((counts[i] / n) * values[i]);
  const m0 = first.value();
  const second = new CompensatedSum();
  for (let i = 0; i < values.length; i++) second.add((counts[i] / n) * (values[i] - m0));
  return m0 + second.value();
}

interface CentralSums {
  /** max |v_i − mean| (scale s) */
  scale: number;
  /** n·m2 in units of scale², with m_k the central moments about the exact mean */
  s2: number;
  /** n·m3 in units of scale³ */
  s3: number;
  /** n·m4 in units of scale⁴ */
  s4: number;
}

/**
 * Central sums about the exact mean. The computed mean carries a rounding error δ (up to half an ulp, i.e.
 * 6e-5 at 1e12); the deviations d = v − mean are exact (Sterbenz) but centred on the rounded mean, so the raw
 * power sums S_k = Σ c d^k are re-centred with d̄ = S_1/n:
 *   n·m2 = S2 − n d̄²,  n·m3 = S3 − 3 d̄ S2 + 2n d̄³,  n·m4 = S4 − 4 d̄ S3 + 6 d̄² S2 − 3n d̄⁴
 * (the "corrected two-pass" idea of Chan, Golub & LeVeque carried to the third and fourth moments).
 * Without this, skewness at 1e12 with unit spread is off in the fourth digit.
 */
function centralSums(s: Sample, mean: number, orders: 2 | 4): CentralSums {
  const { values, counts, n } = s;
  let scale = 0;
  for (let i = 0; i < values.length; i++) scale = Math.max(scale, Math.abs(values[i] - mean));
  if (scale === 0) return { scale: 0, s2: 0, s3: 0, s4: 0 };
  const sum1 = new CompensatedSum();
  const sum2 = new CompensatedSum();
  const sum3 = new CompensatedSum();
  const sum4 = new CompensatedSum();
  for (let i = 0; i < values.length; i++) {
    const d = (values[i] - mean) / scale;
    const c = counts[i];
    const d2 = d * d;
    sum1.add(c * d);
    sum2.add(c * d2);
    if (orders === 4) {
      sum3.add(c * d2 * d);
      sum4.add(c * d2 * d2);
    }
  }
  const S1 = sum1.value();
  const S2 = sum2.value();
  const dbar = S1 / n;
  const s2 = Math.max(0, S2 - S1 * dbar);
  if (orders === 2) return { scale, s2, s3: 0, s4: 0 };
  const S3 = sum3.value();
  const S4 = sum4.value();
  const dbar2 = dbar * dbar;
  const s3 = S3 - 3 * dbar * S2 + 2 * n * dbar2 * dbar;
  const s4 = Math.max(0, S4 - 4 * dbar * S3 + 6 * dbar2 * S2 - 3 * n * dbar2 * dbar2);
  return { scale, s2, s3, s4 };
}

/**
 * n, mean and sample variance (n − 1) of a Sample; mean null for n = 0, variance null for n < 2. O(K).
 * The building block for the t tests (welchFromMoments) and the leave-one-out checks of the quality flags.
 */
export function moments(s: Sample): Moments {
  const n = s.n;
  if (n === 0) return Object.freeze({ n, mean: null, variance: null });
  const mean = sampleMean(s);
  if (n < 2) return Object.freeze({ n, mean, variance: null });
  const { scale, s2 } = centralSums(s, mean, 2);
  // variance = scale² · s2 / (n − 1), ordered so that neither underflow nor overflow happens early
  const variance = scale === 0 ? 0 : scale * ((scale * s2) / (n - 1));
  return Object.freeze({ n, mean, variance });
}

/**
 * Power-of-two exponent k that brings the largest |value| of the given Samples near 1 when it lies outside
 * [2^-200, 2^200], else 0. Multiplying by 2^k is exact, so statistics that are scale-free (t, df, p, d) come
 * out bit-for-bit as for the unscaled data, while squares no longer underflow (1e-300²) or overflow (1e300²).
 */
function rescaleExponent(...samples: Sample[]): number {
  let largest = 0;
  for (const s of samples) {
    if (s.values.length === 0) continue;
    largest = Math.max(largest, Math.abs(s.values[0]), Math.abs(s.values[s.values.length - 1]));
  }
  if (largest === 0) return 0;
  const e = Math.floor(Math.log2(largest));
  return e < -200 || e > 200 ? -e : 0;
}

/** x · 2^k, in two steps so that 2^k itself never overflows (|k| up to 2098). */
export function timesPowerOfTwo(x: number, k: number): number {
  const half = Math.trunc(k / 2);
  return x * 2 ** half * 2 ** (k - half);
}

/**
 * The moments the t tests and the effect sizes share: both groups' moments() after the same exact
 * power-of-two rescaling (exponent = rescaleExponent(a, b)). Computed once by compareSamples and passed
 * to welchTest, studentTest and effectSizes, which would otherwise each compute exactly this. O(K_a + K_b).
 */
export interface ScaledMoments {
  exponent: number;
  a: Moments;
  b: Moments;
}

/** The ScaledMoments of two Samples (what welchTest, studentTest and effectSizes compute themselves). O(K_a + K_b). */
export function scaledMoments(a: Sample, b: Sample): ScaledMoments {
  const exponent = rescaleExponent(a, b);
  return { exponent, a: moments(scaleSample(a, exponent)), b: moments(scaleSample(b, exponent)) };
}

/** The Sample with every value multiplied by 2^k (exact unless subnormal). O(K). */
function scaleSample(s: Sample, k: number): Sample {
  if (k === 0) return s;
  const values = new Float64Array(s.values.length);
  for (let i = 0; i < values.length; i++) values[i] = timesPowerOfTwo(s.values[i], k);
  return Object.freeze({ values, counts: s.counts, n: s.n });
}

/** Cumulative counts: cum[i] = number of observations ≤ values[i]. */
function cumulativeCounts(s: Sample): Float64Array {
  const cum = new Float64Array(s.counts.length);
  let total = 0;
  for (let i = 0; i < s.counts.length; i++) {
    total += s.counts[i];
    cum[i] = total;
  }
  return cum;
}

/** The k-th smallest observation (0-based) by binary search over cumulative counts. O(log K). */
function orderStatisticFromCum(s: Sample, cum: Float64Array, k: number): number {
  let lo = 0;
  let hi = cum.length - 1;
  while (lo < hi) {
    const mid = (lo + hi) >>> 1;
    if (cum[mid] > k) hi = mid;
    else lo = mid + 1;
  }
  return s.values[lo];
}

function type7(s: Sample, cum: Float64Array, p: number): number {
  const index = (s.n - 1) * p; // 0-based position, as R's 1 + (n − 1)p minus one
  const lo = Math.floor(index);
  const h = index - lo;
  const xlo = orderStatisticFromCum(s, cum, lo);
  if (h === 0) return xlo;
  const xhi = orderStatisticFromCum(s, cum, Math.min(lo + 1, s.n - 1));
  if (xhi === xlo) return xlo;
  return (1 - h) * xlo + h * xhi;
}

/**
 * Sample quantile of type 7 (Hyndman & Fan 1996; R's and numpy's default) at probability p ∈ [0, 1];
 * null for an empty sample. O(K) (cumulative counts) + O(log K).
 */
export function quantileType7(s: Sample, p: number): number | null {
  if (typeof p !== 'number' || !(p >= 0 && p <= 1)) throw new RangeError(`quantileType7: p is ${String(p)}; 0 ≤ p ≤ 1 is required`);
  if (s.n === 0) return null;
  return type7(s, cumulativeCounts(s), p);
}

/**
 * Median of the absolute deviations |x − center| (not yet scaled), without expanding the Sample:
 * a merge of the two sorted runs of deviations below and above the center. O(K).
 */
function medianAbsoluteDeviation(s: Sample, center: number): number {
  const { values, counts, n } = s;
  // first index with value ≥ center
  let split = 0;
  while (split < values.length && values[split] < center) split++;
  let left = split - 1; // walks downwards: deviations center − v increase
  let right = split; // walks upwards: deviations v − center increase
  const kLow = Math.floor((n - 1) / 2);
  const kHigh = Math.ceil((n - 1) / 2);
  let seen = 0;
  let low: number | null = null;
  while (left >= 0 || right < values.length) {
    let deviation: number;
    let count: number;
    const dl = left >= 0 ? center - values[left] : Infinity;
    const dr = right < values.length ? values[right] - center : Infinity;
    if (dl <= dr) {
      deviation = dl;
      count = counts[left];
      left--;
    } else {
      deviation = dr;
      count = counts[right];
      right++;
    }
    seen += count;
    if (low === null && seen > kLow) low = deviation;
    if (seen > kHigh) return (low! + deviation) / 2;
  }
  return low ?? 0;
}

const MAD_CONSTANT = 1.4826;

/**
 * Summary of one group (everything in GroupSummary except the Shapiro–Wilk test, which shapiro-wilk.ts
 * adds). O(K). `known`, when given, must be moments(s) of this very Sample (unscaled); its mean is then
 * reused instead of recomputed (the same number, so the summary is the same).
 */
export function describe(s: Sample, known?: Moments): Omit<GroupSummary, 'shapiroWilk'> {
  const k = rescaleExponent(s);
  if (k === 0) return describeUnscaled(s, known !== undefined && known.n === s.n ? known.mean : null);
  // Values beyond 2^±200: summarise the exactly rescaled data, then restore the units. A statistic that
  // does not fit in a double after all (an sd of 1e308-sized values) becomes null with a reason.
  // Order statistics come from the original values (type-7 interpolation cannot overflow and must not lose
  // tiny values to the rescaling); moment statistics and the MAD from the rescaled copy.
  const scaled = describeUnscaled(scaleSample(s, k));
  const back = (v: number | null) => (v === null ? null : timesPowerOfTwo(v, -k));
  const cum = cumulativeCounts(s);
  const q1 = type7(s, cum, 0.25);
  const q3 = type7(s, cum, 0.75);
  const out: Omit<GroupSummary, 'shapiroWilk'> = {
    ...scaled,
    mean: back(scaled.mean),
    sd: back(scaled.sd),
    median: type7(s, cum, 0.5),
    q1,
    q3,
    iqr: q3 - q1,
    min: s.values[0],
    max: s.values[s.values.length - 1],
    mad: back(scaled.mad),
  };
  // the mean of the rescaled copy may have lost values below 2^-1074 after scaling; keep it inside [min, max]
  if (out.mean !== null) out.mean = Math.min(Math.max(out.mean, out.min as number), out.max as number);
  const overflowed: string[] = [];
  for (const key of ['mean', 'sd', 'median', 'q1', 'q3', 'iqr', 'mad'] as const) {
    const v = out[key];
    if (v !== null && !Number.isFinite(v)) {
      out[key] = null;
      overflowed.push(key);
    }
  }
  if (overflowed.length > 0) {
    const note = `${overflowed.join(', ')} exceed${overflowed.length === 1 ? 's' : ''} the double-precision range and ${overflowed.length === 1 ? 'is' : 'are'} reported as null.`;
    out.reason = out.reason ? `${out.reason} ${note}` : note;
  }
  return freezeDeep(out);
}

function describeUnscaled(s: Sample, knownMean: number | null = null): Omit<GroupSummary, 'shapiroWilk'> {
  const n = s.n;
  if (n === 0) {
    return freezeDeep({
      n: 0,
      mean: null,
      sd: null,
      median: null,
      q1: null,
      q3: null,
      iqr: null,
      min: null,
      max: null,
      skewness: null,
      excessKurtosis: null,
      mad: null,
      reason: 'The group has no observations, so no summary statistic is defined.',
    });
  }
  const cum = cumulativeCounts(s);
  const mean = knownMean ?? sampleMean(s);
  const median = type7(s, cum, 0.5);
  const q1 = type7(s, cum, 0.25);
  const q3 = type7(s, cum, 0.75);
  const min = s.values[0];
  const max = s.values[s.values.length - 1];
  const mad = MAD_CONSTANT * medianAbsoluteDeviation(s, median);
  const reasons: string[] = [];
  let sd: number | null = null;
  let skewness: number | null = null;
  let excessKurtosis: number | null = null;
  const constant = s.values.length === 1;
  if (n === 1) {
    reasons.push('sd needs at least two observations (n − 1 = 0).');
  }
  if (constant) {
    if (n > 1) sd = 0;
    reasons.push(
      n === 1
        ? 'Skewness and excess kurtosis are undefined for a single observation (zero variance).'
        : 'All observations are equal, so skewness and excess kurtosis (ratios to a zero variance) are undefined.',
    );
  } else {
    const { scale, s2, s3, s4 } = centralSums(s, mean, 4);
    sd = scale * Math.sqrt(s2 / (n - 1));
    // Scale-free ratios: m2 = s2/n, m3 = s3/n, m4 = s4/n in units of scale.
    const m2 = s2 / n;
    if (m2 > 0) {
      skewness = s3 / n / Math.pow(m2, 1.5);
      excessKurtosis = s4 / n / (m2 * m2) - 3;
    } else {
      reasons.push('The variance is zero to working precision, so skewness and excess kurtosis are undefined.');
    }
  }
  const summary: Omit<GroupSummary, 'shapiroWilk'> = {
    n,
    mean,
    sd,
    median,
    q1,
    q3,
    iqr: q3 - q1,
    min,
    max,
    skewness,
    excessKurtosis,
    mad,
  };
  if (reasons.length > 0) summary.reason = reasons.join(' ');
  return freezeDeep(summary);
}
