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
 * Method (identical to R's `p.adjust`, including its handling of ties and of missing values):
 *   Let m be the number of non-null p-values and p(1) ≤ … ≤ p(m) their sorted values.
 *   Holm:  adj(i) = min(1, max_{j ≤ i} (m − j + 1) · p(j))          (running maximum from the smallest p)
 *   BH:    adj(i) = min(1, min_{j ≥ i} (m / j) · p(j))              (running minimum from the largest p)
 *   Each adjusted value is returned at the position of its original p-value.
 *   `null` entries (a test that could not be computed) pass through as `null` and are not counted in m,
 *   exactly as R's p.adjust(p, method) with NA entries and the default n = sum(!is.na(p)).
 *
 * References:
 *   Holm S (1979). A simple sequentially rejective multiple test procedure. Scandinavian Journal of
 *     Statistics 6:65–70. doi:10.2307/4615733
 *   Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate: a practical and powerful approach
 *     to multiple testing. JRSS B 57:289–300. doi:10.1111/j.2517-6161.1995.tb02031.x
 *   R Core Team, `p.adjust` (stats package), whose definition this follows line by line.
 *
 * Cost: O(m log m) time (one sort), O(m) memory. The input array is never mutated; the result is a frozen array.
 */

import { freezeDeep } from './types.js';

export type AdjustMethod = 'holm' | 'bh' | 'none';

/**
 * Adjust a family of p-values. `null` entries pass through and are not counted in the family.
 * Throws a RangeError naming the index for a p-value that is not a number in [0, 1], and for an unknown method.
 */
export function adjustPValues(p: readonly (number | null)[], method: AdjustMethod): (number | null)[] {
  if (method !== 'holm' && method !== 'bh' && method !== 'none') {
    throw new RangeError(`method is ${String(method)}; expected "holm", "bh" or "none"`);
  }
  const present: number[] = []; // indices of non-null p-values, in input order
  for (let i = 0; i < p.length; i++) {
    const v = p[i];
    if (v === null) continue;
    if (typeof v !== 'number' || !Number.isFinite(v) || v < 0 || v > 1) {
      throw new RangeError(`p[${i}] is ${String(v)}; every p-value must be a number in [0, 1] or null`);
    }
    present.push(i);
  }
  const out: (number | null)[] = p.map((v) => (v === null ? null : v));
  const m = present.length;
  if (method === 'none' || m <= 1) return freezeDeep(out);

  // Stable sort of the present indices by p (ties keep input order, as R's order() does).
  const order = present.slice().sort((i, j) => (p[i] as number) - (p[j] as number) || i - j);

  if (method === 'holm') {
    // R: pmin(1, cummax((n - i + 1) * p[o]))[ro], i = 1..n, o = order(p)
    let runningMax = 0;
    for (let k = 0; k < m; k++) {
      const idx = order[k];
      const v = (m - k) * (p[idx] as number);
      if (v > runningMax) runningMax = v;
      out[idx] = Math.min(1, runningMax);
    }
  } else {
    // R: pmin(1, cummin(n / i * p[o]))[ro], i = n..1, o = order(p, decreasing = TRUE)
    let runningMin = Infinity;
    for (let k = m - 1; k >= 0; k--) {
      const idx = order[k];
      const v = (m / (k + 1)) * (p[idx] as number);
      if (v < runningMin) runningMin = v;
      out[idx] = Math.min(1, runningMin);
    }
  }
  return freezeDeep(out);
}
