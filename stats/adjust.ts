/**
 * Multiple-comparison adjustment of a family of p-values (the `adjusted` block of a family of comparisons).
 *
 * What it computes: adjusted p-values, so that "adjusted p ≤ α" is the decision of the procedure at level α.
 *  - "holm": Holm's step-down procedure controls the family-wise error rate (the chance of at least one false
 *    rejection among the m hypotheses) at α under any dependence between the tests.
 *  - "bh": the Benjamini–Hochberg step-up procedure controls the false discovery rate (the expected share of
 *    false rejections among the rejections) at α for independent or positively dependent tests.
 *  - "none": the p-values unchanged.
 *
 * Method. Let m be the number of non-null p-values and p(1) ≤ … ≤ p(m) their sorted values, H(i) the
 * hypothesis of p(i).
 *   Holm (1979): at level α, reject H(1), H(2), … in turn while p(j) ≤ α / (m − j + 1), and stop at the first
 *     j where this fails. H(i) is rejected exactly when (m − j + 1)·p(j) ≤ α for every j ≤ i, so the smallest
 *     α that rejects it, the adjusted p-value, is
 *       adj(i) = min(1, max_{j ≤ i} (m − j + 1)·p(j))        (a running maximum from the smallest p).
 *   Benjamini & Hochberg (1995): at level q, let k be the largest i with p(i) ≤ (i / m)·q and reject
 *     H(1) … H(k). H(i) is rejected exactly when (m / j)·p(j) ≤ q for some j ≥ i, so
 *       adj(i) = min(1, min_{j ≥ i} (m / j)·p(j))            (a running minimum from the largest p).
 *   Tied p-values get the same adjusted value whatever their order in the sort (for Holm the later of two
 *   equal values has the smaller multiplier and the running maximum carries the earlier one; for BH the
 *   earlier has the larger multiplier and the running minimum carries the later one), so the result does not
 *   depend on how ties are ordered. Each adjusted value is returned at the position of its original p-value.
 *   `null` entries (a test that could not be computed) pass through as `null` and are not counted in m: the
 *   family is the set of tests that produced a p-value. The results agree with R's p.adjust(p, method) with
 *   NA for the missing entries (tests/fixtures/r-adjust.json, to a few ulps).
 *
 * References:
 *   Holm S (1979). A simple sequentially rejective multiple test procedure. Scandinavian Journal of
 *     Statistics 6:65–70. doi:10.2307/4615733
 *   Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate: a practical and powerful approach
 *     to multiple testing. JRSS B 57:289–300. doi:10.1111/j.2517-6161.1995.tb02031.x
 *   (The adjusted-p-value form of both procedures: Wright SP (1992). Adjusted p-values for simultaneous
 *     inference. Biometrics 48:1005–1013.)
 *
 * Cost: O(m log m) time (one sort), O(m) memory. The input array is never mutated; the result is a frozen array.
 */

import { freezeDeep } from './types.js';

export type AdjustMethod = 'holm' | 'bh' | 'none';

const METHODS: readonly AdjustMethod[] = ['holm', 'bh', 'none'];

/**
 * Adjust a family of p-values. `null` entries pass through and are not counted in the family.
 * Throws a RangeError naming the index for a p-value that is not a number in [0, 1], and for an unknown method.
 */
export function adjustPValues(p: readonly (number | null)[], method: AdjustMethod): (number | null)[] {
  if (!METHODS.includes(method)) {
    throw new RangeError(`method is ${String(method)}; expected "holm", "bh" or "none"`);
  }
  // Positions of the family members (non-null entries), checked as they are collected.
  const members: number[] = [];
  for (let i = 0; i < p.length; i++) {
    const value = p[i];
    if (value === null) continue;
    if (typeof value !== 'number' || !(value >= 0 && value <= 1)) {
      throw new RangeError(`p[${i}] is ${String(value)}; a p-value in [0, 1] or null was expected`);
    }
    members.push(i);
  }
  const adjusted: (number | null)[] = p.slice();
  const m = members.length;
  if (method === 'none' || m === 0) return freezeDeep(adjusted);

  // Ascending order of the p-values; equal values keep their input order (the result does not depend on it).
  const order = members.sort((i, j) => (p[i] as number) - (p[j] as number) || i - j);

  if (method === 'holm') {
    let runningMax = 0;
    for (let rank = 1; rank <= m; rank++) {
      const position = order[rank - 1];
      runningMax = Math.max(runningMax, (m - rank + 1) * (p[position] as number));
      adjusted[position] = Math.min(1, runningMax);
    }
  } else {
    let runningMin = Infinity;
    for (let rank = m; rank >= 1; rank--) {
      const position = order[rank - 1];
      runningMin = Math.min(runningMin, (m / rank) * (p[position] as number));
      adjusted[position] = Math.min(1, runningMin);
    }
  }
  return freezeDeep(adjusted);
}
