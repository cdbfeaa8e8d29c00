/**
 * games-howell.ts — the Games–Howell pairwise comparison of means after a Welch ANOVA: every pair of
 * conditions by a Welch t statistic, with its p-value from the studentized range for k means, which
 * holds the family-wise error rate near α without assuming equal variances or equal sizes.
 *
 * Hypotheses for a pair (i, j): H0: μ_i = μ_j; the alternative is two-sided (μ_i ≠ μ_j). The difference
 * is i − j (the first condition of the pair minus the second, in input order).
 *
 * Method (Games & Howell 1976)
 *   d = x̄_i − x̄_j,  se = √(s_i²/n_i + s_j²/n_j),  t = d/se,
 *   ν = se⁴ / [ (s_i²/n_i)²/(n_i − 1) + (s_j²/n_j)²/(n_j − 1) ]   (Welch–Satterthwaite; welch.ts computes t, se, ν),
 *   p = P(Q_{k,ν} > |t|·√2)  with Q the studentized range of k means (studentized-range.ts), k = the number
 *   of conditions in the family. The p is already adjusted for the k(k − 1)/2 comparisons (no Holm on top).
 *
 * References
 *   Games, P. A. & Howell, J. F. (1976). Pairwise multiple comparison procedures with unequal n's and/or
 *     variances: a Monte Carlo study. Journal of Educational Statistics 1(2), 113–125. doi:10.3102/10769986001002113
 *   Welch (1947), Satterthwaite (1946): see welch.ts.
 *
 * Cost: O(k²) Welch statistics from the moments plus k(k − 1)/2 studentized-range tails (each bounded,
 * typically 5–30 ms; see studentized-range.ts).
 */
import type { Moments } from './descriptives.js';
import { studentizedRangeUpperTail } from './studentized-range.js';
import { freezeDeep } from './types.js';
import { welchFromMoments } from './welch.js';

export interface GamesHowellPair {
  /** Indices of the two conditions (i < j, input order); the difference is i − j. */
  i: number;
  j: number;
  meanDifference: number | null;
  se: number | null;
  t: number | null;
  /** Welch–Satterthwaite degrees of freedom. */
  df: number | null;
  /** |t|·√2, the studentized range statistic. */
  q: number | null;
  /** P(Q_{k,df} > q): family-wise adjusted, two-sided. */
  p: number | null;
  reason?: string;
}

/** Games–Howell for every pair i < j of the k conditions whose moments are given, in the order (0,1), (0,2), …, (1,2), … */
export function gamesHowellPairs(ms: readonly Moments[]): GamesHowellPair[] {
  const k = ms.length;
  const out: GamesHowellPair[] = [];
  for (let i = 0; i < k; i++) {
    for (let j = i + 1; j < k; j++) {
      const w = welchFromMoments(ms[i], ms[j], { alternative: 'two-sided', confidenceLevel: 0.95 });
      if (w.t === null || w.df === null || k < 2) {
        out.push({ i, j, meanDifference: w.meanDifference, se: w.se, t: null, df: null, q: null, p: null, reason: w.reason ?? 'undefined' });
        continue;
      }
      const q = Math.abs(w.t) * Math.SQRT2;
      out.push({ i, j, meanDifference: w.meanDifference, se: w.se, t: w.t, df: w.df, q, p: studentizedRangeUpperTail(q, k, w.df) });
    }
  }
  return freezeDeep(out);
}
