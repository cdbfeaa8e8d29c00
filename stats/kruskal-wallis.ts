/**
 * kruskal-wallis.ts — the Kruskal–Wallis rank test for three or more conditions (the rank route of the
 * omnibus comparison), its effect size ε², and the pooled-rank analysis that Dunn's pairwise test shares.
 *
 * Hypotheses: H0: all conditions come from one distribution (every assignment of the pooled answers to
 * conditions of the observed sizes is equally likely); the alternative is that at least one condition
 * tends to give larger or smaller answers than the others (the test is one-sided in H: "some difference").
 *
 * Method (as R's kruskal.test)
 *   Pool the N answers; tied answers get the mean of the ranks they span (mid-ranks). With R̄_i the mean
 *   rank of condition i (n_i answers),
 *     H₀ = 12/(N(N + 1)) · Σ n_i (R̄_i − (N + 1)/2)²        (the same number as 12/(N(N+1)) Σ R_i²/n_i − 3(N + 1),
 *                                                            written without that cancellation),
 *     tie correction C = 1 − Σ(t³ − t)/(N³ − N) over the pooled tie groups of sizes t, evaluated as
 *       C = Σ t(N − t)(N + t) / (N³ − N) (no cancellation when most answers tie),
 *     H = H₀ / C,  df = k − 1,  p = P(χ²_{k−1} > H) (chi-square tail computed directly, distributions.ts).
 *   Effect size ε² = H / ((N² − 1)/(N + 1)) = H/(N − 1) (Kelley 1935's ε² in the rank form given by
 *   Tomczak & Tomczak 2014); 0 means no separation, 1 complete separation of the conditions.
 *   The pooled ranks come from a k-way merge of the conditions' sorted distinct values, so a bounded
 *   integer item costs O(D · k) (D distinct pooled values) whatever the number of answers.
 *
 * Undefined (null with a reason): fewer than two non-empty conditions; all answers equal (C = 0).
 *
 * References
 *   Kruskal, W. H. & Wallis, W. A. (1952). Use of ranks in one-criterion variance analysis. JASA 47(260),
 *     583–621. doi:10.1080/01621459.1952.10483441
 *   Kelley, T. L. (1935). An unbiased correlation ratio measure. PNAS 21(9), 554–559. doi:10.1073/pnas.21.9.554
 *   Tomczak, M. & Tomczak, E. (2014). The need to report effect size estimates revisited. An overview of some
 *     recommended measures of effect size. Trends in Sport Sciences 21(1), 19–25.
 *
 * Cost: O(D · k) time, O(k) memory beyond the inputs.
 */
import { chiSquareUpperTail } from './distributions.js';
import type { Sample } from './sample.js';
import { freezeDeep } from './types.js';

/** The pooled-rank facts every rank statistic of k conditions needs. */
export interface PooledRanks {
  /** Total number of answers. */
  readonly N: number;
  readonly sizes: readonly number[];
  /** Sum of mid-ranks of each condition. */
  readonly rankSums: readonly number[];
  /** Mean mid-rank of each condition (null for an empty condition). */
  readonly meanRanks: readonly (number | null)[];
  /** Σ t(N − t)(N + t) over the pooled tie groups = N³ − N − Σ(t³ − t). */
  readonly spread: number;
  /** Any pooled value occurring more than once. */
  readonly ties: boolean;
}

/** Mid-rank sums of k conditions by a k-way merge of their sorted distinct values. O(D · k). */
export function pooledRanks(groups: readonly Sample[]): PooledRanks {
  const k = groups.length;
  const pos = new Array<number>(k).fill(0);
  const rankSums = new Array<number>(k).fill(0);
  const sizes = groups.map((g) => g.n);
  const N = sizes.reduce((s, n) => s + n, 0);
  let below = 0;
  let spread = 0;
  let ties = false;
  for (;;) {
    let v = Infinity;
    let any = false;
    for (let i = 0; i < k; i++) {
      if (pos[i] < groups[i].values.length) {
        const x = groups[i].values[pos[i]];
        if (!any || x < v) v = x;
        any = true;
      }
    }
    if (!any) break;
    let t = 0;
    for (let i = 0; i < k; i++) {
      if (pos[i] < groups[i].values.length && groups[i].values[pos[i]] === v) t += groups[i].counts[pos[i]];
    }
    const midRank = below + (t + 1) / 2;
    for (let i = 0; i < k; i++) {
      if (pos[i] < groups[i].values.length && groups[i].values[pos[i]] === v) {
        rankSums[i] += groups[i].counts[pos[i]] * midRank;
        pos[i]++;
      }
    }
    spread += t * (N - t) * (N + t);
    if (t > 1) ties = true;
    below += t;
  }
  const meanRanks = rankSums.map((r, i) => (sizes[i] > 0 ? r / sizes[i] : null));
  return Object.freeze({ N, sizes: Object.freeze(sizes), rankSums: Object.freeze(rankSums), meanRanks: Object.freeze(meanRanks), spread, ties });
}

export interface KruskalWallisResult {
  /** H with the tie correction (R's "Kruskal-Wallis chi-squared"). */
  h: number | null;
  df: number | null;
  p: number | null;
  /** ε² = H/(N − 1). */
  epsilonSquared: number | null;
  /** True when tied answers were present and H was divided by the tie correction C. */
  tieCorrection: boolean;
  meanRanks: (number | null)[];
  reason?: string;
}

/** Kruskal–Wallis H test from a pooled-rank analysis. O(k). */
export function kruskalWallisFromRanks(r: PooledRanks): KruskalWallisResult {
  const nonEmpty = r.sizes.filter((n) => n > 0).length;
  const base = { tieCorrection: r.ties, meanRanks: [...r.meanRanks] };
  if (nonEmpty < 2) {
    return freezeDeep({ h: null, df: null, p: null, epsilonSquared: null, ...base, reason: 'The Kruskal–Wallis test needs at least two conditions with answers.' });
  }
  const N = r.N;
  if (!(r.spread > 0)) {
    return freezeDeep({
      h: null,
      df: nonEmpty - 1,
      p: null,
      epsilonSquared: null,
      ...base,
      reason: 'Every answer has the same value, so the ranks carry no information (the tie correction is 0) and H is undefined.',
    });
  }
  const centre = (N + 1) / 2;
  let sum = 0;
  for (let i = 0; i < r.sizes.length; i++) {
    if (r.sizes[i] === 0) continue;
    const d = (r.meanRanks[i] as number) - centre;
    sum += r.sizes[i] * d * d;
  }
  // H = 12/(N(N+1)) · Σ n_i d_i² / C with C = spread/(N³ − N) = spread/((N − 1) N (N + 1)):
  // H = 12 (N − 1) Σ n_i d_i² / spread.
  const h = (12 * (N - 1) * sum) / r.spread;
  const df = nonEmpty - 1;
  return freezeDeep({ h, df, p: chiSquareUpperTail(h, df), epsilonSquared: h / (N - 1), ...base });
}

/** Kruskal–Wallis rank test of k conditions (R: kruskal.test(list(...))). Empty conditions are left out of df. O(D · k). */
export function kruskalWallis(groups: readonly Sample[]): KruskalWallisResult {
  return kruskalWallisFromRanks(pooledRanks(groups));
}
