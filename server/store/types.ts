/**
 * The storage interface that routes call. Nothing here names SQLite or better-sqlite3: a PostgreSQL-backed store
 * for multi-node deployments can implement the same interfaces later. Every method returns a Promise for that
 * reason, although the SQLite store answers synchronously inside.
 *
 * Keys: every record carries `key`, the store's integer surrogate key, used between the store and its callers
 * (routes resolve a slug once, then pass keys). Outside the service only slugs appear.
 *
 * Invariants every implementation keeps inside the transaction that changes the data:
 *  - experiments.dataVersion moves forward (by one) with every committed change to the responses
 *    (accepted responses, exclusions, erasures); a repeated (idempotent) response does not move it;
 *  - per-condition response and excluded counts match the responses;
 *  - for integer measures, per-value counts (by condition and excluded flag) match the stored values.
 */

import type { AssignmentRepository, LookRepository } from './monitoring-types.js';

/**
 * admin: everything; ingest: post answers (single, batch, CSV) and assign respondents, server-side only; read:
 * definitions, comparisons, exports; form: what a respondent's page does (one answer at a time, a new respondent's
 * assignment), the only scope meant to be embedded in a public page.
 */
export type Scope = 'admin' | 'ingest' | 'read' | 'form';
export type ExperimentStatus = 'open' | 'closed';

/** Why a value was refused at ingest. Counted per (experiment, measure, reason). */
export type RejectionReason = 'out_of_range' | 'not_integer' | 'not_a_number' | 'not_finite' | 'too_many_digits';

/**
 * Why a response's weight was refused at ingest (counted per (experiment, reason)): the value reasons, plus
 * `not_allowed` (a weight in an experiment declared without weights) and `missing` (none where weights are required).
 */
export type WeightRejectionReason = 'out_of_range' | 'not_a_number' | 'not_finite' | 'too_many_digits' | 'not_allowed' | 'missing';

/** Does the experiment take survey weights: never, when given, or on every response (definition option `weights`). */
export type WeightsPolicy = 'none' | 'optional' | 'required';

/** A measure asked before the treatment (`covariate`, for adjusted comparisons) or an outcome of it (default). */
export type MeasureRole = 'outcome' | 'covariate' | 'process';

export interface ConditionRecord {
  key: number;
  id: string;
  label: string;
  position: number;
  /** Stored responses in this condition (excluded ones included). */
  responses: number;
  /** How many of those are excluded. */
  excluded: number;
}

export interface MeasureRecord {
  key: number;
  id: string;
  label: string;
  min: number;
  max: number;
  integer: boolean;
  required: boolean;
  position: number;
  role: MeasureRole;
}

export interface ExperimentRecord {
  key: number;
  id: string;
  title: string;
  status: ExperimentStatus;
  plannedPerCondition: number | null;
  alpha: number;
  thankYouUrl: string | null;
  /** Options later features add to a definition (flagThresholds, monitoring, allocation, ...). */
  options: Record<string, unknown>;
  dataVersion: number;
  createdAt: string;
  updatedAt: string;
  /** In definition order. */
  conditions: ConditionRecord[];
  /** In definition order. */
  measures: MeasureRecord[];
}

export interface NewExperiment {
  id: string;
  title: string;
  conditions: { id: string; label: string }[];
  measures: { id: string; label: string; min: number; max: number; integer: boolean; required: boolean; role?: MeasureRole }[];
  plannedPerCondition: number | null;
  alpha: number;
  thankYouUrl: string | null;
  options?: Record<string, unknown>;
}

export interface MeasurePatch {
  id: string;
  label?: string;
  min?: number;
  max?: number;
  integer?: boolean;
  required?: boolean;
}

