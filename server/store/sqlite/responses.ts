/**
 * Responses, their values, per-value counts and rejected-value counters (SQLite): the repository is a small facade
 * over three parts, one file each: responses-ingest.ts (ingest, group commit, rejected counters),
 * responses-exclusions.ts (exclusion, restoration, erasure) and responses-reads.ts (every read, through the
 * sorted-runs cache of ../sorted-runs-cache.ts).
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
 * (O(n), no sort). getSortedValuesSnapshot goes through the sorted-values cache (../sorted-runs-cache.ts):
 * a held run is reused, newer rows (responses.id above the last one seen, same values epoch of migration 0004)
 * are merged in, anything else is read again; readRunsSnapshot/adoptRunsSnapshot let a worker thread do a large
 * full read on its own read-only connection (worker-reads.ts, run by the comparison service's worker pool). With includeExcluded the two sorted runs (excluded = 0 and = 1) are merged in O(n). The
 * snapshots also read the per-condition counters and the rejected-value counts in the same read transaction, so
 * every data-dependent input of a comparison belongs to one dataVersion.
 *
 * Exclusion / restoration and erasure are each ONE write transaction (BEGIN IMMEDIATE) that keeps the invariants
 * of DEVELOPERS.md: response flag and reason, response_values.excluded, value_counts moved between excluded 0 and 1
 * (or decremented; rows reaching 0 are deleted, so value_counts always equals a GROUP BY over response_values),
 * conditions.response_count / excluded_count, dataVersion + 1 and an audit row (audit.ts).
 *
 * Survey weights (migration 0005): responses.weight, and in value_counts the weighted count, Σw and Σw² per value,
 * kept by the same ingest, exclusion and erasure transactions; responses-weights.ts reads them (and the rows of a
 * covariate-adjusted comparison).
 */
import type { SqliteDatabase } from './open.js';
import { SqliteExclusionWriter } from './responses-exclusions.js';
import { SqliteIngestWriter } from './responses-ingest.js';
import { SqliteResponseReads } from './responses-reads.js';
import type {
  CleanUpOutcome,
  ComparisonStamp,
  ErasureOutcome,
  ExclusionOutcome,
  IngestOutcome,
  MeasureSnapshot,
  RejectedCount,
  RejectedIncrement,
  ResponseRepository,
  RunsSnapshot,
  SortedRunsReader,
  StoredResponse,
  AnswerWithValue,
  ValidResponse,
  WeightedValues,
  AdjustmentRows,
  RejectedWeightIncrement,
  WeightedSnapshot,
} from '../types.js';
import { SqliteWeightReads } from './responses-weights.js';

export { GROUP_COMMIT_MAX, ID_LOOKUP_CHUNK, RESPONSE_ROWS_PER_INSERT, VALUE_ROWS_PER_INSERT } from './responses-ingest.js';
export { INCREMENTAL_MAX_SHARE, INCREMENTAL_MIN_ROWS, mergeSorted, NEW_VALUES_OF_RUN_SQL } from './responses-reads.js';

export class SqliteResponseRepository implements ResponseRepository, SortedRunsReader {
  private readonly writer: SqliteIngestWriter;
  private readonly exclusions: SqliteExclusionWriter;
  private readonly reads: SqliteResponseReads;
  private readonly weights: SqliteWeightReads;

  constructor(db: SqliteDatabase) {
    this.writer = new SqliteIngestWriter(db);
    this.exclusions = new SqliteExclusionWriter(db);
    this.reads = new SqliteResponseReads(db);
    this.weights = new SqliteWeightReads(db);
  }

  /** Group-commit figures (tests and benchmarks): committed groups, requests in them, the largest group. */
  get groupStats(): { groups: number; requests: number; largest: number } {
    return this.writer.groupStats;
  }

  /** Sorted runs of continuous measures kept between comparisons (see ../sorted-runs-cache.ts). */
  get sortedCache() {
    return this.reads.sortedCache;
  }

  get sortedRuns(): SortedRunsReader {
    return this.reads;
  }

  // Writes

  ingest(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): Promise<IngestOutcome> {
    return this.writer.ingest(experimentKey, items, receivedAt, apiKeyId);
  }

