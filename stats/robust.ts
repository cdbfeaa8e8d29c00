/**
 * Robust companions to the t and rank-sum tests: the Brunner–Munzel test and Yuen's trimmed-mean
 * Welch test, both computed from the (values, counts) form of the Samples without expanding them.
 *
 * ── Brunner–Munzel (the nonparametric Behrens–Fisher problem; Brunner & Munzel 2000) ────────────────
 * Estimand: the relative effect p = P(A < B) + ½·P(A = B). H0: p = ½ (neither group tends to give
 * larger values), with no assumption that the two distributions have the same shape or spread — so it
 * stays valid where the rank-sum test is not a test of location. Alternatives, in the project's words
 * (types.ts): "greater" — a tends to be larger than b (p < ½); "less" — a tends to be smaller (p > ½);
 * "two-sided" — p ≠ ½.
 * Sign convention: the project's a − b direction — `statistic` is POSITIVE WHEN a TENDS TO BE LARGER,
 * like Welch's t. It is −1 × scipy.stats.brunnermunzel(a, b).statistic (whose sign is positive when b
 * tends to be larger); the p-values equal scipy's for the same alternative (tests/fixtures/scipy-reference.json).
 * Method (Brunner & Munzel 2000, with mid-ranks so that ties are allowed). With N = n_a + n_b,
 * R_k the mid-rank of observation k among all N and R^(own)_k its mid-rank within its own group, the
 * difference R_k − R^(own)_k is the observation's placement among the other group,
 *   P(v) = #(other < v) + ½·#(other = v),
 * and the paper's rank means and variance estimators are written through the placements:
 *   R̄_b − R̄_a = N·(n_a n_b/2 − U_a)/(n_a n_b),   U_a = Σ_{a} P  (the Mann–Whitney count of a),
 *   S²_a = Σ_{a} (P − P̄_a)² / (n_a − 1)   (the paper's S²_1 = Σ (R − R^(1) − R̄_1 + (n_1 + 1)/2)² / (n_1 − 1)),
 *   S²_b likewise; σ̂²_a = S²_a / n_b²,  σ̂²_b = S²_b / n_a²   (the paper's S²_i / (N − n_i)²).
 * The paper's statistic W = (R̄_b − R̄_a) / (√N·σ̂_N), σ̂²_N = N·(σ̂²_a/n_a + σ̂²_b/n_b), simplifies to
 *   W = (n_a n_b/2 − U_a) / √(n_a S²_a + n_b S²_b),
 * and the project reports statistic = −W = (U_a − n_a n_b/2) / √(n_a S²_a + n_b S²_b), whose numerator is
 * exact (U_a is a multiple of ½). Its small-sample approximation is Student's t with
 *   df = (n_a S²_a + n_b S²_b)² / ((n_a S²_a)²/(n_a − 1) + (n_b S²_b)²/(n_b − 1))
 * (the paper's f̂, a Satterthwaite–Welch form, after multiplying its terms by n_a² n_b²/N); when one of the
 * two terms is 0 the formula is exactly n − 1 of the other group, and that value is returned as such.
 * The p-value comes from the Student tails of distributions.ts (computed directly, never as 1 − cdf).
 * Undefined (null with reason): a group with fewer than 2 observations (S² divides by n − 1), or
 * n_a S²_a + n_b S²_b = 0 (both groups constant, or the groups completely separated with no ties across).
 *
 * ── Yuen–Welch (Yuen 1974) ────────────────────────────────────────────────────────────────────────
 * Estimand: the difference of the γ-trimmed population means, a − b (γ = `trim`, default 0.2).
 * H0: equal trimmed means; "greater": trimmed mean of a larger; "less": smaller; "two-sided": differ.
 * Method (Yuen 1974). In each group of n sorted values x_(1) ≤ … ≤ x_(n):
 *   g = ⌊γ·n⌋ values are cut from each end, h = n − 2g remain;
 *   trimmed mean  x̄_t = (x_(g+1) + … + x_(n−g)) / h;
 *   winsorized sample y: the g lowest values replaced by x_(g+1), the g highest by x_(n−g); ȳ its mean;
 *   SSD_w = Σ (y_i − ȳ)²;   d = SSD_w / (h (h − 1));
 *   t = (x̄_t,a − x̄_t,b) / √(d_a + d_b);
 *   df = (d_a + d_b)² / (d_a²/(h_a − 1) + d_b²/(h_b − 1))   (Welch's approximation, as in the paper;
 *   exactly h − 1 of the other group when one d is 0);
 *   p from Student's t (direct tails). `difference` = x̄_t,a − x̄_t,b.
 * The trimming count is the project's rule: g = ⌊γ·n·(1 + 4ε)⌋ (ε = Number.EPSILON), at most ⌊(n − 1)/2⌋.
 * The product γ·n of a decimal γ such as 0.29 and n = 100 can land a hair below the whole number it stands
 * for (0.29 × 100 = 28.999999999999996 in double precision); the relative nudge of 4ε, larger than the ≤ ε
 * rounding of γ and of the product together, restores it, while any γ·n that is really below a whole number
 * by more than 4ε relative (every γ given to fewer than 15 significant digits) is unaffected. For the
 * service's γ = 0.2 and every fixture, g is the same as scipy.stats.ttest_ind(trim=0.2)
 * (tests/fixtures/scipy-reference.json); the cap keeps at least one value, so the trimmed mean exists.
 * Every quantity is a function of the cumulative counts: each distinct value is weighted by how many of
 * its copies fall inside the kept ranks g+1 … n−g (trimmed sum) and by how many winsorized positions take
 * it (winsorized sums). Sums are taken about x_(g+1), so that large offsets (e.g. 1e12) do not swamp the
 * deviations, and the difference is formed as (shift_a − shift_b) + (offset_a − offset_b).
 * Undefined (null with reason): h < 2 in a group (no variance), or d_a = d_b = 0 (the difference is still
 * reported when the trimmed means exist).
 *
 * References:
 *   Brunner, E. & Munzel, U. (2000). The nonparametric Behrens–Fisher problem: asymptotic theory and a
 *     small-sample approximation. Biometrical Journal 42(1), 17–25.
 *     doi:10.1002/(SICI)1521-4036(200001)42:1<17::AID-BIMJ17>3.0.CO;2-U
 *   Yuen, K. K. (1974). The two-sample trimmed t for unequal population variances. Biometrika 61(1),
 *     165–170. doi:10.1093/biomet/61.1.165
 *   Welch, B. L. (1947). The generalization of "Student's" problem when several different population
 *     variances are involved. Biometrika 34(1/2), 28–35. doi:10.1093/biomet/34.1-2.28
 *   Black-box reference: scipy 1.10.1, scipy.stats.brunnermunzel and scipy.stats.ttest_ind(trim=0.2)
 *     (tests/reference/make-scipy-fixtures.py).
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
 * Welch–Satterthwaite degrees of freedom (u + v)² / (u²/m + v²/k) of a sum of two variance terms u, v ≥ 0
 * with m and k degrees of freedom. When one term is 0 the value is exactly the other's degrees of freedom,
 * returned as such (the quotient x²/(x²/k) can round to a neighbour of k). Not both 0.
 */