export interface ExperimentPatch {
  title?: string;
  status?: ExperimentStatus;
  plannedPerCondition?: number | null;
  alpha?: number;
  thankYouUrl?: string | null;
  measures?: MeasurePatch[];
  /** Keys to set in the definition's options (flagThresholds, …); a null value removes the key. */
  options?: Record<string, unknown>;
  /**
   * The primary outcome after the change (a measure id, or null for none) and the key making it. The repository
   * compares it with the stored one inside its transaction; a change once answers exist (dataVersion above 0) is
   * appended to the options' primaryChanges and written to the audit trail ('primary-change') in that same
   * transaction (see store/primary-outcome.ts).
   */
  primary?: { measure: string | null; apiKeyId: number | null };
}

export type CreateExperimentResult = { kind: 'created'; experiment: ExperimentRecord } | { kind: 'duplicate' };

export type UpdateExperimentResult =
  | { kind: 'updated'; experiment: ExperimentRecord }
  | { kind: 'not-found' }
  /** A measure's min, max or integer flag was to change although it already has stored values. */
  | { kind: 'limits-locked'; measures: { id: string; values: number }[] }
  /** The patch would make a measure's min ≥ max, or give an integer measure a fractional limit. */
  | { kind: 'invalid-limits'; measures: { id: string; message: string }[] };

/** One validated response ready to be stored. Values are finite numbers within their measure's scale. */
export interface ValidResponse {
  /** The client's id, or one the service generated (then `generated` is true and it is always a new response). */
  responseId: string;
  generated: boolean;
  conditionKey: number;
  respondent: string | null;
  /** Client time if given, else the receive time (ISO 8601 UTC). */
  submittedAt: string;
  /** measureKey → value, for the measures answered. */
  values: Map<number, number>;
  /** The survey weight (finite, > 0), or null when the response carries none. */
  weight: number | null;
  /** SHA-256 of the canonical content (see server/services/ingest/validate.ts). */
  contentHash: Uint8Array;
}

export interface StoredResponse {
  responseId: string;
  /** Condition slug. */
  condition: string;
  respondent: string | null;
  /** Measure slug → value, in definition order. */
  values: Record<string, number>;
  /** The survey weight, or null. */
  weight: number | null;
  submittedAt: string;
  receivedAt: string;
  excluded: boolean;
  excludedReason: string | null;
}

export type IngestOutcome =
  | {
      kind: 'stored';
      /** Per item, in input order: its responseId and whether it was new (false = an identical repeat). */
      items: { responseId: string; created: boolean }[];
      created: number;
      repeated: number;
      dataVersion: number;
    }
  | { kind: 'closed' }
  | { kind: 'not-found' }
  /** Items (by input index) whose responseId is already stored, or repeated in the same batch, with other content. */
  | { kind: 'conflict'; conflicts: { index: number; responseId: string }[] };

export interface RejectedIncrement {
  measureKey: number;
  reason: RejectionReason;
  count: number;
}

/** A refused weight to count (per experiment and reason). */
export interface RejectedWeightIncrement {
  reason: WeightRejectionReason;
  count: number;
}

/** Per-value sums of one integer measure in one condition for the weighted comparison (dense, as getCounts). */
export interface WeightSums {
  /** Element k: answers equal to min + k whose response carries a weight. */
  counts: Float64Array;
  /** Element k: Σ w over those answers. */
  weightSums: Float64Array;
  /** Element k: Σ w² over those answers. */
  weightSquareSums: Float64Array;
  /** Answers of the group without a weight (left out of the weighted comparison). */
  unweighted: number;
}

/** One continuous measure's weighted answers in one condition (any order), and how many had no weight. */
export interface WeightedPairs {
  values: Float64Array;
  weights: Float64Array;
  unweighted: number;
}

/** A weighted read of one measure across conditions, with the dataVersion it belongs to (one read transaction). */
export interface WeightedSnapshot {
  dataVersion: number;
  /** One entry per requested condition key, in request order. */
  groups: ({ kind: 'sums' } & WeightSums)[] | ({ kind: 'pairs' } & WeightedPairs)[];
}

