/**
 * Reads for survey weights and covariate adjustment (PostgreSQL), part of the response repository (responses.ts):
 * the same answers as the SQLite store's responses-weights.ts.
 *
 *  - readWeightedSnapshot(): one measure across conditions with the dataVersion, inside the caller's ONE snapshot.
 *    As "sums" (an integer measure whose scale is dense, at most MAX_DENSE_COUNTS values) from value_counts: per
 *    value, the answers whose response carries a weight and their Σw and Σw² (kept by the ingest, exclusion,
 *    erasure and clean-up transactions), O(distinct values). As "pairs": answer by answer with its response's
 *    weight, O(n). Answers without a weight are only counted (`unweighted`).
 *  - readAdjustmentRows(): the responses of two conditions that answered the outcome (in response order), each with
 *    its covariate answers (null when not answered), O(n·k) rows read.
 *  - the refused-weight counters (rejected_weight_counts).
 */
import {
  MAX_DENSE_COUNTS,
  type AdjustmentRows,
  type RejectedWeightIncrement,
  type WeightedPairs,
  type WeightedSnapshot,
  type WeightRejectionReason,
  type WeightSums,
} from '../types.js';
import type { Queryable } from './pool.js';
import { weightSumsOf, type WeightSumsRow } from '../weight-rows.js';

interface MeasureRow {
  min: number;
  max: number;
  is_integer: boolean;
  data_version: number;
}

async function measureRow(c: Queryable, measureKey: number): Promise<MeasureRow> {
  const m = (
    await c.query<MeasureRow>(`SELECT m.min, m.max, m.is_integer, e.data_version FROM measures m JOIN experiments e ON e.id = m.experiment_id WHERE m.id = $1`, [
      measureKey,
    ])
  ).rows[0];
  if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
  return m;
}

/** Add to the refused-weight counters (one statement; the caller's autocommit or transaction). */
export async function addRejectedWeights(c: Queryable, experimentKey: number, increments: RejectedWeightIncrement[]): Promise<void> {
  const merged = new Map<WeightRejectionReason, number>();
  for (const inc of increments) if (inc.count > 0) merged.set(inc.reason, (merged.get(inc.reason) ?? 0) + inc.count);
  if (merged.size === 0) return;
  await c.query(
    `INSERT INTO rejected_weight_counts (experiment_id, reason, count)
     SELECT $1, r, n FROM unnest($2::text[], $3::bigint[]) AS u(r, n)
     ON CONFLICT (experiment_id, reason) DO UPDATE SET count = rejected_weight_counts.count + EXCLUDED.count`,
    [experimentKey, [...merged.keys()], [...merged.values()]],
  );
}

export async function readRejectedWeights(c: Queryable, experimentKey: number): Promise<RejectedWeightIncrement[]> {
  return (
    await c.query<{ reason: WeightRejectionReason; count: number }>(
      `SELECT reason, count FROM rejected_weight_counts WHERE experiment_id = $1 AND count > 0 ORDER BY reason COLLATE "C"`,
      [experimentKey],
    )
  ).rows;
}

async function readSums(c: Queryable, measureKey: number, m: MeasureRow, conditionKey: number, includeExcluded: boolean): Promise<WeightSums> {
  const r = await c.query<WeightSumsRow>({
    text: includeExcluded
      ? `SELECT value, sum(count), sum(weighted_count), sum(weight_sum), sum(weight_square_sum) FROM value_counts
         WHERE measure_id = $1 AND condition_id = $2 GROUP BY value`
      : `SELECT value, count, weighted_count, weight_sum, weight_square_sum FROM value_counts
         WHERE measure_id = $1 AND condition_id = $2 AND excluded = 0`,
    values: [measureKey, conditionKey],
    rowMode: 'array',
  });
  return weightSumsOf(r.rows, m);
}

