/**
 * Wilcoxon–Mann–Whitney rank-sum test of two independent samples, from their (values, counts) form.
 *
 * What it computes: U of a = #(a_i > b_j) + ½·#(a_i = b_j) over all n_a·n_b pairs (equal to R's `W`
 * from wilcox.test(a, b) and scipy's `U1`), its standardised value z and a p-value.
 *
 * Hypotheses: H0 — the two samples come from one distribution, so every split of the pooled
 * observations into groups of sizes n_a and n_b is equally likely (E[U] = n_a·n_b/2).
 *   "greater": a tends to be larger than b (P(A > B) + ½·P(A = B) > ½; large U);
 *   "less":    a tends to be smaller (small U);   "two-sided": either.
 *
 * Method.
 *   U by one merge of the two sorted distinct-value lists: U = Σ_{values v of a} c_a(v)·(#b below v + ½·c_b(v)).
 *   Tie groups: the distinct values of the pooled data, of sizes t_k (mid-ranks for ties).
 *   Tie-corrected variance  V = n_a n_b/12 · ((N + 1) − Σ(t³ − t)/(N(N − 1))),  N = n_a + n_b,
 *     evaluated as V = n_a n_b/12 · Σ_k t_k (N − t_k)(N + t_k) / (N(N − 1)), the same number written
 *     without the cancellation of (N + 1) against the tie sum.
 *   Normal method (as R's wilcox.test(exact = FALSE, correct = TRUE)):
 *     z = (U − n_a n_b/2 − CC)/√V with CC = sign(U − n_a n_b/2)·½ for "two-sided", +½ for "greater",
 *     −½ for "less" (R's sign-specific correction); p from the normal tail via erfc, never 1 − cdf:
 *     "less" Φ(z), "greater" 1 − Φ(z) = Q(z), "two-sided" 2·Q(|z|) (capped at 1).
 *   Exact method: the permutation distribution of U given the pooled values (with ties: given the tie
 *     pattern, i.e. the exact conditional distribution). One dynamic programme serves both cases: the
 *     pooled observations are taken in increasing order and each is assigned to the smaller group with
 *     the hypergeometric probability (m − j)/(N − M) (m the smaller group's size, j of its members
 *     already placed, M observations processed), otherwise to the other group. State: (j, partial U)
 *     with U in units of ½ when any tie group has an even size (mid-ranks are then half-integers) and
 *     in whole units otherwise; placing an observation of a tie group that starts after T observations
 *     and has size t adds (T − j) + (t − 1)/2 to U. Working with probabilities (not counts) keeps every
 *     number in [0, 1]: no overflow, and only additions of positive terms (no cancellation, so small
 *     tail probabilities keep full relative precision).
 *     p-values:
 *       no ties (R's pwilcox convention): "less" P(U ≤ u), "greater" P(U ≥ u), "two-sided"
 *         min(1, 2·P(U ≤ u)) if u ≤ n_a n_b/2, else min(1, 2·P(U ≥ u));
 *       ties (coin's convention for wilcox_test(distribution = "exact")): "less" P(U ≤ u), "greater"
 *         P(U ≥ u), "two-sided" P(|U − E| ≥ |u − E|), E = n_a n_b/2 (1 when u = E).
 *     z is then the standardised statistic (U − n_a n_b/2)/√V without continuity correction, so the field
 *     is always meaningful.
 *
 * The `exact` option:
 *   "auto"   — exact when there are no ties and n_a < 50 and n_b < 50 (R's rule); exact conditional when
 *              there are ties and the programme is cheap, i.e. its work estimate
 *              W = N · (m + 1) · (s·n_a·n_b + 1) ≤ AUTO_EXACT_WORK = 2e7 (s = 2 with a tie group of even
 *              size, else 1; m = min(n_a, n_b)). Measured on the project's 2-core machine: about 1 ms per
 *              1e6 units of W, so ≤ ≈ 20 ms (e.g. 40 + 40 answers on a 1–7 item: W = 1.05e7, 10 ms);
 *              otherwise the normal method.
 *   "always" — exact whenever W ≤ MAX_EXACT_WORK = 1e9 (≈ 1 s; e.g. 100 + 100 tied answers, W = 4e8,
 *              0.3 s) and the table (m + 1)·(s·n_a·n_b + 1) ≤ MAX_EXACT_CELLS = 1.6e7 doubles (128 MB);
 *              beyond either, a RangeError.
 *   "never"  — the normal method.
 *
 * Undefined results (null with a reason, never an exception): an empty group (u, z, p null); all values
 * equal across both groups (V = 0: z and p null, u = n_a n_b/2 still reported).
 *
 * References:
 *   Mann, H. B. & Whitney, D. R. (1947). On a test of whether one of two random variables is
 *     stochastically larger than the other. Ann. Math. Statist. 18(1), 50–60. doi:10.1214/aoms/1177730491
 *   Wilcoxon, F. (1945). Individual comparisons by ranking methods. Biometrics Bull. 1(6), 80–83.
 *     doi:10.2307/3001968
 *   Hollander, M., Wolfe, D. A. & Chicken, E. (2014). Nonparametric Statistical Methods, 3rd ed., §4.1
 *     (tie-corrected variance).
 *   Streitberg, B. & Röhmel, J. (1986). Exact distributions for permutation and rank tests. Statistical
 *     Software Newsletter 12(1), 10–17 (the conditional distribution given ties; used by R's coin).
 *   Black-box references (tests/fixtures/r-reference.json): R 4.2.2 stats::wilcox.test; coin 1.4-2
 *     wilcox_test(distribution = "exact") with its pvalue() and qperm().
 *
 * Cost: U, V and the normal p in O(K_a + K_b) (K the number of distinct values). The exact distribution
 * in O(N · m · s·n_a·n_b) time at worst (bounded by the limits above) and O(m · s·n_a·n_b) memory.
 */