/**
 * Per-respondent rows for a covariate-adjusted comparison: the responses of two conditions that answered the
 * outcome, with their covariate answers (null = not answered), read in one transaction.
 */
export interface AdjustmentRows {
  dataVersion: number;
  outcome: Float64Array;
  /** 1 for the first requested condition, 0 for the second. */
  inA: Uint8Array;
  /** One array per requested covariate, aligned with outcome. */
  covariates: (number | null)[][];
}

export interface RejectedCount {
  /** Measure slug. */
  measure: string;
  reason: RejectionReason;
  count: number;
}

/** Distinct values in increasing order with their counts (both Float64Array, same length). */
export interface WeightedValues {
  values: Float64Array;
  counts: Float64Array;
}

/** Stored and excluded responses of one condition, as kept in the per-condition counters. */
export interface ConditionCounter {
  key: number;
  responses: number;
  excluded: number;
}

/**
 * A consistent read of one measure across several conditions (one read transaction): the values, the dataVersion
 * they belong to, and the other data-dependent inputs of a comparison's flags read in the same transaction.
 */
export interface MeasureSnapshot {
  dataVersion: number;
  /** One entry per requested condition key, in request order. */
  groups: Float64Array[];
  /** Every condition of the measure's experiment, in definition order (allocation and excluded flags). */
  conditions: ConditionCounter[];
  /** Values of this measure refused at ingest, by reason (only reasons with a count). */
  rejected: { reason: RejectionReason; count: number }[];
  /** All values refused at ingest in this experiment (part of the comparison cache key; see getComparisonStamp). */
  rejectedTotal: number;
}

/**
 * What a cached comparison depends on besides the definition: the dataVersion, the rejected-value total
 * (refused values are counted without moving the dataVersion, yet they feed the out_of_range flag) and the number
 * of recorded interim looks (a new look changes the monitoring block without moving the dataVersion).
 */
export interface ComparisonStamp {
  dataVersion: number;
  rejectedTotal: number;
  looks: number;
}

export type ExclusionOutcome =
  | { kind: 'not-found' }
  | {
      /** changed = false: the response already was in the requested state; nothing was written. */
      kind: 'changed' | 'unchanged';
      responseId: string;
      condition: string;
      excluded: boolean;
      /** The stored reason (null when not excluded). */
      reason: string | null;
      dataVersion: number;
    };

export type ErasureOutcome = { kind: 'not-found' } | { kind: 'erased'; erased: number; dataVersion: number };

/** 'primary-change': the primary outcome changed after answers existed (migration 0007). */
export type AuditAction = 'exclude' | 'restore' | 'erase' | 'primary-change';

export interface AuditEntry {
  id: number;
  action: AuditAction;
  /** The responseId for exclude/restore; null for erase, primary-change and for rows redacted by a later erasure. */
  responseId: string | null;
  reason: string | null;
  /** exclude/restore: 1; erase: the responses erased; primary-change: the responses stored at the time. */
  count: number;
  /** The API key that made the change. */
  apiKeyId: number | null;
  at: string;
  dataVersion: number;
  redacted: boolean;
  /** primary-change: the primary measure's id before and after (null: none); null for every other action. */
  fromMeasure: string | null;
  toMeasure: string | null;
}

/** One stored answer behind a quality flag (see ResponseRepository.getAnswersWithValues). */
export interface AnswerWithValue {
  responseId: string;
  value: number;
  receivedAt: string;
  excluded: boolean;
}

export interface AuditRepository {
  /** Newest first, at most `limit` (default 1,000). */
  list(experimentKey: number, limit?: number): Promise<AuditEntry[]>;
}

export interface ExperimentRepository {
  create(definition: NewExperiment): Promise<CreateExperimentResult>;
  getBySlug(slug: string): Promise<ExperimentRecord | null>;
  /** All experiments in creation order, or only the one with `onlyKey`. */
  list(onlyKey?: number | null): Promise<ExperimentRecord[]>;
  update(experimentKey: number, patch: ExperimentPatch, now: string): Promise<UpdateExperimentResult>;
  getDataVersion(experimentKey: number): Promise<number | null>;
}