  /** The bulk import's chunk (bulk.ts): ingest as a SAVEPOINT of a transaction the caller holds. SQLite only. */
  ingestWithinTransaction(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): IngestOutcome {
    return this.writer.ingestWithinTransaction(experimentKey, items, receivedAt, apiKeyId);
  }

  recordRejected(experimentKey: number, increments: RejectedIncrement[]): Promise<void> {
    return this.writer.recordRejected(experimentKey, increments);
  }

  recordRejectedWeights(experimentKey: number, increments: RejectedWeightIncrement[]): Promise<void> {
    return this.writer.recordRejectedWeights(experimentKey, increments);
  }

  setExcluded(...args: Parameters<ResponseRepository['setExcluded']>): Promise<ExclusionOutcome> {
    return this.exclusions.setExcluded(...args);
  }

  eraseRespondent(experimentKey: number, respondent: string, apiKeyId: number | null, at: string): Promise<ErasureOutcome> {
    return this.exclusions.eraseRespondent(experimentKey, respondent, apiKeyId, at);
  }

  cleanUp(...args: Parameters<ResponseRepository['cleanUp']>): Promise<CleanUpOutcome> {
    return this.exclusions.cleanUp(...args);
  }

  // Reads

  getRejectedCounts(experimentKey: number): Promise<RejectedCount[]> {
    return this.reads.getRejectedCounts(experimentKey);
  }

  getRejectedWeightCounts(experimentKey: number): Promise<RejectedWeightIncrement[]> {
    return this.weights.getRejectedWeightCounts(experimentKey);
  }

  getWeightedSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, form: 'sums' | 'pairs'): Promise<WeightedSnapshot> {
    return this.weights.getWeightedSnapshot(measureKey, conditionKeys, includeExcluded, form);
  }

  getAdjustmentRows(outcomeKey: number, covariateKeys: number[], conditionKeys: [number, number], includeExcluded: boolean): Promise<AdjustmentRows> {
    return this.weights.getAdjustmentRows(outcomeKey, covariateKeys, conditionKeys, includeExcluded);
  }

  getStored(experimentKey: number, responseId: string): Promise<StoredResponse | null> {
    return this.reads.getStored(experimentKey, responseId);
  }

  countReceivedSince(experimentKey: number, since: readonly string[]): Promise<number[]> {
    return this.reads.countReceivedSince(experimentKey, since);
  }

  getAnswersWithValues(measureKey: number, conditionKey: number, values: readonly number[], includeExcluded: boolean, limit: number): Promise<AnswerWithValue[]> {
    return this.reads.getAnswersWithValues(measureKey, conditionKey, values, includeExcluded, limit);
  }

  getCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.reads.getCounts(measureKey, conditionKey, includeExcluded);
  }

  getValueCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<WeightedValues> {
    return this.reads.getValueCounts(measureKey, conditionKey, includeExcluded);
  }

  getSortedValues(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.reads.getSortedValues(measureKey, conditionKey, includeExcluded);
  }

  getSortedValuesSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.reads.getSortedValuesSnapshot(measureKey, conditionKeys, includeExcluded);
  }

  getCountsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.reads.getCountsSnapshot(measureKey, conditionKeys, includeExcluded);
  }

  getComparisonStamp(experimentKey: number): Promise<ComparisonStamp | null> {
    return this.reads.getComparisonStamp(experimentKey);
  }

  countValues(measureKey: number): Promise<number> {
    return this.reads.countValues(measureKey);
  }

  // The sorted-runs capability (SortedRunsReader) and the worker's full read

  readRunsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): RunsSnapshot {
    return this.reads.readRunsSnapshot(measureKey, conditionKeys, includeExcluded);
  }

  adoptRunsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, snap: RunsSnapshot): MeasureSnapshot {
    return this.reads.adoptRunsSnapshot(measureKey, conditionKeys, includeExcluded, snap);
  }

  fullReadEstimate(measureKey: number, conditionKeys: number[], includeExcluded: boolean): number {
    return this.reads.fullReadEstimate(measureKey, conditionKeys, includeExcluded);
  }

  get workerReads(): { module: string; source: string } | null {
    return this.reads.workerReads;
  }

  get databasePath(): string | null {
    return this.reads.databasePath;
  }
}