import { normalUpperTail } from './distributions.js';
import type { Sample } from './sample.js';
import { freezeDeep, type Alternative, type ExactMode, type MannWhitneyResult } from './types.js';

export type { MannWhitneyResult } from './types.js';

/** Work bound for choosing the exact conditional distribution under exact: "auto" (≈ 20 ms). */
export const AUTO_EXACT_WORK = 2e7;
/** Work bound for exact: "always"; beyond it (or beyond MAX_EXACT_CELLS) a RangeError. */
export const MAX_EXACT_WORK = 1e9;
/** Memory bound (number of doubles in the programme's table) for exact: "always". */
export const MAX_EXACT_CELLS = 1.6e7;

const ALTERNATIVES: readonly Alternative[] = ['two-sided', 'less', 'greater'];
const EXACT_MODES: readonly ExactMode[] = ['auto', 'always', 'never'];

/** The exact null distribution of U (of group a), conditional on the pooled tie pattern. */
export interface ExactRankSumDistribution {
  /** 1 when U takes whole values only, 2 when it moves in steps of ½ (some tie group of even size). */
  readonly unitsPerU: 1 | 2;
  /** probabilities[i] = P(U = i / unitsPerU), i = 0 … unitsPerU·n_a·n_b. */
  readonly probabilities: Float64Array;
  /** True when the pooled data have no ties (the classical distribution of R's pwilcox). */
  readonly tieFree: boolean;
}

/** Everything the rank-sum test knows about a pair of samples (shared with hodges-lehmann.ts). */
export interface RankSumAnalysis {
  readonly nA: number;
  readonly nB: number;
  /** U of a, or null when a group is empty. */
  readonly u: number | null;
  /** Tie-corrected variance of U under H0 (null when a group is empty). */
  readonly variance: number | null;
  /** Any value occurring more than once in the pooled data. */
  readonly ties: boolean;
  readonly method: 'exact' | 'normal';
  /** The exact distribution when method is "exact" and both groups are non-empty, else null. */
  readonly exact: ExactRankSumDistribution | null;
  readonly reason?: string;
}

