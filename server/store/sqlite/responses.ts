/**
 * Responses, their values, per-value counts and rejected-value counters (SQLite).
 *
 * Ingest is ONE synchronous better-sqlite3 transaction (BEGIN IMMEDIATE): idempotency checks, response rows,
 * value rows, per-value counts of integer measures (aggregated in JS first: one upsert per distinct
 * (measure, condition, value)), per-condition counters and dataVersion + 1. Nothing async runs inside it.
 * A batch looks its client ids up 100 per statement and writes rows with multi-row INSERTs (explicit ids:
 * max(id) + 1, …, what SQLite would pick). Single responses arriving in the same event-loop turn share one
 * transaction (group commit, one savepoint per request; see ingest()), acknowledged only after COMMIT.
 *
 * Reads for comparisons: getCounts / getValueCounts read value_counts (integer measures, O(distinct values));
 * getSortedValues walks the index (measure_id, condition_id, excluded, value) in order into a Float64Array
 * (O(n), no sort). getSortedValuesSnapshot goes through the sorted-values cache (server/store/sqlite/sorted-runs-cache.ts):
 * a held run is reused, newer rows (responses.id above the last one seen, same values epoch of migration 0004)
 * are merged in, anything else is read again; readRunsSnapshot/adoptRunsSnapshot let a worker thread do a large
 * full read on its own read-only connection (server/store/sqlite/compare-worker.ts). With includeExcluded the two sorted runs (excluded = 0 and = 1) are merged in O(n). The
 * snapshots also read the per-condition counters and the rejected-value counts in the same read transaction, so
 * every data-dependent input of a comparison belongs to one dataVersion.
 *
 * Exclusion / restoration and erasure are each ONE write transaction (BEGIN IMMEDIATE) that keeps the invariants
 * of DEVELOPERS.md: response flag and reason, response_values.excluded, value_counts moved between excluded 0 and 1
 * (or decremented; rows reaching 0 are deleted, so value_counts always equals a GROUP BY over response_values),
 * conditions.response_count / excluded_count, dataVersion + 1 and an audit row (audit.ts).
 */
import { mergeNewValues, runKey, sharedFloat64, SortedValuesCache, toShared, type SortedRun } from './sorted-runs-cache.js';
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
} from '../types.js';

/**
 * A merge reads only rows with responses.id above the cached last id; when more responses than this share of the
 * cached run arrived (or at least INCREMENTAL_MIN_ROWS), one ordered read of the whole run is cheaper.
 */
export const INCREMENTAL_MAX_SHARE = 0.25;
export const INCREMENTAL_MIN_ROWS = 10_000;

/** One run (measure, condition, excluded) of a snapshot read for the sorted-values cache. */
export interface SnapshotRun {
  conditionKey: number;
  excluded: 0 | 1;
  values: Float64Array;
}

/** What a full read of sorted runs returns (also from a worker thread's read-only connection). */
export interface RunsSnapshot extends Omit<MeasureSnapshot, 'groups'> {
  epoch: number;
  lastRowId: number;
  runs: SnapshotRun[];
}

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
  const out = sharedFloat64(a.length + b.length); // shared, so that a worker can take it without a copy
  let i = 0;
  let j = 0;
  let k = 0;
  while (i < a.length && j < b.length) out[k++] = a[i] <= b[j] ? a[i++] : b[j++];
  while (i < a.length) out[k++] = a[i++];
  while (j < b.length) out[k++] = b[j++];
  return out;
}

/** Multi-row INSERT sizes of the batch path (rows per statement; 9 and 4 parameters a row). */
export const RESPONSE_ROWS_PER_INSERT = 50;
export const VALUE_ROWS_PER_INSERT = 100;
const RESPONSE_COLUMNS = 9;
const VALUE_COLUMNS = 4;
/** Client ids looked up per statement in a batch. */
export const ID_LOOKUP_CHUNK = 100;

/**
 * Values of one run added after a known response id. The unary + keeps SQLite off response_values_scan (equality on
 * its first three columns would make it walk the whole run); only the primary-key range on response_id is then
 * usable: O(new rows). Exported for the query-plan test.
 */
export const NEW_VALUES_OF_RUN_SQL = `SELECT value FROM response_values
  WHERE response_id > ? AND response_id <= ? AND +measure_id = ? AND +condition_id = ? AND +excluded = ?`;

/** One stored response with its condition's slug (values apart), as read by getStored and by the CSV export. */
export interface StoredResponseRow {
  id: number;
  response_id: string;
  condition: string;
  respondent: string | null;
  submitted_at: string;
  received_at: string;
  excluded: number;
  excluded_reason: string | null;
}