/** Widest integer scale read as dense counts (values min … max); a wider integer measure is read as sorted values. */
export const MAX_DENSE_COUNTS = 1_000_001;

/** One run (measure, condition, excluded) of a snapshot read whole. */
export interface SnapshotRun {
  conditionKey: number;
  excluded: 0 | 1;
  values: Float64Array;
}

/** Sorted runs read whole, with what a snapshot needs besides them (see SortedRunsReader). */
export interface RunsSnapshot extends Omit<MeasureSnapshot, 'groups'> {
  /** The engine's cache generation the runs belong to (negative: do not cache them). */
  epoch: number;
  lastRowId: number;
  runs: SnapshotRun[];
}

/**
 * Optional capability of an engine that keeps sorted runs in memory (the SQLite store does; another engine may
 * leave `ResponseRepository.sortedRuns` undefined and the comparisons simply read getSortedValuesSnapshot). It lets
 * the comparison service move a large full read off the main thread: ask how much would be read whole, have a
 * worker thread read the runs (the engine names the module the worker imports and the source it opens), then
 * adopt them into the engine's cache. In-process and synchronous by nature (it inspects memory).
 */
export interface SortedRunsReader {
  /** Values getSortedValuesSnapshot would read whole now (an upper bound; Infinity when unknown). */
  fullReadEstimate(measureKey: number, conditionKeys: number[], includeExcluded: boolean): number;
  /** Keep runs read elsewhere (a worker) and assemble the snapshot's groups, as getSortedValuesSnapshot would. */
  adoptRunsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, snap: RunsSnapshot): MeasureSnapshot;
  /**
   * How a worker thread reads the runs on its own connection: `module` (a file URL) exports
   * `readRunsInWorker(source, measureKey, conditionKeys, includeExcluded): RunsSnapshot`; null when no worker can
   * (an in-memory database).
   */
  readonly workerReads: { module: string; source: string } | null;
}

