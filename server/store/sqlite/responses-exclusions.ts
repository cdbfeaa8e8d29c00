/**
 * Exclusion, restoration and erasure of responses in SQLite, each ONE write transaction that keeps the invariants
 * (value_counts moved or decremented, condition counters, dataVersion + 1, an audit row). The weighted columns of
 * value_counts (migration 0005) move with the answer: the weighted count by ±1, the sums of weights and squared
 * weights of every touched row recomputed from its response rows (never by subtraction). Part of the response
 * repository (responses.ts is the facade).
 */
import { AuditWriter } from './audit.js';
import type { SqliteDatabase } from './open.js';
import { unpackValues } from './packed-values.js';
import type {
  CleanUpOutcome,
  CleanUpRequest,
  ErasureOutcome,
  ExclusionOutcome,
} from '../types.js';

interface CleanUpRow {
  id: number;
  response_id: string;
  condition_id: number;
  excluded: number;
}


/** Exclusion, restoration and erasure: each ONE write transaction keeping the invariants (see responses.ts). */
export class SqliteExclusionWriter {
  private readonly experimentState;
  private readonly bumpVersion;
  private readonly responseForExclusion;
  private readonly packedOf;
  private readonly integerMeasuresOf;
  private readonly weightOf;
  private readonly setResponseExcluded;
  private readonly setValuesExcluded;
  private readonly decrementCount;
  private readonly deleteEmptyCount;
  private readonly incrementCount;
  private readonly recomputeWeightSums;
  private readonly bumpExcluded;
  private readonly responsesOfRespondent;
  private readonly deleteValuesOf;
  private readonly deleteResponse;
  private readonly dropCondition;
  private readonly audit: AuditWriter;
  private readonly exclusionTx;
  private readonly erasureTx;
  private readonly matching;
  private readonly cleanUpTx;

