/**
 * Sorted values of continuous measures kept in memory between comparisons, updated by merging only the rows that
 * arrived since (issue 8: "incremental sorted state instead of re-reading and re-sorting").
 *
 * One entry per run: (measure, condition, excluded 0 or 1). An entry holds the run's values in non-decreasing
 * order, the largest responses.id it has seen (`lastRowId`) and the values epoch of the database when it was read
 * (migrations/sqlite/0004_values_epoch.sql: the epoch moves whenever a stored value changes or disappears: exclusion,
 * restoration, erasure, deletion). A reader in a read transaction then has three cases:
 *   - same epoch, same last id              → the entry is the run (O(1));
 *   - same epoch, newer responses           → read only rows with id > lastRowId, sort them (k log k) and merge
 *                                             (O(n + k)); new rows always get larger ids than every existing one
 *                                             while nothing was deleted, and a deletion moves the epoch;
 *   - another epoch, or no entry            → read the whole run from the index (O(n), already in order).
 *
 * Arrays are backed by SharedArrayBuffer and never changed after they are made (a merge makes a new one), so they
 * can be handed to a worker thread (worker-reads.ts, run by the comparison worker pool) without a copy and a reply computed from an older
 * array stays valid for its own dataVersion.
 *
 * Bounded by a total number of values (default 8,000,000 = 64 MB); the least recently used runs go first.
 * Pure bookkeeping, shared by the engines: no SQL here (store/sqlite/responses-reads.ts and store/postgres/responses.ts read; this file keeps and merges).
 */

export interface SortedRun {
  /** Values in non-decreasing order (SharedArrayBuffer-backed, never mutated). */
  readonly values: Float64Array;
  /** The largest responses.id visible when the run was read (0 for none). */
  readonly lastRowId: number;
  /** values_epoch when the run was read. */
  readonly epoch: number;
}

export const DEFAULT_MAX_CACHED_VALUES = 8_000_000;

/** A Float64Array of length n on a SharedArrayBuffer (falls back to an ordinary buffer where SAB is missing). */
export function sharedFloat64(n: number): Float64Array {
  const bytes = Math.max(0, n) * Float64Array.BYTES_PER_ELEMENT;
  return typeof SharedArrayBuffer === 'function' ? new Float64Array(new SharedArrayBuffer(bytes)) : new Float64Array(bytes / 8);
}

/** Copy any array of numbers into a shared Float64Array. O(n). */
export function toShared(values: ArrayLike<number>): Float64Array {
  const out = sharedFloat64(values.length);
  for (let i = 0; i < values.length; i++) out[i] = values[i];
  return out;
}

/**
 * Merge a sorted run with new values (any order; sorted here, k log k) into a new shared array. O(n + k log k).
 * Neither input is changed.
 */
export function mergeNewValues(sorted: Float64Array, added: ArrayLike<number>): Float64Array {
  if (added.length === 0) return sorted;
  const extra = Float64Array.from(added).sort();
  const out = sharedFloat64(sorted.length + extra.length);
  let i = 0;
  let j = 0;
  let k = 0;
  const n = sorted.length;
  const m = extra.length;
  while (i < n && j < m) out[k++] = sorted[i] <= extra[j] ? sorted[i++] : extra[j++];
  while (i < n) out[k++] = sorted[i++];
  while (j < m) out[k++] = extra[j++];
  return out;
}

export function runKey(measureKey: number, conditionKey: number, excluded: 0 | 1): string {
  return `${measureKey}|${conditionKey}|${excluded}`;
}

/** LRU map of sorted runs bounded by the total number of values held. */
export class SortedValuesCache {
  private readonly runs = new Map<string, SortedRun>();
  private held = 0;
  /** Figures for tests and benchmarks. */
  readonly stats = { hits: 0, merges: 0, mergedRows: 0, fullReads: 0, invalidations: 0 };

  constructor(readonly maxValues: number = DEFAULT_MAX_CACHED_VALUES) {}

  /** The entry of a run, refreshed in LRU order, or undefined. */
  get(key: string): SortedRun | undefined {
    const run = this.runs.get(key);
    if (!run) return undefined;
    this.runs.delete(key);
    this.runs.set(key, run);
    return run;
  }

  /**
   * Keep a run unless the entry already held is newer (a later epoch, or the same epoch and a later last id):
   * two reads finishing out of order never move an entry backwards.
   */
  set(key: string, run: SortedRun): void {
    const old = this.runs.get(key);
    if (old) {
      if (old.epoch > run.epoch || (old.epoch === run.epoch && old.lastRowId > run.lastRowId)) return;
      this.held -= old.values.length;
      this.runs.delete(key);
    }
    if (run.values.length > this.maxValues) return;
    this.runs.set(key, run);
    this.held += run.values.length;
    while (this.held > this.maxValues && this.runs.size > 0) {
      const oldest = this.runs.keys().next().value as string;
      this.held -= this.runs.get(oldest)!.values.length;
      this.runs.delete(oldest);
    }
  }

  delete(key: string): void {
    const old = this.runs.get(key);
    if (!old) return;
    this.held -= old.values.length;
    this.runs.delete(key);
  }

  clear(): void {
    this.runs.clear();
    this.held = 0;
  }

  get size(): number {
    return this.runs.size;
  }

  get heldValues(): number {
    return this.held;
  }
}