export interface ResponseRepository {
  /** Present when the engine keeps sorted runs in memory (see SortedRunsReader). */
  readonly sortedRuns?: SortedRunsReader;
  /**
   * Store validated responses in ONE transaction: response rows, value rows, per-value counts of integer
   * measures, per-condition counts, dataVersion + 1. All or nothing: a closed experiment or any conflict
   * stores nothing. A repeat (same responseId, same content hash) stores nothing for that item.
   */
  ingest(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): Promise<IngestOutcome>;
  /** Add to the rejected-value counters in their own small transaction. */
  recordRejected(experimentKey: number, increments: RejectedIncrement[]): Promise<void>;
  getRejectedCounts(experimentKey: number): Promise<RejectedCount[]>;
  /** Add to the refused-weight counters in their own small transaction. */
  recordRejectedWeights(experimentKey: number, increments: RejectedWeightIncrement[]): Promise<void>;
  /** Refused weights by reason (only reasons with a count). */
  getRejectedWeightCounts(experimentKey: number): Promise<RejectedWeightIncrement[]>;
  /**
   * The weighted read of one measure for several conditions (one read transaction). `form` "sums" (integer measures
   * read as dense counts; the caller's read rule, server/services/samples.ts, decides): per value min + k, the answers
   * whose response carries a weight and their Σw and Σw², O(distinct values). "pairs": every weighted answer with
   * its weight, O(n). Answers whose response has no weight are only counted (`unweighted`).
   */
  getWeightedSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, form: 'sums' | 'pairs'): Promise<WeightedSnapshot>;
  /** Rows for a covariate-adjusted comparison of `outcomeKey` between two conditions (see AdjustmentRows). O(n·k). */
  getAdjustmentRows(outcomeKey: number, covariateKeys: number[], conditionKeys: [number, number], includeExcluded: boolean): Promise<AdjustmentRows>;
  getStored(experimentKey: number, responseId: string): Promise<StoredResponse | null>;
  /**
   * The answers of one measure in one condition equal to one of `values` (the answers behind a quality flag), oldest
   * arrival first, at most `limit` in all. Optional: an engine without it gives the comparison no answer list.
   */
  /** Responses of an experiment received at or after each ISO time (the team overview's "today" / "this week"). Optional. */
  countReceivedSince?(experimentKey: number, since: readonly string[]): Promise<number[]>;
  getAnswersWithValues?(measureKey: number, conditionKey: number, values: readonly number[], includeExcluded: boolean, limit: number): Promise<AnswerWithValue[]>;
  /**
   * Per-value counts of an integer measure in one condition: element k counts answers equal to min + k, for
   * k = 0 … max − min. Throws RangeError for a continuous measure or a scale wider than 1,000,001 values.
   */
  getCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array>;
  /** Sparse form of getCounts (only values that occur), for integer measures. */
  getValueCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<WeightedValues>;
  /** Every stored value of one measure in one condition, in non-decreasing order. */
  getSortedValues(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array>;
  /** Sorted values of one measure for several conditions plus the dataVersion, read in one transaction. */
  getSortedValuesSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot>;
  /** Dense counts (as getCounts) for several conditions plus the dataVersion, read in one transaction. */
  getCountsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot>;
  /** How many values a measure has stored (all conditions, excluded included). */
  countValues(measureKey: number): Promise<number>;
  /**
   * One cheap query: the dataVersion and rejected-value total of an experiment (null if it does not exist).
   * `readWith`: the record the caller has just read (experiments.getBySlug); an engine that read the stamp in the
   * same statement as that record may answer with it, only if nothing else ran in between (see the PostgreSQL store).
   */
  getComparisonStamp(experimentKey: number, readWith?: ExperimentRecord): Promise<ComparisonStamp | null>;
  /**
   * Exclude (excluded = true, with a reason) or restore (false) one response, in ONE write transaction: the
   * response's flag and reason, its values' excluded flag, the per-value counts of integer measures (moved between
   * excluded 0 and 1), the condition's excluded counter, dataVersion + 1 and an audit row. A response already in
   * the requested state is left alone ("unchanged": no write, no audit row, dataVersion unchanged).
   */
  setExcluded(
    experimentKey: number,
    responseId: string,
    change: { excluded: boolean; reason: string | null },
    apiKeyId: number | null,
    at: string,
  ): Promise<ExclusionOutcome>;
  /**
   * Delete every response of one respondent with its values, in ONE write transaction: per-value counts and
   * per-condition counters decremented, dataVersion + 1 (when anything was deleted), an audit row with only the
   * count and time, and earlier audit rows of the erased responses redacted. 0 responses is not an error.
   */
  eraseRespondent(experimentKey: number, respondent: string, apiKeyId: number | null, at: string): Promise<ErasureOutcome>;
  /**
   * Bulk clean-up: exclude or erase every response of an experiment that matches `filter` (received in a time window,
   * through one API key, or both), in ONE write transaction keeping the same invariants as setExcluded and
   * eraseRespondent, with dataVersion + 1 once (when anything changed) and audit rows (exclude: one per response with
   * the reason; erase: one row with the count and the reason). With `dryRun` nothing is written: the counts only.
   */
  cleanUp(experimentKey: number, request: CleanUpRequest, apiKeyId: number | null, at: string): Promise<CleanUpOutcome>;
}

/** Which responses a bulk clean-up takes: every given condition must hold (at least one is given). */
export interface CleanUpFilter {
  /** received_at ≥ this ISO time (inclusive), or null. */
  receivedFrom: string | null;
  /** received_at ≤ this ISO time (inclusive), or null. */
  receivedTo: string | null;
  /** Stored through this API key id, or null. */
  apiKeyId: number | null;
}