/** The columns of a StoredResponseRow, from `responses r JOIN conditions c ON c.id = r.condition_id`. */
export const STORED_RESPONSE_COLUMNS =
  'r.id, r.response_id, c.slug AS condition, r.respondent, r.submitted_at, r.received_at, r.excluded, r.excluded_reason';

/** Most single-response requests written in one group commit. */
export const GROUP_COMMIT_MAX = 256;

/** The next turn of the event loop (captured at load, so fake timers in tests cannot stall a commit). */
const deferTurn: (fn: () => void) => void = globalThis.setImmediate.bind(globalThis);

interface PendingIngest {
  experimentKey: number;
  items: ValidResponse[];
  receivedAt: string;
  apiKeyId: number | null;
  resolve: (outcome: IngestOutcome) => void;
  reject: (error: unknown) => void;
}

interface CacheView {
  epoch: number;
  lastRowId: number;
}

/** Can a cached run be brought up to `view` by merging the newer rows (same epoch, not too many new responses)? */
function mergeable(run: SortedRun, view: CacheView): boolean {
  if (run.epoch !== view.epoch || run.lastRowId > view.lastRowId) return false;
  return view.lastRowId - run.lastRowId <= Math.max(INCREMENTAL_MIN_ROWS, run.values.length * INCREMENTAL_MAX_SHARE);
}

/** Prepare a pluck statement, or null when the schema lacks its table (a database without migration 0004). */
function tryPrepare(db: SqliteDatabase, sql: string) {
  try {
    return db.prepare<[], number>(sql).pluck();
  } catch {
    return null;
  }
}

