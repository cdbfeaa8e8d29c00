/**
 * The interim_looks table as both engines read it, and the one mapping to the port's LookRecord. Pairs are stored in
 * key order (lo < hi) with signed quantities for lo − hi; a reader asking for (hi, lo) gets them flipped.
 */
import type { LookRecord, SpendingName } from './monitoring-types.js';

export interface LookRow {
  number: number;
  measure_id: number;
  condition_lo: number;
  condition_hi: number;
  recorded_at: string;
  data_version: number;
  fraction: number;
  n_lo: number;
  n_hi: number;
  planned_per_condition: number;
  spending: SpendingName;
  alpha: number;
  cumulative_alpha: number;
  alpha_spent: number;
  boundary_z: number | null;
  welch_t: number;
  welch_df: number;
  observed_z: number;
}

export const LOOK_COLUMNS = `number, measure_id, condition_lo, condition_hi, recorded_at, data_version, fraction, n_lo, n_hi, planned_per_condition,
  spending, alpha, cumulative_alpha, alpha_spent, boundary_z, welch_t, welch_df, observed_z`;

/** (lo, hi, flipped): flipped when the caller's a is the larger key. */
export function orderPair(keys: [number, number]): { lo: number; hi: number; flipped: boolean } {
  const [a, b] = keys;
  if (a === b) throw new RangeError(`the two condition keys are equal (${a}); a comparison needs two different conditions`);
  return a < b ? { lo: a, hi: b, flipped: false } : { lo: b, hi: a, flipped: true };
}

export function lookFromRow(r: LookRow, flipped: boolean): LookRecord {
  const s = flipped ? -1 : 1;
  return {
    number: r.number,
    conditionKeys: flipped ? [r.condition_hi, r.condition_lo] : [r.condition_lo, r.condition_hi],
    measureKey: r.measure_id,
    recordedAt: r.recorded_at,
    dataVersion: r.data_version,
    fraction: r.fraction,
    nA: flipped ? r.n_hi : r.n_lo,
    nB: flipped ? r.n_lo : r.n_hi,
    plannedPerCondition: r.planned_per_condition,
    spending: r.spending,
    alpha: r.alpha,
    cumulativeAlpha: r.cumulative_alpha,
    alphaSpent: r.alpha_spent,
    boundaryZ: r.boundary_z,
    welchT: s * r.welch_t + 0, // + 0 turns −0 into 0
    welchDf: r.welch_df,
    observedZ: s * r.observed_z + 0,
  };
}