export interface CleanUpRequest {
  action: 'exclude' | 'erase';
  reason: string;
  filter: CleanUpFilter;
  dryRun: boolean;
}

export type CleanUpOutcome =
  | { kind: 'not-found' }
  | {
      kind: 'done';
      /** Responses matching the filter. */
      matched: number;
      /** Responses changed (or that would be, in a dry run): matched ones not already excluded, or all matched for erase. */
      changed: number;
      dataVersion: number;
    };

export interface ApiKeyRecord {
  id: number;
  scope: Scope;
  /** Experiment slug the key is limited to, or null for every experiment. */
  experiment: string | null;
  experimentKey: number | null;
  label: string;
  origin: 'cli' | 'bootstrap' | 'environment';
  createdAt: string;
  revokedAt: string | null;
  lastUsedAt: string | null;
}

/** What ApiKeyRepository.create stores: the hash of the secret, never the secret itself. */
export interface NewApiKey {
  hash: Uint8Array;
  scope: Scope;
  experimentKey: number | null;
  label: string;
  origin: ApiKeyRecord['origin'];
  createdAt: string;
}

export interface ApiKeyRepository {
  create(key: NewApiKey): Promise<ApiKeyRecord>;
  /** The key whose hash this is, revoked or not, or null. */
  findByHash(hash: Uint8Array): Promise<(ApiKeyRecord & { hash: Uint8Array }) | null>;
  list(): Promise<ApiKeyRecord[]>;
  revoke(id: number, now: string): Promise<'revoked' | 'already-revoked' | 'not-found'>;
  touch(id: number, now: string): Promise<void>;
  /** Active (not revoked) admin keys not limited to an experiment. */
  countActiveAdmin(): Promise<number>;
  /**
   * Make the environment admin key (SPLITBALLOT_ADMIN_KEY) the only active key of origin "environment":
   * revoke any other, insert this hash if absent. With null, revoke them all.
   */
  syncEnvironmentKey(hash: Uint8Array | null, now: string): Promise<void>;
}

/** One exported response. `values` is aligned with the `measureKeys` passed in (null = not answered). */
export interface ExportRow {
  responseId: string;
  condition: string;
  respondent: string | null;
  submittedAt: string;
  receivedAt: string;
  excluded: boolean;
  excludedReason: string | null;
  /** The survey weight, or null. */
  weight: number | null;
  values: (number | null)[];
}

/** A value, or a promise of it: what an engine that answers synchronously inside may return without wrapping. */
export type MaybePromise<T> = T | Promise<T>;

/**
 * An open all-or-nothing import transaction. Call add() for each chunk, then exactly one of commit() or rollback().
 *
 * Sync or async, on purpose. An engine whose import transaction lives on a connection shared with every other
 * request (SQLite: one connection per process) answers add/commit/rollback — and beginImport — synchronously, with
 * plain values; an engine whose import owns a connection of its own (PostgreSQL: a dedicated pooled client)
 * answers with promises. The caller (services/ingest/csv-import.ts) awaits ONLY what is a promise
 * (`isPromise`): with SQLite the HTTP import's pass 2 then runs from BEGIN to COMMIT without a single await, so
 * no other request's statement can run inside its open transaction (awaiting even a resolved value would let
 * queued continuations of other requests run first); with PostgreSQL it awaits each chunk, and the event loop
 * keeps serving while the import's own connection works. Making every method a promise would lose that SQLite
 * guarantee; making every method synchronous would be impossible for a network database.
 */
export interface BulkImport {
  /** Store one chunk with the same bookkeeping as ResponseRepository.ingest, inside the open transaction. */
  add(items: ValidResponse[]): MaybePromise<IngestOutcome>;
  commit(): MaybePromise<void>;
  /** Roll back unless already committed or rolled back (safe to call in a finally). */
  rollback(): MaybePromise<void>;
  readonly open: boolean;
}

