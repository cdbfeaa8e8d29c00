/**
 * Responses, their values, per-value counts and rejected-value counters (SQLite).
 *
 * Ingest is ONE synchronous better-sqlite3 transaction (BEGIN IMMEDIATE): idempotency checks, response rows,
 * value rows, per-value counts of integer measures (aggregated in JS first: one upsert per distinct
 * (measure, condition, value)), per-condition counters and dataVersion + 1. Nothing async runs inside it.
 *
 * Reads for comparisons: getCounts / getValueCounts read value_counts (integer measures, O(distinct values));
 * getSortedValues walks the index (measure_id, condition_id, excluded, value) in order into a Float64Array
 * (O(n), no sort). With includeExcluded the two sorted runs (excluded = 0 and = 1) are merged in O(n). The
 * snapshots also read the per-condition counters and the rejected-value counts in the same read transaction, so
 * every data-dependent input of a comparison belongs to one dataVersion.
 *
 * Exclusion / restoration and erasure are each ONE write transaction (BEGIN IMMEDIATE) that keeps the invariants
 * of DEVELOPERS.md: response flag and reason, response_values.excluded, value_counts moved between excluded 0 and 1
 * (or decremented; rows reaching 0 are deleted, so value_counts always equals a GROUP BY over response_values),
 * conditions.response_count / excluded_count, dataVersion + 1 and an audit row (audit.ts).
 */
import { AuditWriter } from './audit.js';
import type { SqliteDatabase } from './open.js';
import type {
  ComparisonStamp,
  ConditionCounter,
  ErasureOutcome,
  ExclusionOutcome,
  IngestOutcome,
  MeasureSnapshot,
  RejectedCount,
  RejectedIncrement,
  RejectionReason,
  ResponseRepository,
  StoredResponse,
  ValidResponse,
  WeightedValues,
} from './types.js';

/** Widest integer scale getCounts turns into a dense array (values min … max). */
export const MAX_DENSE_COUNTS = 1_000_001;

interface MeasureRow {
  id: number;
  min: number;
  max: number;
  is_integer: number;
}

function bytesEqual(a: Uint8Array, b: Uint8Array): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

/** Merge two non-decreasing Float64Arrays. O(a + b). */
export function mergeSorted(a: Float64Array, b: Float64Array): Float64Array {
  if (b.length === 0) return a;
  if (a.length === 0) return b;
  const out = new Float64Array(a.length + b.length);
  let i = 0;
  let j = 0;
  let k = 0;
  while (i < a.length && j < b.length) out[k++] = a[i] <= b[j] ? a[i++] : b[j++];
  while (i < a.length) out[k++] = a[i++];
  while (j < b.length) out[k++] = b[j++];
  return out;
}

export class SqliteResponseRepository implements ResponseRepository {
  private readonly experimentState;
  private readonly integerMeasures;
  private readonly existingHash;
  private readonly insertResponse;
  private readonly insertValue;
  private readonly upsertCount;
  private readonly bumpCondition;
  private readonly bumpVersion;
  private readonly upsertRejected;
  private readonly rejectedOf;
  private readonly storedResponse;
  private readonly storedValues;
  private readonly measureRow;
  private readonly countsOne;
  private readonly countsBoth;
  private readonly sortedValues;
  private readonly valueCount;
  private readonly measureDataVersion;
  private readonly ingestTx;
  private readonly rejectedTx;
  private readonly conditionCounters;
  private readonly rejectedOfMeasure;
  private readonly rejectedTotalOf;
  private readonly stampOf;
  private readonly responseForExclusion;
  private readonly integerValuesOf;
  private readonly setResponseExcluded;
  private readonly setValuesExcluded;
  private readonly decrementCount;
  private readonly deleteEmptyCount;
  private readonly incrementCount;
  private readonly bumpExcluded;
  private readonly responsesOfRespondent;
  private readonly deleteValuesOf;
  private readonly deleteResponse;
  private readonly dropCondition;
  private readonly audit: AuditWriter;
  private readonly exclusionTx;
  private readonly erasureTx;

