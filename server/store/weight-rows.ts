/**
 * The weighted per-value sums of an integer measure as both engines read them from value_counts, and the one rule that
 * turns those rows into the port's WeightSums (answers without a weight are counted apart; migration 0005 keeps their
 * sums at 0).
 */
import type { WeightSums } from './types.js';

/** One value_counts row (or the sum over excluded 0 and 1): value, count, weighted count, Σ w, Σ w². */
export type WeightSumsRow = [value: number, count: number, weighted: number, weightSum: number, weightSquareSum: number];

export function weightSumsOf(rows: Iterable<WeightSumsRow>, scale: { min: number; max: number }): WeightSums {
  const size = scale.max - scale.min + 1;
  const counts = new Float64Array(size);
  const weightSums = new Float64Array(size);
  const weightSquareSums = new Float64Array(size);
  let unweighted = 0;
  for (const [value, count, weighted, s1, s2] of rows) {
    const k = value - scale.min;
    unweighted += count - weighted;
    if (weighted === 0) continue; // no weighted answer: its sums are 0 by the rule of migration 0005
    counts[k] += weighted;
    weightSums[k] += s1;
    weightSquareSums[k] += s2;
  }
  return { counts, weightSums, weightSquareSums, unweighted };
}
