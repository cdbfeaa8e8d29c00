/**
 * Reads of stored responses in SQLite: stored responses, per-value counts, sorted values through the sorted-runs
 * cache (../sorted-runs-cache.ts; merged with newer rows, or read whole, also by a worker thread), snapshots read in one
 * transaction with the dataVersion and counters, and the comparison stamp. Part of the response repository
 * (responses.ts is the facade).
 */
import { existsSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { mergeNewValues, runKey, sharedFloat64, SortedValuesCache, toShared, type SortedRun } from '../sorted-runs-cache.js';
import type { SqliteDatabase } from './open.js';
import { forEachPacked, packedValueOf } from './packed-values.js';
import { STORED_RESPONSE_COLUMNS, storedResponse, type StoredResponseRow } from '../response-rows.js';
import type {
  ComparisonStamp,
  ConditionCounter,
  MeasureSnapshot,
  RejectedCount,
  RejectionReason,
  StoredResponse,
  WeightedValues,
} from '../types.js';
import { MAX_DENSE_COUNTS, type AnswerWithValue, type RunsSnapshot, type SnapshotRun, type SortedRunsReader } from '../types.js';

/**
 * A merge reads only rows with responses.id above the cached last id; when more responses than this share of the
 * cached run arrived (or at least INCREMENTAL_MIN_ROWS), one ordered read of the whole run is cheaper.
 */
export const INCREMENTAL_MAX_SHARE = 0.25;

export const INCREMENTAL_MIN_ROWS = 10_000;

/** worker-reads.js beside this file when built; worker-reads.ts under tsx or vitest (the worker registers tsx). */

const WORKER_READS_MODULE = ((): string => {
  const js = new URL('./worker-reads.js', import.meta.url);
  return existsSync(fileURLToPath(js)) ? js.href : new URL('./worker-reads.ts', import.meta.url).href;
})();

interface MeasureRow {
  id: number;
  min: number;
  max: number;
  is_integer: number;
}

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

/**
 * The responses of one run that arrived after a known response id, with their packed values (migration 0008): a
 * range of the responses table's rowid, O(new responses), whatever the size of the run. The measure's value is taken
 * from each packed copy. Exported for the query-plan test.
 */
export const NEW_VALUES_OF_RUN_SQL = `SELECT packed_values FROM responses
  WHERE id > ? AND id <= ? AND condition_id = ? AND excluded = ?`;

/** Most single-response requests written in one group commit. */

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

/** Every read of responses: stored responses, counts, sorted values through the sorted-runs cache, snapshots, stamps. */
export class SqliteResponseReads implements SortedRunsReader {
  private readonly rejectedOf;
  private readonly storedResponse;
  private readonly storedValues;
  private readonly measureSlugs;
  private readonly answersAt;
  private readonly receivedSince;
  private readonly measureRow;
  private readonly countsOne;
  private readonly countsBoth;
  private readonly sortedValues;
  private readonly valueCount;
  private readonly measureDataVersion;
  private readonly conditionCounters;
  private readonly rejectedOfMeasure;
  private readonly rejectedTotalOf;
  private readonly stampOf;
  private readonly epochStmt;
  private readonly maxResponseId;
  private readonly newValuesOfRun;
  private readonly conditionCounter;
  /** Sorted runs kept in memory (see ../sorted-runs-cache.ts). */
  readonly sortedCache = new SortedValuesCache();

  constructor(private readonly db: SqliteDatabase) {
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
    this.storedValues = db.prepare<[number], string>(`SELECT packed_values FROM responses WHERE id = ?`).pluck();
    this.measureSlugs = db
      .prepare<[number], [number, string]>(`SELECT id, slug FROM measures WHERE experiment_id = ? ORDER BY position`)
      .raw();
    this.receivedSince = db.prepare<[number, string], number>(`SELECT count(*) FROM responses WHERE experiment_id = ? AND received_at >= ?`).pluck();
    this.answersAt = db.prepare<[number, number, number, number, number], { response_id: string; value: number; received_at: string; excluded: number }>(
      `SELECT r.response_id, v.value, r.received_at, v.excluded FROM response_values v JOIN responses r ON r.id = v.response_id
       WHERE v.measure_id = ? AND v.condition_id = ? AND v.excluded = ? AND v.value = ? ORDER BY r.received_at, r.id LIMIT ?`,
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
    this.epochStmt = tryPrepare(db, `SELECT epoch FROM values_epoch WHERE id = 1`);
    this.maxResponseId = db.prepare<[], number>(`SELECT coalesce(max(id), 0) FROM responses`).pluck();
    this.newValuesOfRun = db.prepare<[number, number, number, number], string>(NEW_VALUES_OF_RUN_SQL).pluck();
    this.conditionCounter = db.prepare<[number], { response_count: number; excluded_count: number }>(
      `SELECT response_count, excluded_count FROM conditions WHERE id = ?`,
    );

  }


  async getRejectedCounts(experimentKey: number): Promise<RejectedCount[]> {
    return this.rejectedOf.all(experimentKey);
  }

  async getStored(experimentKey: number, responseId: string): Promise<StoredResponse | null> {
    return this.db.transaction(() => {
      const row = this.storedResponse.get(experimentKey, responseId);
      if (!row) return null;
      const byKey = new Map<number, number>();
      forEachPacked(this.storedValues.get(row.id) ?? '', (measureKey, value) => byKey.set(measureKey, value));
      const values: Record<string, number> = {};
      for (const [measureKey, slug] of this.measureSlugs.all(experimentKey)) {
        const value = byKey.get(measureKey);
        if (value !== undefined) values[slug] = value;
      }
      return storedResponse(row, values);
    })();
  }

  /** Responses received at or after each time (one read transaction; a scan of the experiment's responses). */
  async countReceivedSince(experimentKey: number, since: readonly string[]): Promise<number[]> {
    return this.db.transaction(() => since.map((s) => this.receivedSince.get(experimentKey, s) ?? 0))();
  }

  /**
   * The answers equal to each of `values` (one indexed lookup per value on (measure, condition, excluded, value)),
   * oldest arrival first within a value, at most `limit` in all, in ONE read transaction.
   */
  async getAnswersWithValues(measureKey: number, conditionKey: number, values: readonly number[], includeExcluded: boolean, limit: number): Promise<AnswerWithValue[]> {
    return this.db.transaction(() => {
      const out: AnswerWithValue[] = [];
      for (const value of values) {
        if (out.length >= limit) break;
        for (const excluded of includeExcluded ? [0, 1] : [0]) {
          const rows = this.answersAt.all(measureKey, conditionKey, excluded, value, limit - out.length);
          for (const r of rows) out.push({ responseId: r.response_id, value: r.value, receivedAt: r.received_at, excluded: r.excluded === 1 });
        }
      }
      return out;
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
      const added: number[] = [];
      for (const packed of this.newValuesOfRun.iterate(run.lastRowId, view.lastRowId, conditionKey, excluded)) {
        const value = packedValueOf(packed, measureKey);
        if (value !== undefined) added.push(value);
      }
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
   * thread runs on its own read-only connection (worker-reads.ts, run by the comparison worker pool); the caller adopts the runs.
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

  /** A worker reads the runs through worker-reads.ts on its own read-only connection to the same file. */
  get workerReads(): { module: string; source: string } | null {
    const source = this.databasePath;
    return source === null ? null : { module: WORKER_READS_MODULE, source };
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

  private dataVersionOfMeasure(measureKey: number): number {
    const row = this.measureDataVersion.get(measureKey);
    if (row === undefined) throw new RangeError(`measure key ${measureKey} does not exist`);
    return row;
  }

  async countValues(measureKey: number): Promise<number> {
    return this.valueCount.get(measureKey) as number;
  }
}