  constructor(db: SqliteDatabase) {
    this.experimentState = db.prepare<[number], { status: string; data_version: number }>(
      `SELECT status, data_version FROM experiments WHERE id = ?`,
    );
    this.bumpVersion = db
      .prepare<[number], number>(`UPDATE experiments SET data_version = data_version + 1 WHERE id = ? RETURNING data_version`)
      .pluck();
    this.responseForExclusion = db.prepare<
      [number, string],
      { id: number; condition_id: number; condition: string; excluded: number; excluded_reason: string | null }
    >(
      `SELECT r.id, r.condition_id, c.slug AS condition, r.excluded, r.excluded_reason
       FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE r.experiment_id = ? AND r.response_id = ?`,
    );
    // A response's values come from its packed copy (migration 0008): with its condition and excluded flag they give
    // every value row's full primary key, so each row is changed or deleted by key.
    this.packedOf = db.prepare<[number], string>(`SELECT packed_values FROM responses WHERE id = ?`).pluck();
    this.integerMeasuresOf = db.prepare<[number], number>(`SELECT id FROM measures WHERE experiment_id = ? AND is_integer = 1`).pluck();
    this.weightOf = db.prepare<[number], number | null>(`SELECT weight FROM responses WHERE id = ?`).pluck();
    this.setResponseExcluded = db.prepare<[number, string | null, number]>(`UPDATE responses SET excluded = ?, excluded_reason = ? WHERE id = ?`);
    this.setValuesExcluded = db.prepare<[number, number, number, number, number, number]>(
      `UPDATE response_values SET excluded = ?
       WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ? AND response_id = ?`,
    );
    // One answer leaves a row: its count, and (when its response carries a weight) the weighted count and sums. The
    // sums of a row left with no weighted answer are set to exactly 0, so rounding never leaves a residue behind.
    this.decrementCount = db.prepare<[{ n: number; wn: number; ws: number; wq: number; measure: number; condition: number; excluded: number; value: number }]>(
      `UPDATE value_counts SET count = count - @n, weighted_count = weighted_count - @wn,
         weight_sum = CASE WHEN weighted_count - @wn = 0 THEN 0 ELSE max(weight_sum - @ws, 0) END,
         weight_square_sum = CASE WHEN weighted_count - @wn = 0 THEN 0 ELSE max(weight_square_sum - @wq, 0) END
       WHERE measure_id = @measure AND condition_id = @condition AND excluded = @excluded AND value = @value`,
    );
    this.deleteEmptyCount = db.prepare<[number, number, number, number]>(
      `DELETE FROM value_counts WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ? AND count = 0`,
    );
    this.incrementCount = db.prepare<[number, number, number, number, number, number, number, number]>(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count, weighted_count, weight_sum, weight_square_sum)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count,
         weighted_count = value_counts.weighted_count + excluded.weighted_count,
         weight_sum = value_counts.weight_sum + excluded.weight_sum,
         weight_square_sum = value_counts.weight_square_sum + excluded.weight_square_sum`,
    );
    // Removing a weight from a running sum can cancel catastrophically (a weight of 1e4 leaves an error near 1e-12 in
    // Σw and 1e-8 in Σw² of the small weights that remain), so a row that loses or gains a weighted answer through an
    // exclusion, restoration or erasure gets its sums recomputed from its rows (run after the rows changed):
    // O(answers sharing that value in that condition), through the index response_values_scan.
    this.recomputeWeightSums = db.prepare<[{ measure: number; condition: number; excluded: number; value: number }]>(
      `UPDATE value_counts SET
         weight_sum = coalesce((SELECT sum(r.weight) FROM response_values v JOIN responses r ON r.id = v.response_id
                                WHERE v.measure_id = @measure AND v.condition_id = @condition AND v.excluded = @excluded AND v.value = @value
                                  AND r.weight IS NOT NULL), 0),
         weight_square_sum = coalesce((SELECT sum(r.weight * r.weight) FROM response_values v JOIN responses r ON r.id = v.response_id
                                WHERE v.measure_id = @measure AND v.condition_id = @condition AND v.excluded = @excluded AND v.value = @value
                                  AND r.weight IS NOT NULL), 0)
       WHERE measure_id = @measure AND condition_id = @condition AND excluded = @excluded AND value = @value`,
    );
    this.bumpExcluded = db.prepare<[number, number]>(`UPDATE conditions SET excluded_count = excluded_count + ? WHERE id = ?`);
    this.responsesOfRespondent = db.prepare<[number, string], { id: number; response_id: string; condition_id: number; excluded: number }>(
      `SELECT id, response_id, condition_id, excluded FROM responses WHERE experiment_id = ? AND respondent = ?`,
    );
    this.deleteValuesOf = db.prepare<[number, number, number, number, number]>(
      `DELETE FROM response_values WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ? AND response_id = ?`,
    );
    this.deleteResponse = db.prepare<[number]>(`DELETE FROM responses WHERE id = ?`);
    this.dropCondition = db.prepare<[number, number, number]>(
      `UPDATE conditions SET response_count = response_count - ?, excluded_count = excluded_count - ? WHERE id = ?`,
    );
    this.audit = new AuditWriter(db);
    this.exclusionTx = db.transaction(
      (experimentKey: number, responseId: string, change: { excluded: boolean; reason: string | null }, apiKeyId: number | null, at: string): ExclusionOutcome => {
        const state = this.experimentState.get(experimentKey);
        if (!state) return { kind: 'not-found' };
        const row = this.responseForExclusion.get(experimentKey, responseId);
        if (!row) return { kind: 'not-found' };
        const target = change.excluded ? 1 : 0;
        if (row.excluded === target) {
          return {
            kind: 'unchanged',
            responseId,
            condition: row.condition,
            excluded: row.excluded === 1,
            reason: row.excluded_reason,
            dataVersion: state.data_version,
          };
        }
        const from = row.excluded as 0 | 1;
        const reason = change.excluded ? change.reason : null;
        this.setResponseExcluded.run(target, reason, row.id);
        const integerMeasures = new Set(this.integerMeasuresOf.all(experimentKey));
        const values = this.moveValues(row.id, row.condition_id, from, target);
        const weight = this.weightOf.get(row.id) ?? null;
        for (const [measureKey, value] of values) if (integerMeasures.has(measureKey)) this.moveCount(measureKey, row.condition_id, value, weight, from, target);
        this.bumpExcluded.run(change.excluded ? 1 : -1, row.condition_id);
        const dataVersion = this.bumpVersion.get(experimentKey) as number;
        this.audit.record({
          experimentKey,
          action: change.excluded ? 'exclude' : 'restore',
          responseId,
          // A restoration records the reason the response had been excluded for.
          reason: change.excluded ? change.reason : row.excluded_reason,
          count: 1,
          apiKeyId,
          at,
          dataVersion,
        });
        return { kind: 'changed', responseId, condition: row.condition, excluded: change.excluded, reason, dataVersion };
      },
    );

    this.erasureTx = db.transaction((experimentKey: number, respondent: string, apiKeyId: number | null, at: string): ErasureOutcome => {
      const state = this.experimentState.get(experimentKey);
      if (!state) return { kind: 'not-found' };
      const rows = this.responsesOfRespondent.all(experimentKey, respondent);
      const perCondition = new Map<number, { responses: number; excluded: number }>();
      for (const row of rows) this.eraseRow(experimentKey, row, perCondition);
      for (const [conditionKey, c] of perCondition) this.dropCondition.run(c.responses, c.excluded, conditionKey);
      const dataVersion = rows.length > 0 ? (this.bumpVersion.get(experimentKey) as number) : state.data_version;
      // Only the count and the time (and the key that asked): nothing that identifies the respondent.
      this.audit.record({ experimentKey, action: 'erase', responseId: null, reason: null, count: rows.length, apiKeyId, at, dataVersion });
      return { kind: 'erased', erased: rows.length, dataVersion };
    });

    this.matching = db.prepare<[number, string | null, string | null, string | null, string | null, number | null, number | null], CleanUpRow>(
      `SELECT id, response_id, condition_id, excluded FROM responses
       WHERE experiment_id = ? AND (? IS NULL OR received_at >= ?) AND (? IS NULL OR received_at <= ?) AND (? IS NULL OR api_key_id = ?)
       ORDER BY id`,
    );
    this.cleanUpTx = db.transaction((experimentKey: number, request: CleanUpRequest, apiKeyId: number | null, at: string): CleanUpOutcome => {
      const state = this.experimentState.get(experimentKey);
      if (!state) return { kind: 'not-found' };
      const f = request.filter;
      const rows = this.matching.all(experimentKey, f.receivedFrom, f.receivedFrom, f.receivedTo, f.receivedTo, f.apiKeyId, f.apiKeyId);
      const targets = request.action === 'exclude' ? rows.filter((r) => r.excluded === 0) : rows;
      if (request.dryRun || targets.length === 0) return { kind: 'done', matched: rows.length, changed: targets.length, dataVersion: state.data_version };
      const dataVersion = this.bumpVersion.get(experimentKey) as number;
      if (request.action === 'exclude') {
        const perCondition = new Map<number, number>();
        const integerMeasures = new Set(this.integerMeasuresOf.all(experimentKey));
        for (const row of targets) {
          this.setResponseExcluded.run(1, request.reason, row.id);
          const values = this.moveValues(row.id, row.condition_id, 0, 1);
          const weight = this.weightOf.get(row.id) ?? null;
          for (const [measureKey, value] of values) if (integerMeasures.has(measureKey)) this.moveCount(measureKey, row.condition_id, value, weight, 0, 1);
          perCondition.set(row.condition_id, (perCondition.get(row.condition_id) ?? 0) + 1);
          // One audit row per response, so that each can be restored (and its exclusion traced) one by one.
          this.audit.record({ experimentKey, action: 'exclude', responseId: row.response_id, reason: request.reason, count: 1, apiKeyId, at, dataVersion });
        }
        for (const [conditionKey, n] of perCondition) this.bumpExcluded.run(n, conditionKey);
      } else {
        const perCondition = new Map<number, { responses: number; excluded: number }>();
        for (const row of targets) this.eraseRow(experimentKey, row, perCondition);
        for (const [conditionKey, c] of perCondition) this.dropCondition.run(c.responses, c.excluded, conditionKey);
        // The count, the reason given and the key that asked; no response ids.
        this.audit.record({ experimentKey, action: 'erase', responseId: null, reason: request.reason, count: targets.length, apiKeyId, at, dataVersion });
      }
      return { kind: 'done', matched: rows.length, changed: targets.length, dataVersion };
    });

  }


  /**
   * Move one answer's per-value count from excluded = `from` to excluded = `to` (null: remove it, for erasure).
   * A count that reaches 0 is deleted, so value_counts stays equal to a GROUP BY over response_values. `weight` is the
   * response's weight (null: none), moved with the answer in the weighted count and sums.
   */
  /**
   * Delete one response with its values, take its answers out of the counts, redact it from the audit trail and add it
   * to the per-condition tally. Rows first, counts after: a weighted row's sums are recomputed from what remains (see
   * recomputeWeightSums). Runs inside the caller's transaction.
   */
  private eraseRow(
    experimentKey: number,
    row: { id: number; response_id: string; condition_id: number; excluded: number },
    perCondition: Map<number, { responses: number; excluded: number }>,
  ): void {
    const weight = this.weightOf.get(row.id) ?? null;
    const integerMeasures = new Set(this.integerMeasuresOf.all(experimentKey));
    const values = this.moveValues(row.id, row.condition_id, row.excluded as 0 | 1, null);
    this.deleteResponse.run(row.id);
    for (const [measureKey, value] of values) if (integerMeasures.has(measureKey)) this.moveCount(measureKey, row.condition_id, value, weight, row.excluded as 0 | 1, null);
    this.audit.redactResponse(experimentKey, row.response_id);
    const c = perCondition.get(row.condition_id) ?? { responses: 0, excluded: 0 };
    c.responses += 1;
    c.excluded += row.excluded;
    perCondition.set(row.condition_id, c);
  }

  /**
   * Move one response's value rows from excluded = `from` to `to` (null: delete them), each by its full primary key
   * read from the response's packed copy. Returns the [measureKey, value] pairs. A row that is not where the packed
   * copy says is a broken invariant: it throws, and the caller's transaction rolls back.
   */
  private moveValues(responseRowId: number, conditionKey: number, from: 0 | 1, to: 0 | 1 | null): [number, number][] {
    const values = unpackValues(this.packedOf.get(responseRowId) ?? '');
    for (const [measureKey, value] of values) {
      const changes =
        to === null
          ? this.deleteValuesOf.run(measureKey, conditionKey, from, value, responseRowId).changes
          : this.setValuesExcluded.run(to, measureKey, conditionKey, from, value, responseRowId).changes;
      if (changes !== 1) throw new Error(`response row ${responseRowId} has no value row for measure ${measureKey} (value ${value}, excluded ${from})`);
    }
    return values;
  }

  private moveCount(measureKey: number, conditionKey: number, value: number, weight: number | null, from: 0 | 1, to: 0 | 1 | null): void {
    const w = weight ?? 0;
    const weighted = weight === null ? 0 : 1;
    const changed = this.decrementCount.run({ n: 1, wn: weighted, ws: w, wq: w * w, measure: measureKey, condition: conditionKey, excluded: from, value }).changes;
    if (changed !== 1) throw new Error(`value_counts has no row for measure ${measureKey}, condition ${conditionKey}, excluded ${from}, value ${value}`);
    this.deleteEmptyCount.run(measureKey, conditionKey, from, value);
    if (to !== null) this.incrementCount.run(measureKey, conditionKey, to, value, 1, weighted, w, w * w);
    if (weight !== null) {
      // The response's rows already carry their new state (exclusion) or are gone (erasure).
      this.recomputeWeightSums.run({ measure: measureKey, condition: conditionKey, excluded: from, value });
      if (to !== null) this.recomputeWeightSums.run({ measure: measureKey, condition: conditionKey, excluded: to, value });
    }
  }

  async setExcluded(
    experimentKey: number,
    responseId: string,
    change: { excluded: boolean; reason: string | null },
    apiKeyId: number | null,
    at: string,
  ): Promise<ExclusionOutcome> {
    return this.exclusionTx.immediate(experimentKey, responseId, change, apiKeyId, at);
  }

  async eraseRespondent(experimentKey: number, respondent: string, apiKeyId: number | null, at: string): Promise<ErasureOutcome> {
    return this.erasureTx.immediate(experimentKey, respondent, apiKeyId, at);
  }

  async cleanUp(experimentKey: number, request: CleanUpRequest, apiKeyId: number | null, at: string): Promise<CleanUpOutcome> {
    return this.cleanUpTx.immediate(experimentKey, request, apiKeyId, at);
  }
}