interface TiePattern {
  /** Pooled tie-group sizes t_k in increasing order of value. */
  sizes: Float64Array;
  u: number;
  /** Σ_k t_k (N − t_k)(N + t_k) = N³ − N − Σ(t³ − t). */
  spread: number;
  ties: boolean;
  anyEven: boolean;
}

/** Merge the two sorted distinct-value lists: tie groups, U of a and the tie sum. O(K_a + K_b). */
function tiePattern(a: Sample, b: Sample): TiePattern {
  const av = a.values;
  const ac = a.counts;
  const bv = b.values;
  const bc = b.counts;
  const N = a.n + b.n;
  const sizes = new Float64Array(av.length + bv.length);
  let g = 0;
  let i = 0;
  let j = 0;
  let bBelow = 0;
  let u = 0;
  let spread = 0;
  let ties = false;
  let anyEven = false;
  while (i < av.length || j < bv.length) {
    let ca = 0;
    let cb = 0;
    if (j >= bv.length || (i < av.length && av[i] < bv[j])) {
      ca = ac[i++];
    } else if (i >= av.length || bv[j] < av[i]) {
      cb = bc[j++];
    } else {
      ca = ac[i++];
      cb = bc[j++];
    }
    u += ca * (bBelow + 0.5 * cb);
    bBelow += cb;
    const t = ca + cb;
    sizes[g++] = t;
    spread += t * (N - t) * (N + t);
    if (t > 1) ties = true;
    if (t % 2 === 0) anyEven = true;
  }
  return { sizes: sizes.subarray(0, g), u, spread, ties, anyEven };
}

function checkOptions(alternative: Alternative, exact: ExactMode): void {
  if (!ALTERNATIVES.includes(alternative)) {
    throw new RangeError(`alternative is "${String(alternative)}"; use one of ${ALTERNATIVES.join(', ')}`);
  }
  if (!EXACT_MODES.includes(exact)) {
    throw new RangeError(`exact is "${String(exact)}"; use one of ${EXACT_MODES.join(', ')}`);
  }
}

/** Work estimate and table size of the exact programme for groups of sizes nA, nB. */
export function exactCost(nA: number, nB: number, unitsPerU: 1 | 2): { work: number; cells: number } {
  const m = Math.min(nA, nB);
  const width = unitsPerU * nA * nB + 1;
  return { work: (nA + nB) * (m + 1) * width, cells: (m + 1) * width };
}

/**
 * The exact distribution of U of a given the pooled tie-group sizes (in increasing order of value).
 * Dynamic programme described in the header. Throws nothing; callers bound its size.
 */