/** Is this a promise (or any thenable) that must be awaited, rather than a value already there? */
export function isPromise<T>(value: MaybePromise<T>): value is Promise<T> {
  return typeof (value as { then?: unknown } | null)?.then === 'function';
}

/** Bulk reads and writes for the CSV export and import. */
export interface BulkRepository {
  /**
   * Every response of an experiment stored when the export began, in storage order, as pages of at most
   * `pageSize` rows; each page is read on its own, so a slow client holds nothing between pages.
   */
  exportResponsePages(experimentKey: number, measureKeys: number[], pageSize: number): AsyncGenerator<ExportRow[]>;
  /** Begin one write transaction for a bulk import (the write lock is taken at once); see BulkImport for sync vs async. */
  beginImport(experimentKey: number, receivedAt: string, apiKeyId: number | null): MaybePromise<BulkImport>;
}

/** What an online backup of the database wrote. */
export interface BackupResult {
  /** Absolute path of the finished backup. */
  path: string;
  pages: number;
  bytes: number;
  durationMs: number;
  /** How many times the copy restarted because another connection wrote meanwhile. */
  restarts: number;
}

export interface Store {
  experiments: ExperimentRepository;
  responses: ResponseRepository;
  apiKeys: ApiKeyRepository;
  /** The audit trail of exclusions, restorations and erasures. */
  audit: AuditRepository;
  /** Interim looks (group-sequential monitoring); interfaces in monitoring-types.ts. */
  looks: LookRepository;
  /** Balanced, sticky assignment of respondents to conditions. */
  assignments: AssignmentRepository;
  /** Bulk export and import (CSV). */
  bulk: BulkRepository;
  /** Database reachable and every known migration applied with its recorded checksum. */
  readiness(): Promise<{ ready: true; migrations: number } | { ready: false; reason: string }>;
  close(): Promise<void>;
}

// ---------------------------------------------------------------------------------------------------------
// Errors every engine throws, and change notification (one vocabulary for the CLI, the HTTP layer and both engines)
// ---------------------------------------------------------------------------------------------------------

/**
 * The database could not be reached or did not answer in time; the request may be retried later. The HTTP layer
 * answers 503 problem+json with `Retry-After: retryAfterSeconds`.
 */
export class StoreUnavailableError extends Error {
  override name = 'StoreUnavailableError';
  readonly status = 503;
  constructor(
    message: string,
    readonly retryAfterSeconds: number,
    options?: { cause?: unknown },
  ) {
    super(message, options);
  }
}

/**
 * Opening the store failed: a malformed database URL, an unreachable server, a refused login, a database file that
 * cannot be opened. The message is one line naming the setting and what failed, fit to print without a stack.
 */
export class StoreOpenError extends Error {
  override name = 'StoreOpenError';
  constructor(message: string, options?: { cause?: unknown }) {
    super(message, options);
  }
}

/** A migration was refused (edited, missing, unknown, or failed and rolled back); the same class for every engine. */
export class MigrationError extends Error {
  override name = 'MigrationError';
}

export type StoreChangeKind = 'responses' | 'exclusion' | 'erasure' | 'definition' | 'look' | 'import';

export type StoreChange =
  | { kind: StoreChangeKind; experimentKey: number; dataVersion: number }
  /** The notifier was disconnected: changes may have been missed; every watcher should read its state again. */
  | { kind: 'resync' };

/**
 * Committed changes announced to whoever watches (the Server-Sent Events of http/routes/events.ts). PostgreSQL
 * implements it with LISTEN/NOTIFY (changes from every node); a single-process engine may implement it in-process.
 */
export interface ChangeNotifier {
  /** Call `listener` for every committed change (from any process); returns the unsubscribe function. */
  subscribe(listener: (change: StoreChange) => void): () => void;
  /** Resolves once the notifier is listening (after the first successful LISTEN). */
  ready(): Promise<void>;
  close(): Promise<void>;
}