function satterthwaite(u: number, m: number, v: number, k: number): number {
  if (u === 0) return k;
  if (v === 0) return m;
  return (u + v) ** 2 / ((u * u) / m + (v * v) / k);
}

// ── Brunner–Munzel ──────────────────────────────────────────────────────────────────────────────────

interface PlacementSummary {
  /** Σ of the placements of the observations of the group among the other group (its Mann–Whitney count). */
  total: number;
  /** Σ (P − P̄)², the squared deviations of the placements from their mean. */
  squaredDeviations: number;
}

/**
 * Placements P(v) = #(other < v) + ½·#(other = v) of every distinct value v of `group` among `other`,
 * found by walking both sorted value lists once, then their count-weighted total and squared deviations
 * (mean first, then deviations). O(K_group + K_other).
 */
function placementSummary(group: Sample, other: Sample): PlacementSummary {
  const values = group.values;
  const counts = group.counts;
  const placements = new Float64Array(values.length);
  let below = 0; // observations of `other` strictly below the current value
  let j = 0;
  let total = 0;
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    while (j < other.values.length && other.values[j] < v) {
      below += other.counts[j];
      j++;
    }
    const equal = j < other.values.length && other.values[j] === v ? other.counts[j] : 0;
    placements[i] = below + equal / 2;
    total += counts[i] * placements[i];
  }
  const mean = total / group.n;
  let squaredDeviations = 0;
  for (let i = 0; i < values.length; i++) {
    const deviation = placements[i] - mean;
    squaredDeviations += counts[i] * deviation * deviation;
  }
  return { total, squaredDeviations };
}