export class SqliteResponseRepository implements ResponseRepository {
  private readonly experimentState;
  private readonly integerMeasures;
  private readonly existingHash;
  private readonly insertValue;
  private readonly insertResponseWithId;
  private readonly insertResponsesMany;
  private readonly insertValuesMany;
  private readonly hashesOf;
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
  private readonly epochStmt;
  private readonly maxResponseId;
  private readonly newValuesOfRun;
  private readonly conditionCounter;
  private readonly groupTx;
  private group: PendingIngest[] = [];
  private flushScheduled = false;
  /** Group-commit figures (tests and benchmarks): committed groups, requests in them, the largest group. */
  readonly groupStats = { groups: 0, requests: 0, largest: 0 };
  /** Sorted runs of continuous measures kept between comparisons (see server/store/sqlite/sorted-runs-cache.ts). */
  readonly sortedCache = new SortedValuesCache();

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
    this.insertResponseWithId = db.prepare<unknown[]>(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.insertResponsesMany = db.prepare<unknown[]>(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id)
       VALUES ${Array.from({ length: RESPONSE_ROWS_PER_INSERT }, () => '(?, ?, ?, ?, ?, ?, ?, ?, ?)').join(', ')}`,
    );
    this.insertValuesMany = db.prepare<unknown[]>(
      `INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value)
       VALUES ${Array.from({ length: VALUE_ROWS_PER_INSERT }, () => '(?, ?, ?, 0, ?)').join(', ')}`,
    );
    this.hashesOf = db
      .prepare<unknown[], [string, Buffer]>(
        `SELECT response_id, content_hash FROM responses WHERE experiment_id = ? AND response_id IN (${Array.from({ length: ID_LOOKUP_CHUNK }, () => '?').join(', ')})`,
      )
      .raw();
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
    this.storedResponse = db.prepare<[number, string], StoredResponseRow>(
      `SELECT ${STORED_RESPONSE_COLUMNS}
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
    this.stampOf = db.prepare<[number], { data_version: number; rejected: number; looks: number }>(
      `SELECT e.data_version, (SELECT coalesce(sum(r.count), 0) FROM rejected_value_counts r WHERE r.experiment_id = e.id) AS rejected,
              (SELECT count(*) FROM interim_looks l WHERE l.experiment_id = e.id) AS looks
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
    this.epochStmt = tryPrepare(db, `SELECT epoch FROM values_epoch WHERE id = 1`);
    this.maxResponseId = db.prepare<[], number>(`SELECT coalesce(max(id), 0) FROM responses`).pluck();
    this.newValuesOfRun = db
      .prepare<[number, number, number, number, number], number>(
        NEW_VALUES_OF_RUN_SQL,
      )
      .pluck();
    this.conditionCounter = db.prepare<[number], { response_count: number; excluded_count: number }>(
      `SELECT response_count, excluded_count FROM conditions WHERE id = ?`,
    );

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

        // 1. Idempotency: decide for every item before writing anything. A batch looks its client ids up
        //    ID_LOOKUP_CHUNK at a time (one statement per chunk instead of one per item).
        const storedHashes = items.length > 1 ? this.lookupHashes(experimentKey, items) : null;
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
          const stored = earlier ?? (storedHashes ? storedHashes.get(item.responseId) : this.existingHash.get(experimentKey, item.responseId));
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

        // 2. Writes. Ids are given explicitly (max(id) + 1, + 2, …: exactly what SQLite would pick, since this
        //    transaction is the only writer), so response rows and value rows go in as multi-row INSERTs of up to
        //    RESPONSE_ROWS_PER_INSERT / VALUE_ROWS_PER_INSERT rows: one statement call per chunk, not per row.
        const integerMeasures = new Set<number>(this.integerMeasures.all(experimentKey));
        const countIncrements = new Map<number, Map<number, Map<number, number>>>();
        const perCondition = new Map<number, number>();
        let created = 0;
        let nextId = (this.maxResponseId.get() as number) + 1;
        const responseParams: unknown[] = [];
        const valueParams: unknown[] = [];
        const flushResponses = (): void => {
          const rows = responseParams.length / RESPONSE_COLUMNS;
          if (rows === 0) return;
          if (rows === RESPONSE_ROWS_PER_INSERT) this.insertResponsesMany.run(responseParams);
          else for (let r = 0; r < rows; r++) this.insertResponseWithId.run(responseParams.slice(r * RESPONSE_COLUMNS, (r + 1) * RESPONSE_COLUMNS));
          responseParams.length = 0;
        };
        const flushValues = (): void => {
          const rows = valueParams.length / VALUE_COLUMNS;
          if (rows === 0) return;
          if (rows === VALUE_ROWS_PER_INSERT) this.insertValuesMany.run(valueParams);
          else for (let r = 0; r < rows; r++) this.insertValue.run(...(valueParams.slice(r * VALUE_COLUMNS, (r + 1) * VALUE_COLUMNS) as [number, number, number, number]));
          valueParams.length = 0;
        };
        for (let i = 0; i < items.length; i++) {
          if (!isNew[i]) continue;
          const item = items[i];
          const rowId = nextId++;
          responseParams.push(rowId, experimentKey, item.responseId, item.conditionKey, item.respondent, item.submittedAt, receivedAt, item.contentHash, apiKeyId);
          if (responseParams.length === RESPONSE_ROWS_PER_INSERT * RESPONSE_COLUMNS) {
            flushResponses();
          }
          for (const [measureKey, value] of item.values) {
            valueParams.push(rowId, measureKey, item.conditionKey, value);
            if (valueParams.length === VALUE_ROWS_PER_INSERT * VALUE_COLUMNS) {
              flushResponses(); // parents first: the foreign keys are checked per statement
              flushValues();
            }
            if (integerMeasures.has(measureKey)) {
              let byCondition = countIncrements.get(measureKey);
              if (!byCondition) countIncrements.set(measureKey, (byCondition = new Map()));
              let byValue = byCondition.get(item.conditionKey);
              if (!byValue) byCondition.set(item.conditionKey, (byValue = new Map()));
              byValue.set(value, (byValue.get(value) ?? 0) + 1);
            }
          }
          perCondition.set(item.conditionKey, (perCondition.get(item.conditionKey) ?? 0) + 1);
          created++;
        }
        flushResponses();
        flushValues();
        for (const [measure, byCondition] of countIncrements) {
          for (const [condition, byValue] of byCondition) for (const [value, count] of byValue) this.upsertCount.run(measure, condition, value, count);
        }
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

    this.groupTx = db.transaction((group: PendingIngest[]) =>
      group.map((g) => {
        try {
          // Nested: a SAVEPOINT inside the group's transaction; an error rolls back this request only.
          return { ok: true as const, outcome: this.ingestTx(g.experimentKey, g.items, g.receivedAt, g.apiKeyId) };
        } catch (error) {
          return { ok: false as const, error };
        }
      }),
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

  /**
   * Group commit. A request with ONE response joins the group of single responses that arrive in the same turn of
   * the event loop (while the previous commit waited for its fsync, the next requests piled up on their sockets;
   * they are handled in one turn); the group is written as ONE transaction (BEGIN IMMEDIATE) in which every
   * request is its own savepoint (better-sqlite3 nests db.transaction as SAVEPOINT): its own idempotency check,
   * conflict or error, rolled back alone; the others go on. Every promise settles only after COMMIT returned,
   * i.e. after the WAL was fsync'ed (synchronous = FULL): no response is acknowledged before it is durable. A
   * failed COMMIT rejects every request of the group. At most GROUP_COMMIT_MAX requests per group. Batches
   * (2 or more responses) are already one transaction each and run at once.
   */
  async ingest(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): Promise<IngestOutcome> {
    if (items.length !== 1) return this.ingestTx.immediate(experimentKey, items, receivedAt, apiKeyId);
    return new Promise<IngestOutcome>((resolve, reject) => {
      this.group.push({ experimentKey, items, receivedAt, apiKeyId, resolve, reject });
      if (this.group.length >= GROUP_COMMIT_MAX) this.flushGroup();
      else if (!this.flushScheduled) {
        this.flushScheduled = true;
        deferTurn(() => this.flushGroup());
      }
    });
  }

  /**
   * Store one chunk synchronously inside a write transaction the caller already holds (the bulk import of
   * server/store/sqlite/bulk.ts): the same bookkeeping as ingest() (idempotency, counts, dataVersion), run as a SAVEPOINT
   * of the caller's transaction. SQLite only, so not part of ResponseRepository.
   */
  ingestWithinTransaction(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): IngestOutcome {
    if (!this.db.inTransaction) throw new Error('ingestWithinTransaction needs an open transaction');
    return this.ingestTx.immediate(experimentKey, items, receivedAt, apiKeyId);
  }

  /** Stored content hashes of the batch's client ids (one statement per ID_LOOKUP_CHUNK distinct ids). */
  private lookupHashes(experimentKey: number, items: ValidResponse[]): Map<string, Uint8Array> {
    const ids = [...new Set(items.filter((x) => !x.generated).map((x) => x.responseId))];
    const found = new Map<string, Uint8Array>();
    for (let start = 0; start < ids.length; start += ID_LOOKUP_CHUNK) {
      const chunk = ids.slice(start, start + ID_LOOKUP_CHUNK);
      if (chunk.length === ID_LOOKUP_CHUNK) {
        for (const [id, hash] of this.hashesOf.all(experimentKey, ...chunk)) found.set(id, hash);
      } else {
        for (const id of chunk) {
          const hash = this.existingHash.get(experimentKey, id);
          if (hash !== undefined) found.set(id, hash);
        }
      }
    }
    return found;
  }

  /** Write the pending group of single responses (see ingest). */
  private flushGroup(): void {
    this.flushScheduled = false;
    const group = this.group.splice(0);
    if (group.length === 0) return;
    let results: ({ ok: true; outcome: IngestOutcome } | { ok: false; error: unknown })[];
    try {
      results = this.groupTx.immediate(group);
    } catch (error) {
      for (const g of group) g.reject(error);
      return;
    }
    this.groupStats.groups++;
    this.groupStats.requests += group.length;
    if (group.length > this.groupStats.largest) this.groupStats.largest = group.length;
    results.forEach((r, i) => (r.ok ? group[i].resolve(r.outcome) : group[i].reject(r.error)));
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

  private readSorted(measureKey: number, conditionKey: number, includeExcluded: boolean, view: CacheView | null = null): Float64Array {
    const kept = this.readRunCached(measureKey, conditionKey, 0, view);
    return includeExcluded ? mergeSorted(kept, this.readRunCached(measureKey, conditionKey, 1, view)) : kept;
  }

  /** The epoch and the last response id, read inside the caller's read transaction (null: no cache possible). */
  private cacheView(): CacheView | null {
    if (!this.epochStmt) return null;
    return { epoch: this.epochStmt.get() as number, lastRowId: this.maxResponseId.get() as number };
  }

  /** What it would take to serve a run from the cache: 'ready' (held, or a small merge), else the size of a full read. */
  private runPlan(measureKey: number, conditionKey: number, excluded: 0 | 1, view: CacheView): { ready: true } | { ready: false; estimate: number } {
    const run = this.sortedCache.get(runKey(measureKey, conditionKey, excluded));
    if (run && mergeable(run, view)) return { ready: true };
    const c = this.conditionCounter.get(conditionKey);
    const estimate = c ? (excluded === 0 ? c.response_count - c.excluded_count : c.excluded_count) : 0;
    return { ready: false, estimate };
  }

  /**
   * One run in value order, through the sorted-values cache when a view is given: held → as is; newer rows →
   * merged; otherwise one ordered read of the whole run, kept for next time.
   */
  private readRunCached(measureKey: number, conditionKey: number, excluded: 0 | 1, view: CacheView | null): Float64Array {
    if (!view) return this.readSortedRun(measureKey, conditionKey, excluded);
    const key = runKey(measureKey, conditionKey, excluded);
    const run = this.sortedCache.get(key);
    if (run && run.epoch === view.epoch && run.lastRowId === view.lastRowId) {
      this.sortedCache.stats.hits++;
      return run.values;
    }
    if (run && mergeable(run, view)) {
      const added = this.newValuesOfRun.all(run.lastRowId, view.lastRowId, measureKey, conditionKey, excluded);
      const values = mergeNewValues(run.values, added);
      this.sortedCache.stats.merges++;
      this.sortedCache.stats.mergedRows += added.length;
      this.sortedCache.set(key, { values, lastRowId: view.lastRowId, epoch: view.epoch });
      return values;
    }
    if (run && run.epoch !== view.epoch) this.sortedCache.stats.invalidations++;
    const values = toShared(this.sortedValues.all(measureKey, conditionKey, excluded));
    this.sortedCache.stats.fullReads++;
    this.sortedCache.set(key, { values, lastRowId: view.lastRowId, epoch: view.epoch });
    return values;
  }

  /**
   * Every run a snapshot needs (excluded = 0, and 1 with includeExcluded) read whole, with the dataVersion, the
   * epoch, the last response id and the context, in ONE read transaction. No cache involved: this is what a worker
   * thread runs on its own read-only connection (server/store/sqlite/compare-worker.ts); the caller adopts the runs.
   */
  readRunsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): RunsSnapshot {
    return this.db.transaction((): RunsSnapshot => {
      const m = this.measureRow.get(measureKey);
      if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
      const dataVersion = this.dataVersionOfMeasure(measureKey);
      const view = this.cacheView() ?? { epoch: -1, lastRowId: this.maxResponseId.get() as number };
      const runs: SnapshotRun[] = [];
      for (const c of conditionKeys) {
        runs.push({ conditionKey: c, excluded: 0, values: toShared(this.sortedValues.all(measureKey, c, 0)) });
        if (includeExcluded) runs.push({ conditionKey: c, excluded: 1, values: toShared(this.sortedValues.all(measureKey, c, 1)) });
      }
      return { dataVersion, epoch: view.epoch, lastRowId: view.lastRowId, runs, ...this.snapshotContext(measureKey) };
    })();
  }

  /** Keep the runs of a snapshot read elsewhere (a worker) in the cache and assemble the snapshot's groups. */
  adoptRunsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, snap: RunsSnapshot): MeasureSnapshot {
    if (snap.epoch >= 0) {
      for (const r of snap.runs) {
        const run: SortedRun = { values: r.values, lastRowId: snap.lastRowId, epoch: snap.epoch };
        this.sortedCache.set(runKey(measureKey, r.conditionKey, r.excluded), run);
      }
    }
    const find = (c: number, ex: 0 | 1): Float64Array => snap.runs.find((r) => r.conditionKey === c && r.excluded === ex)?.values ?? new Float64Array(0);
    const groups = conditionKeys.map((c) => (includeExcluded ? mergeSorted(find(c, 0), find(c, 1)) : find(c, 0)));
    const { epoch: _e, lastRowId: _l, runs: _r, ...rest } = snap;
    return { ...rest, groups };
  }

  /**
   * How many values getSortedValuesSnapshot would read whole (runs neither cached at the current epoch nor close
   * enough to merge), from the per-condition counters: an upper bound, O(1) per run. A caller sends a large full
   * read to a worker (readRunsSnapshot on its own connection, then adoptRunsSnapshot) instead of blocking.
   * Infinity when there is no cache (a database without migration 0004).
   */
  fullReadEstimate(measureKey: number, conditionKeys: number[], includeExcluded: boolean): number {
    return this.db.transaction((): number => {
      const view = this.cacheView();
      if (!view) return Infinity;
      let fullRead = 0;
      for (const c of conditionKeys) {
        for (const ex of includeExcluded ? ([0, 1] as const) : ([0] as const)) {
          const plan = this.runPlan(measureKey, c, ex, view);
          if (!plan.ready) fullRead += plan.estimate;
        }
      }
      return fullRead;
    })();
  }

  /** The database file (for a worker's own read-only connection); null for an in-memory database. */
  get databasePath(): string | null {
    const name = this.db.name;
    return name === ':memory:' || name === '' || this.db.memory ? null : name;
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
      const view = this.cacheView();
      return { dataVersion, groups: conditionKeys.map((c) => this.readSorted(measureKey, c, includeExcluded, view)), ...this.snapshotContext(measureKey) };
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
    return row ? { dataVersion: row.data_version, rejectedTotal: row.rejected, looks: row.looks } : null;
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
