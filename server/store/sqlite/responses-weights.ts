/**
 * Reads for survey weights and covariate adjustment (SQLite), part of the response repository (responses.ts is
 * the facade):
 *
 *  - getWeightedSnapshot(): one measure across conditions with the dataVersion, in ONE read transaction. As "sums"
 *    (an integer measure whose scale is dense, at most MAX_DENSE_COUNTS values) from value_counts: per value, the
 *    answers whose response carries a weight and their Σw and Σw² (kept by the ingest, exclusion and erasure
 *    transactions), O(distinct values). As "pairs": answer by answer with its response's weight, O(n).
 *    Answers without a weight are only counted (`unweighted`): they take no part in the weighted comparison.
 *  - getAdjustmentRows(): the responses of two conditions that answered the outcome, each with its covariate answers
 *    (null when not answered), O(n·k) rows read.
 *  - the refused-weight counters (rejected_weight_counts).
 */
import type { SqliteDatabase } from './open.js';
import { weightSumsOf } from '../weight-rows.js';
import {
  MAX_DENSE_COUNTS,
  type AdjustmentRows,
  type RejectedWeightIncrement,
  type WeightedSnapshot,
  type WeightRejectionReason,
  type WeightSums,
  type WeightedPairs,
} from '../types.js';

interface MeasureRow {
  min: number;
  max: number;
  is_integer: number;
  data_version: number;
}

export class SqliteWeightReads {
  private readonly measureRow;
  private readonly sumsOne;
  private readonly sumsBoth;
  private readonly pairs;
  private readonly unweightedCount;
  private readonly rejectedWeights;
  private readonly outcomeRows;
  private readonly covariateRows;

  constructor(private readonly db: SqliteDatabase) {
    this.measureRow = db.prepare<[number], MeasureRow>(
      `SELECT m.min, m.max, m.is_integer, e.data_version FROM measures m JOIN experiments e ON e.id = m.experiment_id WHERE m.id = ?`,
    );
    this.sumsOne = db
      .prepare<[number, number, number], [number, number, number, number, number]>(
        `SELECT value, count, weighted_count, weight_sum, weight_square_sum FROM value_counts
         WHERE measure_id = ? AND condition_id = ? AND excluded = ?`,
      )
      .raw();
    this.sumsBoth = db
      .prepare<[number, number], [number, number, number, number, number]>(
        `SELECT value, sum(count), sum(weighted_count), sum(weight_sum), sum(weight_square_sum) FROM value_counts
         WHERE measure_id = ? AND condition_id = ? GROUP BY value`,
      )
      .raw();
    this.pairs = db
      .prepare<[number, number, number], [number, number]>(
        `SELECT v.value, r.weight FROM response_values v JOIN responses r ON r.id = v.response_id
         WHERE v.measure_id = ? AND v.condition_id = ? AND v.excluded <= ? AND r.weight IS NOT NULL`,
      )
      .raw();
    this.unweightedCount = db
      .prepare<[number, number, number], number>(
        `SELECT count(*) FROM response_values v JOIN responses r ON r.id = v.response_id
         WHERE v.measure_id = ? AND v.condition_id = ? AND v.excluded <= ? AND r.weight IS NULL`,
      )
      .pluck();
    this.rejectedWeights = db.prepare<[number], { reason: WeightRejectionReason; count: number }>(
      `SELECT reason, count FROM rejected_weight_counts WHERE experiment_id = ? AND count > 0 ORDER BY reason`,
    );
    // Outcome answers of two conditions, in response order; the covariate answers of the same responses joined by id.
    this.outcomeRows = db
      .prepare<[number, number, number, number], [number, number, number]>(
        `SELECT response_id, condition_id, value FROM response_values
         WHERE measure_id = ? AND condition_id IN (?, ?) AND excluded <= ? ORDER BY response_id`,
      )
      .raw();
    this.covariateRows = db
      .prepare<[number, number, number, number], [number, number]>(
        `SELECT response_id, value FROM response_values WHERE measure_id = ? AND condition_id IN (?, ?) AND excluded <= ?`,
      )
      .raw();
  }

  async getRejectedWeightCounts(experimentKey: number): Promise<RejectedWeightIncrement[]> {
    return this.rejectedWeights.all(experimentKey);
  }

  /** Dense per-value weighted counts and sums of one group (entry k: value min + k). */
  private readSums(measureKey: number, m: MeasureRow, conditionKey: number, includeExcluded: boolean): WeightSums {
    return weightSumsOf(includeExcluded ? this.sumsBoth.all(measureKey, conditionKey) : this.sumsOne.all(measureKey, conditionKey, 0), m);
  }

  private readPairs(measureKey: number, conditionKey: number, includeExcluded: boolean): WeightedPairs {
    const maxExcluded = includeExcluded ? 1 : 0;
    const rows = this.pairs.all(measureKey, conditionKey, maxExcluded);
    const values = new Float64Array(rows.length);
    const weights = new Float64Array(rows.length);
    rows.forEach(([v, w], i) => {
      values[i] = v;
      weights[i] = w;
    });
    return { values, weights, unweighted: this.unweightedCount.get(measureKey, conditionKey, maxExcluded) as number };
  }

  async getWeightedSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, form: 'sums' | 'pairs'): Promise<WeightedSnapshot> {
    return this.db.transaction((): WeightedSnapshot => {
      const m = this.measureRow.get(measureKey);
      if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
      if (form === 'sums') {
        if (m.is_integer !== 1 || m.max - m.min + 1 > MAX_DENSE_COUNTS) {
          throw new RangeError(`measure key ${measureKey} is not an integer measure with at most ${MAX_DENSE_COUNTS} values; read it as pairs`);
        }
        return {
          dataVersion: m.data_version,
          groups: conditionKeys.map((c) => ({ kind: 'sums' as const, ...this.readSums(measureKey, m, c, includeExcluded) })),
        };
      }
      return {
        dataVersion: m.data_version,
        groups: conditionKeys.map((c) => ({ kind: 'pairs' as const, ...this.readPairs(measureKey, c, includeExcluded) })),
      };
    })();
  }

  async getAdjustmentRows(
    outcomeKey: number,
    covariateKeys: number[],
    conditionKeys: [number, number],
    includeExcluded: boolean,
  ): Promise<AdjustmentRows> {
    return this.db.transaction((): AdjustmentRows => {
      const m = this.measureRow.get(outcomeKey);
      if (!m) throw new RangeError(`measure key ${outcomeKey} does not exist`);
      const maxExcluded = includeExcluded ? 1 : 0;
      const [a, b] = conditionKeys;
      const rows = this.outcomeRows.all(outcomeKey, a, b, maxExcluded);
      const index = new Map<number, number>();
      const outcome = new Float64Array(rows.length);
      const inA = new Uint8Array(rows.length);
      rows.forEach(([responseId, condition, value], i) => {
        index.set(responseId, i);
        outcome[i] = value;
        inA[i] = condition === a ? 1 : 0;
      });
      const covariates = covariateKeys.map((key) => {
        const column = new Array<number | null>(rows.length).fill(null);
        for (const [responseId, value] of this.covariateRows.all(key, a, b, maxExcluded)) {
          const i = index.get(responseId);
          if (i !== undefined) column[i] = value;
        }
        return column;
      });
      return { dataVersion: m.data_version, outcome, inA, covariates };
    })();
  }
}