export function exactDistribution(nA: number, nB: number, sizes: ArrayLike<number>): ExactRankSumDistribution {
  let anyEven = false;
  let tieFree = true;
  for (let g = 0; g < sizes.length; g++) {
    if (sizes[g] % 2 === 0) anyEven = true;
    if (sizes[g] > 1) tieFree = false;
  }
  const s: 1 | 2 = anyEven ? 2 : 1;
  const N = nA + nB;
  const smallIsA = nA <= nB;
  const m = smallIsA ? nA : nB;
  const other = N - m;
  const width = s * m * other + 1;
  const f = new Float64Array((m + 1) * width);
  const lo = new Int32Array(m + 1).fill(width);
  const hi = new Int32Array(m + 1).fill(-1);
  f[0] = 1;
  lo[0] = 0;
  hi[0] = 0;
  let M = 0; // observations processed
  let T = 0; // observations before the current tie group
  for (let g = 0; g < sizes.length; g++) {
    const t = sizes[g];
    // shift (in units of 1/s) for placing one observation of this group in the small group when j are placed:
    // s·((T − j) + (t − 1)/2)
    const base = s === 2 ? 2 * T + t - 1 : T + (t - 1) / 2;
    for (let r = 0; r < t; r++, M++) {
      const remaining = N - M; // observations not yet placed, including this one
      const jMinNew = Math.max(0, m - (remaining - 1));
      const jMaxNew = Math.min(M + 1, m);
      for (let jn = jMaxNew; jn >= jMinNew; jn--) {
        const row = jn * width;
        // stay: this observation goes to the other group, from state jn
        if (jn <= M && hi[jn] >= lo[jn]) {
          const slotsOther = remaining - (m - jn);
          const pNot = slotsOther / remaining;
          if (pNot <= 0) {
            for (let x = lo[jn]; x <= hi[jn]; x++) f[row + x] = 0;
            lo[jn] = width;
            hi[jn] = -1;
          } else if (pNot !== 1) {
            for (let x = lo[jn]; x <= hi[jn]; x++) f[row + x] *= pNot;
          }
        }
        // move: from state jn − 1, this observation goes to the small group
        if (jn >= 1) {
          const jo = jn - 1;
          if (hi[jo] >= lo[jo]) {
            const pSel = (m - jo) / remaining;
            const shift = base - s * jo;
            const prev = jo * width;
            const from = lo[jo];
            const to = Math.min(hi[jo], width - 1 - shift);
            if (to >= from) {
              const dst = row + shift;
              for (let x = from; x <= to; x++) f[dst + x] += pSel * f[prev + x];
              if (from + shift < lo[jn]) lo[jn] = from + shift;
              if (to + shift > hi[jn]) hi[jn] = to + shift;
            }
          }
        }
      }
    }
    T += t;
  }
  const probs = new Float64Array(width);
  const last = m * width;
  if (smallIsA) {
    for (let x = 0; x < width; x++) probs[x] = f[last + x];
  } else {
    // U of a = n_a n_b − U of b
    for (let x = 0; x < width; x++) probs[width - 1 - x] = f[last + x];
  }
  return Object.freeze({ unitsPerU: s, probabilities: probs, tieFree });
}

/** P(U ≤ u) under an exact distribution (summed from the lower end; no 1 − x). */
export function exactCdf(dist: ExactRankSumDistribution, u: number): number {
  const p = dist.probabilities;
  const top = Math.min(p.length - 1, Math.floor(u * dist.unitsPerU + 1e-9));
  let sum = 0;
  for (let x = 0; x <= top; x++) sum += p[x];
  return Math.min(1, sum);
}

/** P(U ≥ u) under an exact distribution (summed from the upper end). */
export function exactSf(dist: ExactRankSumDistribution, u: number): number {
  const p = dist.probabilities;
  const bottom = Math.max(0, Math.ceil(u * dist.unitsPerU - 1e-9));
  let sum = 0;
  for (let x = p.length - 1; x >= bottom; x--) sum += p[x];
  return Math.min(1, sum);
}

/**
 * Exact p-value of the observed U = u (header, "p-values"): "less" P(U ≤ u), "greater" P(U ≥ u);
 * "two-sided" without ties twice the tail on the side of u from the centre E = n_a n_b/2, capped at 1 (the
 * tie-free distribution is symmetric about E, so this is also P(|U − E| ≥ |u − E|)); with ties, whose
 * conditional distribution need not be symmetric, P(|U − E| ≥ |u − E|) itself, the sum of the two tails
 * beyond distance |u − E| from E (1 when u = E). Distances are multiples of ½, so they are exact. O(n_a n_b).
 */
function exactPValue(dist: ExactRankSumDistribution, u: number, nA: number, nB: number, alternative: Alternative): number {
  if (alternative === 'less') return exactCdf(dist, u);
  if (alternative === 'greater') return exactSf(dist, u);
  const centre = (nA * nB) / 2;
  if (dist.tieFree) return Math.min(1, 2 * (u <= centre ? exactCdf(dist, u) : exactSf(dist, u)));
  const distance = Math.abs(u - centre);
  if (distance === 0) return 1;
  return Math.min(1, exactCdf(dist, centre - distance) + exactSf(dist, centre + distance));
}

