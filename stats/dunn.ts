/**
 * dunn.ts — Dunn's pairwise rank test after a Kruskal–Wallis test: every pair of conditions compared on
 * the pooled mid-ranks, with Holm's adjustment over all pairs.
 *
 * Hypotheses for a pair (i, j): H0: conditions i and j have the same mean pooled rank (neither tends to
 * give larger answers); the alternative is TWO-SIDED: their mean ranks differ in either direction. The p
 * reported is two-sided, 2·P(Z > |z|) (packages differ on this: some report one-sided p = P(Z > |z|)).
 * The difference is i − j (first condition of the pair minus the second, in input order).
 *
 * Method (Dunn 1964; the tie-corrected variance as given by Hollander, Wolfe & Chicken 2014)
 *   z_ij = (R̄_i − R̄_j) / √( [N(N + 1)/12 − Σ(t³ − t)/(12(N − 1))] · (1/n_i + 1/n_j) ),
 *   where the bracket equals Σ t(N − t)(N + t) / (12(N − 1)) (the form used here; no cancellation).
 *   p_ij = 2·Q(|z_ij|) by the normal tail (erfc-accurate, distributions.ts); Holm-adjusted over the
 *   k(k − 1)/2 pairs with the project's adjust.ts (identical to R's p.adjust(method = "holm")).
 *
 * References
 *   Dunn, O. J. (1964). Multiple comparisons using rank sums. Technometrics 6(3), 241–252.
 *     doi:10.1080/00401706.1964.10490181
 *   Holm, S. (1979). Scand. J. Statist. 6, 65–70 (see adjust.ts).
 *   Hollander, M., Wolfe, D. A. & Chicken, E. (2014). Nonparametric Statistical Methods, 3rd ed. Wiley.
 *
 * Cost: O(k²) from the pooled ranks (kruskal-wallis.ts, O(D · k)) plus O(k² log k) for Holm.
 */
import { adjustPValues } from './adjust.js';
import { normalUpperTail } from './distributions.js';
import type { PooledRanks } from './kruskal-wallis.js';
import { freezeDeep } from './types.js';

export interface DunnPair {
  /** Indices of the two conditions (i < j, input order); the difference is i − j. */
  i: number;
  j: number;
  meanRankDifference: number | null;
  z: number | null;
  /** Two-sided p = 2·P(Z > |z|). */
  p: number | null;
  /** Holm-adjusted two-sided p over all pairs with a p. */
  pHolm: number | null;
  sidedness: 'two-sided';
  reason?: string;
}

/** Dunn's test for every pair i < j, in the order (0,1), (0,2), …, (1,2), … . */
export function dunnPairs(r: PooledRanks): DunnPair[] {
  const k = r.sizes.length;
  const N = r.N;
  const raw: Omit<DunnPair, 'pHolm'>[] = [];
  for (let i = 0; i < k; i++) {
    for (let j = i + 1; j < k; j++) {
      const ni = r.sizes[i];
      const nj = r.sizes[j];
      if (ni === 0 || nj === 0) {
        raw.push({ i, j, meanRankDifference: null, z: null, p: null, sidedness: 'two-sided', reason: 'A condition of this pair has no answers.' });
        continue;
      }
      const diff = (r.meanRanks[i] as number) - (r.meanRanks[j] as number);
      if (!(r.spread > 0) || N < 2) {
        raw.push({ i, j, meanRankDifference: diff, z: null, p: null, sidedness: 'two-sided', reason: 'Every answer has the same value, so the rank variance is 0 and z is undefined.' });
        continue;
      }
      const variance = (r.spread / (12 * (N - 1))) * (1 / ni + 1 / nj);
      const z = diff / Math.sqrt(variance);
      raw.push({ i, j, meanRankDifference: diff, z, p: Math.min(1, 2 * normalUpperTail(Math.abs(z))), sidedness: 'two-sided' });
    }
  }
  const holm = adjustPValues(
    raw.map((x) => x.p),
    'holm',
  );
  return freezeDeep(raw.map((x, idx) => ({ ...x, pHolm: holm[idx] })));
}