function brunnerMunzelUndefined(reason: string): BrunnerMunzelResult {
  return freezeDeep({ statistic: null, df: null, p: null, reason });
}

/**
 * Brunner–Munzel test of H0: P(A < B) + ½P(A = B) = ½, with the paper's Student-t small-sample
 * approximation. `statistic` is positive when a tends to be larger. O(K_a + K_b).
 */
export function brunnerMunzel(a: Sample, b: Sample, opts: { alternative: Alternative }): BrunnerMunzelResult {
  checkAlternative(opts.alternative);
  if (a.n < 2 || b.n < 2) {
    const group = a.n < 2 ? 'a' : 'b';
    const n = a.n < 2 ? a.n : b.n;
    return brunnerMunzelUndefined(
      `group ${group} has ${n} observation${n === 1 ? '' : 's'}; the Brunner–Munzel variance estimate needs at least 2 in each group`,
    );
  }
  const pa = placementSummary(a, b);
  const pb = placementSummary(b, a);
  // n_a·S²_a and n_b·S²_b, the two terms of the variance estimate
  const termA = (a.n * pa.squaredDeviations) / (a.n - 1);
  const termB = (b.n * pb.squaredDeviations) / (b.n - 1);
  const numerator = pa.total - (a.n * b.n) / 2; // exact: multiples of ½ far below 2^53
  const variance = termA + termB;
  if (variance === 0) {
    if (numerator === 0) {
      return brunnerMunzelUndefined(
        'every observation equals every observation of the other group: the statistic is 0/0 (no variation at all)',
      );
    }
    return brunnerMunzelUndefined(
      'the placements do not vary within either group (both groups constant, or the groups completely separated ' +
        'with no ties across), so the variance estimate is 0 and the statistic is unbounded',
    );
  }
  const statistic = numerator / Math.sqrt(variance);
  const df = satterthwaite(termA, a.n - 1, termB, b.n - 1);
  const p = pValue(statistic, opts.alternative, (x) => studentUpperTail(x, df));
  return freezeDeep({ statistic, df, p });
}

// ── Yuen–Welch ──────────────────────────────────────────────────────────────────────────────────────

/** The project's trimming count ⌊γ·n·(1 + 4ε)⌋, capped at ⌊(n − 1)/2⌋ (header). */
export function trimmedCount(n: number, trim: number): number {
  if (n <= 0) return 0;
  return Math.min(Math.floor(trim * n * (1 + 4 * Number.EPSILON)), Math.floor((n - 1) / 2));
}

interface TrimmedSummary {
  /** Values cut from each end. */
  cut: number;
  /** Values kept, n − 2·cut. */
  kept: number;
  /** x_(cut+1), the value sums are taken about. */
  shift: number;
  /** Trimmed mean minus shift. */
  trimmedOffset: number;
  /** Σ (y − ȳ)² of the winsorized sample. */
  winsorizedSquares: number;
}

