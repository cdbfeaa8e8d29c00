/**
 * Robust companions to the t and rank-sum tests: the Brunner–Munzel test and Yuen's trimmed-mean
 * Welch test, both computed from the (values, counts) form of the Samples without expanding them.
 *
 * ── Brunner–Munzel (generalised Wilcoxon test; Brunner & Munzel 2000) ──────────────────────────────
 * Estimand: the relative effect p = P(A < B) + ½·P(A = B). H0: p = ½ (neither group tends to give
 * larger values), with no assumption that the two distributions have the same shape or spread — so it
 * stays valid where the rank-sum test is not a test of location. Alternatives, in the project's words
 * (types.ts): "greater" — a tends to be larger than b (p < ½); "less" — a tends to be smaller (p > ½);
 * "two-sided" — p ≠ ½.
 Sign convention: the project's a − b direction — `statistic` is POSITIVE WHEN a TENDS TO BE LARGER,
 * like Welch's t. It is exactly −1 × scipy.stats.brunnermunzel(a, b).statistic (scipy's sign is positive
 * when b tends to be larger); the p-values are scipy's for the same alternative.
 * Method: with mid-ranks, the overall rank of an observation minus its rank within its own group is its
 * placement among the other group: P(v) = #(other < v) + ½·#(other = v). With U_a = Σ_{a} P (the
 * Mann–Whitney U of a),
 *   S²_a = Σ_{a} (P − mean P)² / (n_a − 1),   S²_b likewise over b,
 *   statistic = (U_a − n_a·n_b/2) / √(n_a S²_a + n_b S²_b)
 *     (algebraically −1 × scipy's n_a n_b (R̄_b − R̄_a) / ((n_a + n_b) √(n_a S²_a + n_b S²_b))
 *      with R̄ the mean overall mid-ranks; this form has an exact numerator),
 *   df = (n_a S²_a + n_b S²_b)² / ((n_a S²_a)²/(n_a − 1) + (n_b S²_b)²/(n_b − 1))   (Satterthwaite-type),
 *   p from Student's t with df degrees of freedom (scipy's default distribution="t"), tails computed
 *   directly (incomplete beta), never as 1 − cdf.
 * Undefined (null with reason; scipy gives nan or ±inf): a group with fewer than 2 observations, or
 * S²_a = S²_b = 0 (both groups constant, or the groups completely separated with no ties across).
 *
 * ── Yuen–Welch (Yuen 1974) ────────────────────────────────────────────────────────────────────────
 * Estimand: the difference of the γ-trimmed population means, a − b (γ = `trim`, default 0.2).
 * H0: equal trimmed means; "greater": trimmed mean of a larger; "less": smaller; "two-sided": differ.
 * Method (as scipy.stats.ttest_ind(a, b, equal_var=False, trim=γ)): in each group of n sorted values,
 *   g = ⌊γ·n⌋ values are cut from each end (scipy: int(n * trim)), h = n − 2g remain;
 *   trimmed mean  x̄_t = (x_(g+1) + … + x_(n−g)) / h;
 *   winsorized sample: the g lowest values set to x_(g+1), the g highest to x_(n−g);
 *   winsorized variance s²_w = Σ (w_i − w̄)² / (h − 1)   (scipy's ddof = 2g + 1);
 *   d = s²_w / h;  t = (x̄_t,a − x̄_t,b) / √(d_a + d_b);
 *   df = (d_a + d_b)² / (d_a²/(h_a − 1) + d_b²/(h_b − 1))   (Welch–Satterthwaite);
 *   p from Student's t (direct tails). `difference` = x̄_t,a − x̄_t,b.
 * Every quantity is a function of the cumulative counts: the trimmed and winsorized sums weight each
 * distinct value by how many of its copies fall inside the kept range. Sums are taken about a shift
 * (the first kept value) so that large offsets (e.g. 1e12) do not swamp the deviations.
 * Undefined (null with reason): h < 2 in a group (no variance), or both winsorized variances 0
 * (difference is still reported when the trimmed means exist).
 *
 * References:
 *   Brunner, E. & Munzel, U. (2000). The nonparametric Behrens–Fisher problem: asymptotic theory and a
 *     small-sample approximation. Biometrical Journal 42(1), 17–25.
 *     doi:10.1002/(SICI)1521-4036(200001)42:1<17::AID-BIMJ17>3.0.CO;2-U
 *   Yuen, K. K. (1974). The two-sample trimmed t for unequal population variances. Biometrika 61(1),
 *     165–170. doi:10.1093/biomet/61.1.165
 *   scipy 1.10.1, scipy/stats/_stats_py.py: brunnermunzel, ttest_ind (trim), _ttest_trim_var_mean_len.
 *
 * Cost: O(K_a + K_b) time and memory, K the number of distinct values in each Sample (a merge of the two
 * sorted value lists for the placements; one walk over each for the trimmed sums).
 */