async function readPairs(c: Queryable, measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<WeightedPairs> {
  const maxExcluded = includeExcluded ? 1 : 0;
  const r = await c.query<[number, number]>({
    text: `SELECT v.value, r.weight FROM response_values v JOIN responses r ON r.id = v.response_id
           WHERE v.measure_id = $1 AND v.condition_id = $2 AND v.excluded <= $3 AND r.weight IS NOT NULL`,
    values: [measureKey, conditionKey, maxExcluded],
    rowMode: 'array',
  });
  const values = new Float64Array(r.rows.length);
  const weights = new Float64Array(r.rows.length);
  r.rows.forEach(([v, w], i) => {
    values[i] = v;
    weights[i] = w;
  });
  const unweighted = (
    await c.query<{ n: number }>(
      `SELECT count(*) AS n FROM response_values v JOIN responses r ON r.id = v.response_id
       WHERE v.measure_id = $1 AND v.condition_id = $2 AND v.excluded <= $3 AND r.weight IS NULL`,
      [measureKey, conditionKey, maxExcluded],
    )
  ).rows[0].n;
  return { values, weights, unweighted };
}

/** getWeightedSnapshot inside the caller's snapshot transaction. */
export async function readWeightedSnapshot(
  c: Queryable,
  measureKey: number,
  conditionKeys: number[],
  includeExcluded: boolean,
  form: 'sums' | 'pairs',
): Promise<WeightedSnapshot> {
  const m = await measureRow(c, measureKey);
  if (form === 'sums') {
    if (!m.is_integer || m.max - m.min + 1 > MAX_DENSE_COUNTS) {
      throw new RangeError(`measure key ${measureKey} is not an integer measure with at most ${MAX_DENSE_COUNTS} values; read it as pairs`);
    }
    const groups: ({ kind: 'sums' } & WeightSums)[] = [];
    for (const k of conditionKeys) groups.push({ kind: 'sums', ...(await readSums(c, measureKey, m, k, includeExcluded)) });
    return { dataVersion: m.data_version, groups };
  }
  const groups: ({ kind: 'pairs' } & WeightedPairs)[] = [];
  for (const k of conditionKeys) groups.push({ kind: 'pairs', ...(await readPairs(c, measureKey, k, includeExcluded)) });
  return { dataVersion: m.data_version, groups };
}

/** getAdjustmentRows inside the caller's snapshot transaction. */
export async function readAdjustmentRows(
  c: Queryable,
  outcomeKey: number,
  covariateKeys: number[],
  conditionKeys: [number, number],
  includeExcluded: boolean,
): Promise<AdjustmentRows> {
  const m = await measureRow(c, outcomeKey);
  const maxExcluded = includeExcluded ? 1 : 0;
  const [a, b] = conditionKeys;
  const rows = (
    await c.query<[number, number, number]>({
      text: `SELECT response_id, condition_id, value FROM response_values
             WHERE measure_id = $1 AND condition_id IN ($2, $3) AND excluded <= $4 ORDER BY response_id`,
      values: [outcomeKey, a, b, maxExcluded],
      rowMode: 'array',
    })
  ).rows;
  const index = new Map<number, number>();
  const outcome = new Float64Array(rows.length);
  const inA = new Uint8Array(rows.length);
  rows.forEach(([responseId, condition, value], i) => {
    index.set(responseId, i);
    outcome[i] = value;
    inA[i] = condition === a ? 1 : 0;
  });
  const covariates: (number | null)[][] = [];
  for (const key of covariateKeys) {
    const column = new Array<number | null>(rows.length).fill(null);
    const r = await c.query<[number, number]>({
      text: `SELECT response_id, value FROM response_values WHERE measure_id = $1 AND condition_id IN ($2, $3) AND excluded <= $4`,
      values: [key, a, b, maxExcluded],
      rowMode: 'array',
    });
    for (const [responseId, value] of r.rows) {
      const i = index.get(responseId);
      if (i !== undefined) column[i] = value;
    }
    covariates.push(column);
  }
  return { dataVersion: m.data_version, outcome, inA, covariates };
}