/** Trimmed mean and winsorized sum of squares of a non-empty Sample from its cumulative counts. O(K). */
function trimmedSummary(s: Sample, trim: number): TrimmedSummary {
  const n = s.n;
  const cut = trimmedCount(n, trim);
  const kept = n - 2 * cut;
  const first = cut + 1; // rank of the lowest kept value (1-based)
  const last = n - cut; //  rank of the highest kept value
  const values = s.values;
  const counts = s.counts;
  // Weights: kept copies of each distinct value, and winsorized positions that take it.
  const keptWeight = new Float64Array(values.length);
  const winsorWeight = new Float64Array(values.length);
  let shift = Number.NaN;
  let rankBefore = 0; // observations below the current distinct value
  for (let i = 0; i < values.length; i++) {
    const low = rankBefore + 1;
    const high = rankBefore + counts[i];
    const overlap = Math.max(0, Math.min(high, last) - Math.max(low, first) + 1);
    keptWeight[i] = overlap;
    let w = overlap;
    if (low <= first && first <= high) {
      w += cut; // the cut lowest positions take x_(first)
      shift = values[i];
    }
    if (low <= last && last <= high) w += cut; // the cut highest positions take x_(last)
    winsorWeight[i] = w;
    rankBefore = high;
  }
  let trimmedSum = 0;
  let winsorSum = 0;
  for (let i = 0; i < values.length; i++) {
    const deviation = values[i] - shift;
    trimmedSum += keptWeight[i] * deviation;
    winsorSum += winsorWeight[i] * deviation;
  }
  const winsorOffset = winsorSum / n;
  let winsorizedSquares = 0;
  for (let i = 0; i < values.length; i++) {
    if (winsorWeight[i] === 0) continue;
    const deviation = values[i] - shift - winsorOffset;
    winsorizedSquares += winsorWeight[i] * deviation * deviation;
  }
  return { cut, kept, shift, trimmedOffset: trimmedSum / kept, winsorizedSquares };
}

function yuenUndefined(trim: number, difference: number | null, reason: string): YuenWelchResult {
  return freezeDeep({ trim, t: null, df: null, p: null, difference, reason });
}

/**
 * Yuen's two-sample trimmed t test with Welch's degrees of freedom. `trim` γ in [0, 0.5), default 0.2;
 * g = ⌊γ·n⌋ values are trimmed from each end of each group (the project's rule, header). O(K_a + K_b).
 */
export function yuenWelch(a: Sample, b: Sample, opts: { alternative: Alternative; trim?: number }): YuenWelchResult {
  checkAlternative(opts.alternative);
  const trim = opts.trim ?? 0.2;
  if (typeof trim !== 'number' || !Number.isFinite(trim) || trim < 0 || trim >= 0.5) {
    throw new RangeError(`trim is ${String(trim)}; a proportion in [0, 0.5) was expected`);
  }
  if (a.n === 0 || b.n === 0) {
    return yuenUndefined(trim, null, `group ${a.n === 0 ? 'a' : 'b'} has no observations, so it has no trimmed mean`);
  }
  const sa = trimmedSummary(a, trim);
  const sb = trimmedSummary(b, trim);
  const difference = sa.shift - sb.shift + (sa.trimmedOffset - sb.trimmedOffset);
  for (const [name, s] of [['a', sa], ['b', sb]] as const) {
    if (s.kept < 2) {
      return yuenUndefined(
        trim,
        difference,
        `group ${name} keeps ${s.kept} observation after trimming ${s.cut} from each end; Yuen's test needs at least 2 in each group`,
      );
    }
  }
  const da = sa.winsorizedSquares / (sa.kept * (sa.kept - 1));
  const db = sb.winsorizedSquares / (sb.kept * (sb.kept - 1));
  if (da + db === 0) {
    return yuenUndefined(trim, difference, 'both winsorized samples are constant, so the standard error is 0 and t is unbounded');
  }
  const t = difference / Math.sqrt(da + db);
  const df = satterthwaite(da, sa.kept - 1, db, sb.kept - 1);
  const p = pValue(t, opts.alternative, (x) => studentUpperTail(x, df));
  return freezeDeep({ trim, t, df, p, difference });
}