import { pValue, studentUpperTail } from './distributions.js';
import type { Sample } from './sample.js';
import { freezeDeep, type Alternative, type BrunnerMunzelResult, type YuenWelchResult } from './types.js';

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];

function checkAlternative(alternative: Alternative): void {
  if (!ALTERNATIVES.includes(alternative)) {
    throw new RangeError(`alternative is "${String(alternative)}"; use one of ${ALTERNATIVES.join(', ')}`);
  }
}

/**
 * Placements of the distinct values of `x` among the observations of `other`,
 * P(v) = #(other < v) + ½·#(other = v), by a two-pointer merge, and their count-weighted sum (which is
 * the Mann–Whitney U of x) and sample variance (two-pass: mean first, then squared deviations).
 * O(K_x + K_other).
 */
function placementMoments(x: Sample, other: Sample): { sum: number; variance: number } {
  const k = x.values.length;
  const p = new Float64Array(k);
  const xv = x.values;
  const xc = x.counts;
  const ov = other.values;
  const oc = other.counts;
  let j = 0;
  let below = 0;
  let sum = 0;
  for (let i = 0; i < k; i++) {
    const v = xv[i];
    while (j < ov.length && ov[j] < v) {
      below += oc[j];
      j++;
    }
    const placement = j < ov.length && ov[j] === v ? below + oc[j] / 2 : below;
    p[i] = placement;
    sum += xc[i] * placement;
  }
  const mean = sum / x.n;
  let ss = 0;
  for (let i = 0; i < k; i++) {
    const d = p[i] - mean;
    ss += xc[i] * d * d;
  }
  return { sum, variance: ss / (x.n - 1) };
}

function bmNull(reason: string): BrunnerMunzelResult {
  return freezeDeep({ statistic: null, df: null, p: null, reason });
}

/**
 * Brunner–Munzel test of H0: P(A < B) + ½P(A = B) = ½, with the Satterthwaite-type t approximation
 * (scipy's default). `statistic` is positive when a tends to be larger (−1 × scipy's). O(K_a + K_b).
 */
export function brunnerMunzel(a: Sample, b: Sample, opts: { alternative: Alternative }): BrunnerMunzelResult {
  checkAlternative(opts.alternative);
  const na = a.n;
  const nb = b.n;
  if (na < 2 || nb < 2) {
    return bmNull(
      `the Brunner–Munzel test needs at least 2 observations in each group (a has ${na}, b has ${nb}); its variance estimate divides by n − 1.`,
    );
  }
  const pa = placementMoments(a, b);
  const pb = placementMoments(b, a);
  const ua = pa.sum; // U statistic of a: #(a > b) + ½#(a = b)
  const va = na * pa.variance;
  const vb = nb * pb.variance;
  const total = va + vb;
  if (!(total > 0)) {
    return bmNull(
      ua === (na * nb) / 2
        ? 'the Brunner–Munzel variance estimate is 0 and the groups do not differ (every observation is tied with every other); the statistic is 0/0 (scipy returns nan).'
        : 'the Brunner–Munzel variance estimate is 0 (each group is constant, or the groups are completely separated with no overlap); the statistic would be infinite (scipy returns ±inf with an undefined df).',
    );
  }
  const statistic = (ua - (na * nb) / 2) / Math.sqrt(total);
  const df = (total * total) / ((va * va) / (na - 1) + (vb * vb) / (nb - 1));
  // "greater" (a larger) is the upper t tail at the statistic (scipy: the lower tail at its −statistic).
  const p = pValue(statistic, opts.alternative, (x: number) => studentUpperTail(x, df));
  return freezeDeep({ statistic: statistic === 0 ? 0 : statistic, df, p });
}

interface TrimmedMoments {
  n: number;
  g: number;
  h: number;
  /** The first kept value (position g); sums are taken about it. */
  shift: number;
  /** Trimmed mean minus shift, computed from the deviations (no large-offset rounding). */
  trimmedOffset: number;
  /** Winsorized variance Σ(w − w̄)²/(h − 1); null when h < 2. */
  winsorizedVariance: number | null;
}

/**
 * Trimmed mean and winsorized variance of a Sample from its cumulative counts, as scipy's
 * _ttest_trim_var_mean_len does on the sorted data. O(K).
 */