  constructor(private readonly db: SqliteDatabase) {
    this.experimentState = db.prepare<[number], { status: string; data_version: number }>(
      `SELECT status, data_version FROM experiments WHERE id = ?`,
    );
    this.integerMeasures = db
      .prepare<[number], number>(`SELECT id FROM measures WHERE experiment_id = ? AND is_integer = 1`)
      .pluck();
    this.existingHash = db
      .prepare<[number, string], Buffer>(`SELECT content_hash FROM responses WHERE experiment_id = ? AND response_id = ?`)
      .pluck();
    this.insertResponse = db.prepare<[number, string, number, string | null, string, string, Uint8Array, number | null]>(
      `INSERT INTO responses (experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.insertValue = db.prepare<[number | bigint, number, number, number]>(
      `INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES (?, ?, ?, 0, ?)`,
    );
    this.upsertCount = db.prepare<[number, number, number, number]>(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, 0, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count`,
    );
    this.bumpCondition = db.prepare<[number, number]>(`UPDATE conditions SET response_count = response_count + ? WHERE id = ?`);
    this.bumpVersion = db
      .prepare<[number], number>(`UPDATE experiments SET data_version = data_version + 1 WHERE id = ? RETURNING data_version`)
      .pluck();
    this.upsertRejected = db.prepare<[number, number, string, number]>(
      `INSERT INTO rejected_value_counts (experiment_id, measure_id, reason, count) VALUES (?, ?, ?, ?)
       ON CONFLICT (experiment_id, measure_id, reason) DO UPDATE SET count = rejected_value_counts.count + excluded.count`,
    );
    this.rejectedOf = db.prepare<[number], { measure: string; reason: RejectionReason; count: number }>(
      `SELECT m.slug AS measure, r.reason AS reason, r.count AS count
       FROM rejected_value_counts r JOIN measures m ON m.id = r.measure_id
       WHERE r.experiment_id = ? ORDER BY m.position, r.reason`,
    );
    this.storedResponse = db.prepare<
      [number, string],
      {
        id: number;
        response_id: string;
        condition: string;
        respondent: string | null;
        submitted_at: string;
        received_at: string;
        excluded: number;
        excluded_reason: string | null;
      }
    >(
      `SELECT r.id, r.response_id, c.slug AS condition, r.respondent, r.submitted_at, r.received_at, r.excluded, r.excluded_reason
       FROM responses r JOIN conditions c ON c.id = r.condition_id
       WHERE r.experiment_id = ? AND r.response_id = ?`,
    );
    this.storedValues = db.prepare<[number], { measure: string; value: number }>(
      `SELECT m.slug AS measure, v.value AS value FROM response_values v JOIN measures m ON m.id = v.measure_id
       WHERE v.response_id = ? ORDER BY m.position`,
    );
    this.measureRow = db.prepare<[number], MeasureRow>(`SELECT id, min, max, is_integer FROM measures WHERE id = ?`);
    this.countsOne = db
      .prepare<[number, number, number], [number, number]>(
        `SELECT value, count FROM value_counts WHERE measure_id = ? AND condition_id = ? AND excluded = ? ORDER BY value`,
      )
      .raw();
    this.countsBoth = db
      .prepare<[number, number], [number, number]>(
        `SELECT value, sum(count) FROM value_counts WHERE measure_id = ? AND condition_id = ? GROUP BY value ORDER BY value`,
      )
      .raw();
    this.sortedValues = db
      .prepare<[number, number, number], number>(
        `SELECT value FROM response_values WHERE measure_id = ? AND condition_id = ? AND excluded = ? ORDER BY value`,
      )
      .pluck();
    this.valueCount = db.prepare<[number], number>(`SELECT count(*) FROM response_values WHERE measure_id = ?`).pluck();
    this.measureDataVersion = db
      .prepare<[number], number>(`SELECT e.data_version FROM experiments e JOIN measures m ON m.experiment_id = e.id WHERE m.id = ?`)
      .pluck();

    this.conditionCounters = db
      .prepare<[number], [number, number, number]>(
        `SELECT c.id, c.response_count, c.excluded_count FROM conditions c JOIN measures m ON m.experiment_id = c.experiment_id
         WHERE m.id = ? ORDER BY c.position`,
      )
      .raw();
    this.rejectedOfMeasure = db.prepare<[number], { reason: RejectionReason; count: number }>(
      `SELECT reason, count FROM rejected_value_counts WHERE measure_id = ? AND count > 0 ORDER BY reason`,
    );
    this.rejectedTotalOf = db
      .prepare<[number], number>(
        `SELECT coalesce(sum(r.count), 0) FROM rejected_value_counts r JOIN measures m ON m.experiment_id = r.experiment_id WHERE m.id = ?`,
      )
      .pluck();
    this.stampOf = db.prepare<[number], { data_version: number; rejected: number }>(
      `SELECT e.data_version, (SELECT coalesce(sum(r.count), 0) FROM rejected_value_counts r WHERE r.experiment_id = e.id) AS rejected
       FROM experiments e WHERE e.id = ?`,
    );
    this.responseForExclusion = db.prepare<
      [number, string],
      { id: number; condition_id: number; condition: string; excluded: number; excluded_reason: string | null }
    >(
      `SELECT r.id, r.condition_id, c.slug AS condition, r.excluded, r.excluded_reason
       FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE r.experiment_id = ? AND r.response_id = ?`,
    );
    this.integerValuesOf = db
      .prepare<[number], [number, number]>(
        `SELECT v.measure_id, v.value FROM response_values v JOIN measures m ON m.id = v.measure_id
         WHERE v.response_id = ? AND m.is_integer = 1`,
      )
      .raw();
    this.setResponseExcluded = db.prepare<[number, string | null, number]>(`UPDATE responses SET excluded = ?, excluded_reason = ? WHERE id = ?`);
    this.setValuesExcluded = db.prepare<[number, number]>(`UPDATE response_values SET excluded = ? WHERE response_id = ?`);
    this.decrementCount = db.prepare<[number, number, number, number, number]>(
      `UPDATE value_counts SET count = count - ? WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ?`,
    );
    this.deleteEmptyCount = db.prepare<[number, number, number, number]>(
      `DELETE FROM value_counts WHERE measure_id = ? AND condition_id = ? AND excluded = ? AND value = ? AND count = 0`,
    );
    this.incrementCount = db.prepare<[number, number, number, number, number]>(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, ?, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count`,
    );
    this.bumpExcluded = db.prepare<[number, number]>(`UPDATE conditions SET excluded_count = excluded_count + ? WHERE id = ?`);
    this.responsesOfRespondent = db.prepare<[number, string], { id: number; response_id: string; condition_id: number; excluded: number }>(
      `SELECT id, response_id, condition_id, excluded FROM responses WHERE experiment_id = ? AND respondent = ?`,
    );
    this.deleteValuesOf = db.prepare<[number]>(`DELETE FROM response_values WHERE response_id = ?`);
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
        this.setValuesExcluded.run(target, row.id);
        for (const [measureKey, value] of this.integerValuesOf.all(row.id)) this.moveCount(measureKey, row.condition_id, value, from, target);
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
      for (const row of rows) {
        for (const [measureKey, value] of this.integerValuesOf.all(row.id)) this.moveCount(measureKey, row.condition_id, value, row.excluded as 0 | 1, null);
        this.deleteValuesOf.run(row.id);
        this.deleteResponse.run(row.id);
        this.audit.redactResponse(experimentKey, row.response_id);
        const c = perCondition.get(row.condition_id) ?? { responses: 0, excluded: 0 };
        c.responses += 1;
        c.excluded += row.excluded;
        perCondition.set(row.condition_id, c);
      }
      for (const [conditionKey, c] of perCondition) this.dropCondition.run(c.responses, c.excluded, conditionKey);
      const dataVersion = rows.length > 0 ? (this.bumpVersion.get(experimentKey) as number) : state.data_version;
      // Only the count and the time (and the key that asked): nothing that identifies the respondent.
      this.audit.record({ experimentKey, action: 'erase', responseId: null, reason: null, count: rows.length, apiKeyId, at, dataVersion });
      return { kind: 'erased', erased: rows.length, dataVersion };
    });

    this.ingestTx = db.transaction(
      (experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): IngestOutcome => {
        const state = this.experimentState.get(experimentKey);
        if (!state) return { kind: 'not-found' };
        if (state.status !== 'open') return { kind: 'closed' };

        // 1. Idempotency: decide for every item before writing anything.
        const isNew = new Array<boolean>(items.length);
        const conflicts: { index: number; responseId: string }[] = [];
        const seenInBatch = new Map<string, Uint8Array>();
        for (let i = 0; i < items.length; i++) {
          const item = items[i];
          if (item.generated) {
            isNew[i] = true;
            continue;
          }
          const earlier = seenInBatch.get(item.responseId);
          const stored = earlier ?? this.existingHash.get(experimentKey, item.responseId);
          if (stored === undefined) {
            isNew[i] = true;
            seenInBatch.set(item.responseId, item.contentHash);
          } else if (bytesEqual(stored, item.contentHash)) {
            isNew[i] = false;
          } else {
            conflicts.push({ index: i, responseId: item.responseId });
          }
        }
        if (conflicts.length > 0) return { kind: 'conflict', conflicts };

        // 2. Writes.
        const integerMeasures = new Set<number>(this.integerMeasures.all(experimentKey));
        const countIncrements = new Map<string, { measure: number; condition: number; value: number; count: number }>();
        const perCondition = new Map<number, number>();
        let created = 0;
        for (let i = 0; i < items.length; i++) {
          if (!isNew[i]) continue;
          const item = items[i];
          const info = this.insertResponse.run(
            experimentKey,
            item.responseId,
            item.conditionKey,
            item.respondent,
            item.submittedAt,
            receivedAt,
            item.contentHash,
            apiKeyId,
          );
          const rowId = info.lastInsertRowid;
          for (const [measureKey, value] of item.values) {
            this.insertValue.run(rowId, measureKey, item.conditionKey, value);
            if (integerMeasures.has(measureKey)) {
              const k = `${measureKey}|${item.conditionKey}|${value}`;
              const entry = countIncrements.get(k);
              if (entry) entry.count += 1;
              else countIncrements.set(k, { measure: measureKey, condition: item.conditionKey, value, count: 1 });
            }
          }
          perCondition.set(item.conditionKey, (perCondition.get(item.conditionKey) ?? 0) + 1);
          created++;
        }
        for (const e of countIncrements.values()) this.upsertCount.run(e.measure, e.condition, e.value, e.count);
        for (const [conditionKey, n] of perCondition) this.bumpCondition.run(n, conditionKey);
        const dataVersion = created > 0 ? (this.bumpVersion.get(experimentKey) as number) : state.data_version;
        return {
          kind: 'stored',
          items: items.map((item, i) => ({ responseId: item.responseId, created: isNew[i] })),
          created,
          repeated: items.length - created,
          dataVersion,
        };
      },
    );

    this.rejectedTx = db.transaction((experimentKey: number, increments: RejectedIncrement[]) => {
      const merged = new Map<string, RejectedIncrement>();
      for (const inc of increments) {
        const k = `${inc.measureKey}|${inc.reason}`;
        const e = merged.get(k);
        if (e) e.count += inc.count;
        else merged.set(k, { ...inc });
      }
      for (const e of merged.values()) this.upsertRejected.run(experimentKey, e.measureKey, e.reason, e.count);
    });
  }

  async ingest(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): Promise<IngestOutcome> {
    return this.ingestTx.immediate(experimentKey, items, receivedAt, apiKeyId);
  }

  async recordRejected(experimentKey: number, increments: RejectedIncrement[]): Promise<void> {
    if (increments.length === 0) return;
    this.rejectedTx.immediate(experimentKey, increments);
  }

  async getRejectedCounts(experimentKey: number): Promise<RejectedCount[]> {
    return this.rejectedOf.all(experimentKey);
  }

  async getStored(experimentKey: number, responseId: string): Promise<StoredResponse | null> {
    return this.db.transaction(() => {
      const row = this.storedResponse.get(experimentKey, responseId);
      if (!row) return null;
      const values: Record<string, number> = {};
      for (const v of this.storedValues.all(row.id)) values[v.measure] = v.value;
      return {
        responseId: row.response_id,
        condition: row.condition,
        respondent: row.respondent,
        values,
        submittedAt: row.submitted_at,
        receivedAt: row.received_at,
        excluded: row.excluded === 1,
        excludedReason: row.excluded_reason,
      };
    })();
  }

  private integerMeasure(measureKey: number): MeasureRow {
    const m = this.measureRow.get(measureKey);
    if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
    if (m.is_integer !== 1) throw new RangeError(`measure key ${measureKey} is continuous; per-value counts exist only for integer measures`);
    return m;
  }

  private readValueCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): [number, number][] {
    return includeExcluded ? this.countsBoth.all(measureKey, conditionKey) : this.countsOne.all(measureKey, conditionKey, 0);
  }

  private readDense(measureKey: number, conditionKey: number, includeExcluded: boolean): Float64Array {
    const m = this.integerMeasure(measureKey);
    const size = m.max - m.min + 1;
    if (size > MAX_DENSE_COUNTS) {
      throw new RangeError(`measure key ${measureKey} spans ${size} values (more than ${MAX_DENSE_COUNTS}); use getValueCounts`);
    }
    const out = new Float64Array(size);
    for (const [value, count] of this.readValueCounts(measureKey, conditionKey, includeExcluded)) out[value - m.min] += count;
    return out;
  }

  private readSorted(measureKey: number, conditionKey: number, includeExcluded: boolean): Float64Array {
    const kept = this.readSortedRun(measureKey, conditionKey, 0);
    return includeExcluded ? mergeSorted(kept, this.readSortedRun(measureKey, conditionKey, 1)) : kept;
  }

  /**
   * One run (excluded = 0 or 1) in value order. `.pluck().all()` then a copy into a Float64Array measured about
   * 1.5–2× faster than counting first and filling a preallocated array from `.pluck().iterate()` for 1e5 rows
   * (see DEVELOPERS.md, "Reading values").
   */
  private readSortedRun(measureKey: number, conditionKey: number, excluded: 0 | 1): Float64Array {
    return Float64Array.from(this.sortedValues.all(measureKey, conditionKey, excluded));
  }

  async getCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.readDense(measureKey, conditionKey, includeExcluded);
  }

  async getValueCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<WeightedValues> {
    this.integerMeasure(measureKey);
    const rows = this.readValueCounts(measureKey, conditionKey, includeExcluded).filter((r) => r[1] > 0);
    const values = new Float64Array(rows.length);
    const counts = new Float64Array(rows.length);
    rows.forEach(([v, c], i) => {
      values[i] = v;
      counts[i] = c;
    });
    return { values, counts };
  }

  async getSortedValues(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.db.transaction(() => this.readSorted(measureKey, conditionKey, includeExcluded))();
  }

  async getSortedValuesSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.db.transaction((): MeasureSnapshot => {
      const m = this.measureRow.get(measureKey);
      if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
      const dataVersion = this.dataVersionOfMeasure(measureKey);
      return { dataVersion, groups: conditionKeys.map((c) => this.readSorted(measureKey, c, includeExcluded)), ...this.snapshotContext(measureKey) };
    })();
  }

  async getCountsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.db.transaction((): MeasureSnapshot => {
      const dataVersion = this.dataVersionOfMeasure(measureKey);
      return { dataVersion, groups: conditionKeys.map((c) => this.readDense(measureKey, c, includeExcluded)), ...this.snapshotContext(measureKey) };
    })();
  }

  /** Per-condition counters and rejected counts, read inside the caller's transaction. */
  private snapshotContext(measureKey: number): Pick<MeasureSnapshot, 'conditions' | 'rejected' | 'rejectedTotal'> {
    const conditions: ConditionCounter[] = this.conditionCounters.all(measureKey).map(([key, responses, excluded]) => ({ key, responses, excluded }));
    return { conditions, rejected: this.rejectedOfMeasure.all(measureKey), rejectedTotal: this.rejectedTotalOf.get(measureKey) as number };
  }

  async getComparisonStamp(experimentKey: number): Promise<ComparisonStamp | null> {
    const row = this.stampOf.get(experimentKey);
    return row ? { dataVersion: row.data_version, rejectedTotal: row.rejected } : null;
  }

  /**
   * Move one answer's per-value count from excluded = `from` to excluded = `to` (null: remove it, for erasure).
   * A count that reaches 0 is deleted, so value_counts stays equal to a GROUP BY over response_values.
   */
  private moveCount(measureKey: number, conditionKey: number, value: number, from: 0 | 1, to: 0 | 1 | null): void {
    const changed = this.decrementCount.run(1, measureKey, conditionKey, from, value).changes;
    if (changed !== 1) throw new Error(`value_counts has no row for measure ${measureKey}, condition ${conditionKey}, excluded ${from}, value ${value}`);
    this.deleteEmptyCount.run(measureKey, conditionKey, from, value);
    if (to !== null) this.incrementCount.run(measureKey, conditionKey, to, value, 1);
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

  private dataVersionOfMeasure(measureKey: number): number {
    const row = this.measureDataVersion.get(measureKey);
    if (row === undefined) throw new RangeError(`measure key ${measureKey} does not exist`);
    return row;
  }

  async countValues(measureKey: number): Promise<number> {
    return this.valueCount.get(measureKey) as number;
  }
}