/** Choose the method and compute U, V and (when exact) the exact distribution. */
export function analyseRankSum(a: Sample, b: Sample, exact: ExactMode = 'auto'): RankSumAnalysis {
  checkOptions('two-sided', exact);
  const nA = a.n;
  const nB = b.n;
  if (nA === 0 || nB === 0) {
    return Object.freeze({
      nA,
      nB,
      u: null,
      variance: null,
      ties: false,
      method: exact === 'never' ? 'normal' : 'exact',
      exact: null,
      reason: `group ${nA === 0 ? 'a' : 'b'} has no observations, so U is undefined`,
    });
  }
  const tp = tiePattern(a, b);
  const N = nA + nB;
  const variance = N > 1 ? ((nA * nB) / 12) * (tp.spread / (N * (N - 1))) : 0;
  const s: 1 | 2 = tp.anyEven ? 2 : 1;
  const cost = exactCost(nA, nB, s);
  let method: 'exact' | 'normal';
  if (exact === 'never') {
    method = 'normal';
  } else if (exact === 'always') {
    if (cost.work > MAX_EXACT_WORK || cost.cells > MAX_EXACT_CELLS) {
      throw new RangeError(
        `exact: "always" is limited to N·(m+1)·(${s}·n_a·n_b+1) ≤ ${MAX_EXACT_WORK} and (m+1)·(${s}·n_a·n_b+1) ≤ ${MAX_EXACT_CELLS} ` +
          `(n_a = ${nA}, n_b = ${nB}, m = min(n_a, n_b)); use exact: "auto" or "never" for samples this large`,
      );
    }
    method = 'exact';
  } else if (!tp.ties) {
    method = nA < 50 && nB < 50 ? 'exact' : 'normal';
  } else {
    method = cost.work <= AUTO_EXACT_WORK ? 'exact' : 'normal';
  }
  const dist = method === 'exact' ? exactDistribution(nA, nB, tp.sizes) : null;
  return Object.freeze({ nA, nB, u: tp.u, variance, ties: tp.ties, method, exact: dist });
}

/**
 * The Wilcoxon–Mann–Whitney rank-sum test of a against b (see the header for the method and the
 * `exact` rule). Returns a frozen MannWhitneyResult.
 */
export function rankSum(
  a: Sample,
  b: Sample,
  opts: { alternative: Alternative; exact: ExactMode },
): MannWhitneyResult {
  checkOptions(opts.alternative, opts.exact);
  const an = analyseRankSum(a, b, opts.exact);
  return rankSumFromAnalysis(an, opts.alternative);
}

/** The public result from an analysis already made (lets callers share one analysis). */
export function rankSumFromAnalysis(an: RankSumAnalysis, alternative: Alternative): MannWhitneyResult {
  checkOptions(alternative, 'auto');
  const isExact = an.method === 'exact';
  if (an.u === null || an.variance === null) {
    return freezeDeep({
      u: null,
      z: null,
      p: null,
      method: an.method,
      continuityCorrection: !isExact,
      tieCorrection: false,
      reason: an.reason ?? 'U is undefined',
    });
  }
  const u = an.u;
  const half = (an.nA * an.nB) / 2;
  if (!(an.variance > 0)) {
    return freezeDeep({
      u,
      z: null,
      p: null,
      method: an.method,
      continuityCorrection: !isExact,
      tieCorrection: an.ties,
      reason: 'all observations in both groups are equal, so U has no variance and z and p are undefined',
    });
  }
  const sigma = Math.sqrt(an.variance);
  if (isExact && an.exact !== null) {
    const z = (u - half) / sigma;
    const p = exactPValue(an.exact, u, an.nA, an.nB, alternative);
    return freezeDeep({ u, z, p, method: 'exact', continuityCorrection: false, tieCorrection: an.ties });
  }
  const d = u - half;
  const correction = alternative === 'two-sided' ? Math.sign(d) * 0.5 : alternative === 'greater' ? 0.5 : -0.5;
  const z = (d - correction) / sigma;
  let p: number;
  if (alternative === 'less') p = normalUpperTail(-z);
  else if (alternative === 'greater') p = normalUpperTail(z);
  else p = Math.min(1, 2 * normalUpperTail(Math.abs(z)));
  return freezeDeep({ u, z, p, method: 'normal', continuityCorrection: true, tieCorrection: an.ties });
}