function trimmedMoments(s: Sample, trim: number): TrimmedMoments | null {
  const n = s.n;
  if (n === 0) return null;
  const g = Math.floor(n * trim); // scipy: int(n * trim), the same floating product
  const h = n - 2 * g;
  if (h < 1) return null;
  const lo = g; // first kept position (0-based)
  const hi = n - g - 1; // last kept position
  const values = s.values;
  const counts = s.counts;
  const k = values.length;
  // Kept count of each distinct value, and the values at positions lo and hi.
  const kept = new Float64Array(k);
  let low = Number.NaN;
  let high = Number.NaN;
  let cum = 0;
  for (let i = 0; i < k; i++) {
    const first = cum;
    const last = cum + counts[i] - 1;
    cum += counts[i];
    const from = Math.max(first, lo);
    const to = Math.min(last, hi);
    if (to >= from) kept[i] = to - from + 1;
    if (lo >= first && lo <= last) low = values[i];
    if (hi >= first && hi <= last) high = values[i];
  }
  const shift = low;
  let sumKept = 0;
  for (let i = 0; i < k; i++) if (kept[i] > 0) sumKept += kept[i] * (values[i] - shift);
  const trimmedOffset = sumKept / h;
  if (h < 2) return { n, g, h, shift, trimmedOffset, winsorizedVariance: null };
  // Winsorized mean about the same shift: the kept values plus g copies each of low and high.
  const winsorShift = (sumKept + g * (high - shift)) / n; // g·(low − shift) = 0
  let ss = 0;
  for (let i = 0; i < k; i++) {
    if (kept[i] > 0) {
      const d = values[i] - shift - winsorShift;
      ss += kept[i] * d * d;
    }
  }
  if (g > 0) {
    const dLow = -winsorShift;
    const dHigh = high - shift - winsorShift;
    ss += g * dLow * dLow + g * dHigh * dHigh;
  }
  return { n, g, h, shift, trimmedOffset, winsorizedVariance: ss / (h - 1) };
}

/** Yuen's test with no statistic (t, df and p null), and why. */
function yuenNull(trim: number, difference: number | null, reason: string): YuenWelchResult {
  return freezeDeep({ trim, t: null, df: null, p: null, difference, reason });
}

/**
 * Yuen's two-sample trimmed t test with Welch–Satterthwaite df (as scipy's
 * ttest_ind(a, b, equal_var=False, trim)). `trim` in [0, 0.5), default 0.2. O(K_a + K_b).
 */
export function yuenWelch(a: Sample, b: Sample, opts: { alternative: Alternative; trim?: number }): YuenWelchResult {
  checkAlternative(opts.alternative);
  const trim = opts.trim ?? 0.2;
  if (typeof trim !== 'number' || !Number.isFinite(trim) || trim < 0 || trim >= 0.5) {
    throw new RangeError(`trim is ${String(trim)}; it must be a number with 0 ≤ trim < 0.5`);
  }
  const ma = trimmedMoments(a, trim);
  const mb = trimmedMoments(b, trim);
  if (ma === null || mb === null) {
    return yuenNull(trim, null, `Yuen's test needs observations in both groups (a has ${a.n}, b has ${b.n}).`);
  }
  // (shift_a − shift_b) is exact for nearby values (Sterbenz) and the offsets are small, so the
  // difference keeps its digits even when both trimmed means sit near 1e12, where each mean on its own
  // cannot be represented closer than ulp(1e12) ≈ 1.2e-4.
  const difference = ma.shift - mb.shift + (ma.trimmedOffset - mb.trimmedOffset);
  if (ma.winsorizedVariance === null || mb.winsorizedVariance === null) {
    return yuenNull(trim, difference, `Yuen's test needs at least 2 observations left after trimming ${trim} from each end in each group (a keeps ${ma.h} of ${ma.n}, b keeps ${mb.h} of ${mb.n}).`);
  }
  const da = ma.winsorizedVariance / ma.h;
  const db = mb.winsorizedVariance / mb.h;
  const total = da + db;
  if (!(total > 0)) {
    return yuenNull(trim, difference, 'both winsorized variances are 0 (after winsorizing, each group is constant), so the standard error is 0 and t is undefined (scipy returns ±inf or nan).');
  }
  const t = difference / Math.sqrt(total);
  const df = (total * total) / ((da * da) / (ma.h - 1) + (db * db) / (mb.h - 1));
  const p = pValue(t, opts.alternative, (x: number) => studentUpperTail(x, df));
  return freezeDeep({ trim, t: t === 0 ? 0 : t, df, p, difference: difference === 0 ? 0 : difference });
}
