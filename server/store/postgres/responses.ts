/**
 * Responses, their values, per-value counts and rejected-value counters (PostgreSQL).
 *
 * Writes. Every write transaction first locks its experiment's row (`SELECT … FOR NO KEY UPDATE`, pool.ts
 * lockExperiments), so ingest, exclusion and erasure of one experiment are serialised across every process that
 * shares the database, while other experiments proceed in parallel. Ingest is ONE transaction per request or
 * batch, and holds the lock for as few round trips as possible (each round trip under the lock is time every
 * other node's writers of that experiment wait): after the lock, ONE statement reads the stored hash of every
 * client id (same content hash = a repeat, another = a conflict, all decided in JS before anything is written)
 * and the integer measures; then ONE statement (WRITE_GROUP) writes everything: response rows and value rows
 * from arrays (`unnest`, whatever the batch size), per-value counts of integer measures aggregated in JS and
 * upserted with `INSERT … ON CONFLICT DO UPDATE`, per-condition counters, dataVersion + 1 per request that stored
 * something and the pg_notify (delivered on commit); then COMMIT. The promise settles after COMMIT returned:
 * acknowledged means committed.
 *
 * Group commit: single-response requests to one experiment share one transaction: those of one event-loop turn,
 * and while a group commits, all that arrive meanwhile (see flushGroup). Each request keeps its own outcome (its
 * own idempotency check and conflict, dataVersion + 1 when it stores something); the group's rows go in with the
 * same one write statement; when it fails, that transaction rolls back and the group is redone request by request,
 * one SAVEPOINT each, in a second one. Groups of different experiments and batches run concurrently on separate
 * pool connections; the row locks keep per-experiment order across processes.
 *
 * Reads. getCounts / getValueCounts read value_counts (O(distinct values)); sorted values come from the index
 * (measure_id, condition_id, excluded, value) in order. The snapshots run in ONE REPEATABLE READ transaction:
 * values, dataVersion, per-condition counters, rejected counts, the values epoch and the experiment's last
 * response id all belong to one moment. The sorted-values cache (server/sorted-values-cache.ts) is validated
 * against that snapshot before every use: same epoch and same last id → held run; same epoch, newer ids → merge
 * only the rows with ids above the cached one; anything else → read again. Why merging is safe here: response
 * ids are drawn while the experiment's row lock is held, so within one experiment ids grow in commit order
 * (`lastRowId` is per experiment, never the global maximum, which a concurrent writer of another experiment
 * could overtake), and every change or deletion of stored values moves the epoch (triggers of 0004).
 */
import {
  MAX_DENSE_COUNTS,
  type AdjustmentRows,
  type AnswerWithValue,
  type CleanUpOutcome,
  type CleanUpRequest,
  type ComparisonStamp,
  type ConditionCounter,
  type ErasureOutcome,
  type ExclusionOutcome,
  type ExperimentRecord,
  type IngestOutcome,
  type MeasureSnapshot,
  type RejectedCount,
  type RejectedIncrement,
  type RejectedWeightIncrement,
  type RejectionReason,
  type ResponseRepository,
  type StoredResponse,
  type ValidResponse,
  type WeightedSnapshot,
  type WeightedValues,
} from '../types.js';
import { addRejectedWeights, readAdjustmentRows, readRejectedWeights, readWeightedSnapshot } from './responses-weights.js';
import { mergeNewValues, runKey, sharedFloat64, SortedValuesCache, type SortedRun } from '../sorted-runs-cache.js';
import { recordAudit, redactAudit } from './audit.js';
import { takeStampReadWith } from './definition-read.js';
import { CHANGE_CHANNEL, notifyChange } from './notifier.js';
import { bumpDataVersion, isUnavailable, lockExperiments, toBuffer, type PostgresDatabase, type PreparedStatement, type Queryable } from './pool.js';
import { STORED_RESPONSE_COLUMNS, storedResponse, type StoredResponseRow } from '../response-rows.js';

/** The comparison stamp: dataVersion, refused values and recorded looks of one experiment. */
const COMPARISON_STAMP: PreparedStatement = {
  name: 'sb_comparison_stamp',
  text: `SELECT e.data_version, (SELECT coalesce(sum(r.count), 0) FROM rejected_value_counts r WHERE r.experiment_id = e.id) AS rejected,
              (SELECT count(*) FROM interim_looks l WHERE l.experiment_id = e.id) AS looks
         FROM experiments e WHERE e.id = $1`,
};

/**
 * After the experiment's row lock: the stored content hash of each of the client ids $2 (idempotency) and the
 * experiment's integer measures. Its own statement, so its snapshot is taken after the lock was granted and sees
 * every write of the transaction that held the lock before.
 */
const IDEMPOTENCY_AND_MEASURES = `
  SELECT array(SELECT id FROM measures WHERE experiment_id = $1 AND is_integer) AS integer_measures,
         coalesce(k.ids, '{}') AS ids, coalesce(k.hashes, '{}') AS hashes
  FROM (SELECT array_agg(response_id) AS ids, array_agg(content_hash) AS hashes
        FROM responses WHERE experiment_id = $1 AND response_id = ANY($2::text[])) k`;

/**
 * Every write of one ingest group as one statement (data-modifying WITH parts run exactly once, to completion, on
 * the same snapshot; each later part uses what an earlier one RETURNs, never what it wrote). Response rows are
 * inserted in input order (ORDER BY ordinality: ids drawn in that order); value rows find their response row by
 * that ordinality ($10), the condition from the response row. The counts of rows written come back so the caller
 * can check that nothing was dropped.
 */
const WRITE_GROUP = `
  WITH input AS (
    SELECT * FROM unnest($2::text[], $3::bigint[], $4::text[], $5::text[], $6::text[], $7::bytea[], $8::bigint[], $9::float8[])
      WITH ORDINALITY AS u(rid, cond, resp, sub, recv, hash, api, w, ord)
  ), inserted AS (
    INSERT INTO responses (experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id, weight)
    SELECT $1, rid, cond, resp, sub, recv, hash, api, w FROM input ORDER BY ord
    RETURNING id, response_id, condition_id
  ), numbered AS (
    SELECT i.id, i.condition_id, input.ord FROM inserted i JOIN input ON input.rid = i.response_id
  ), value_rows AS (
    INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value)
    SELECT n.id, v.m, n.condition_id, 0, v.v FROM unnest($10::bigint[], $11::bigint[], $12::float8[]) AS v(ord, m, v) JOIN numbered n ON n.ord = v.ord
    RETURNING 1
  ), count_rows AS (
    INSERT INTO value_counts (measure_id, condition_id, excluded, value, count, weighted_count, weight_sum, weight_square_sum)
    SELECT m, cnd, 0, v, n, wn, ws, wq
    FROM unnest($13::bigint[], $14::bigint[], $15::float8[], $16::bigint[], $17::bigint[], $18::float8[], $19::float8[]) AS u(m, cnd, v, n, wn, ws, wq)
    ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + EXCLUDED.count,
      weighted_count = value_counts.weighted_count + EXCLUDED.weighted_count,
      weight_sum = value_counts.weight_sum + EXCLUDED.weight_sum,
      weight_square_sum = value_counts.weight_square_sum + EXCLUDED.weight_square_sum
  ), counters AS (
    UPDATE conditions c SET response_count = c.response_count + u.n FROM unnest($20::bigint[], $21::bigint[]) AS u(id, n) WHERE c.id = u.id
  ), version AS (
    UPDATE experiments SET data_version = data_version + $22 WHERE id = $1 RETURNING data_version
  )
  SELECT v.data_version,
         (SELECT count(*) FROM inserted)::int AS responses,
         (SELECT count(*) FROM value_rows)::int AS value_count,
         pg_notify($23, json_build_object('e', $1::bigint, 'v', v.data_version, 'k', 'responses')::text) AS notified
  FROM version v`;

/** Most single-response requests written in one group commit. */
export const GROUP_COMMIT_MAX = 256;
/** A merge reads only newer rows while they are at most this share of the cached run (or INCREMENTAL_MIN_ROWS). */
export const INCREMENTAL_MAX_SHARE = 0.25;
export const INCREMENTAL_MIN_ROWS = 10_000;

const deferTurn: (fn: () => void) => void = globalThis.setImmediate.bind(globalThis);

export interface ExperimentLockState {
  status: string;
  dataVersion: number;
}

interface PendingIngest {
  experimentKey: number;
  items: ValidResponse[];
  receivedAt: string;
  apiKeyId: number | null;
  resolve: (outcome: IngestOutcome) => void;
  reject: (error: unknown) => void;
}

interface MeasureRow {
  id: number;
  experiment_id: number;
  min: number;
  max: number;
  is_integer: boolean;
  data_version: number;
}

interface CacheView {
  epoch: number;
  lastRowId: number;
}

function bytesEqual(a: Uint8Array, b: Uint8Array): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

/** Merge two non-decreasing arrays into a new shared one. O(a + b). */
function mergeSorted(a: Float64Array, b: Float64Array): Float64Array {
  if (b.length === 0) return a;
  if (a.length === 0) return b;
  const out = sharedFloat64(a.length + b.length);
  let i = 0;
  let j = 0;
  let k = 0;
  while (i < a.length && j < b.length) out[k++] = a[i] <= b[j] ? a[i++] : b[j++];
  while (i < a.length) out[k++] = a[i++];
  while (j < b.length) out[k++] = b[j++];
  return out;
}

function mergeable(run: SortedRun, view: CacheView): boolean {
  if (run.epoch !== view.epoch || run.lastRowId > view.lastRowId) return false;
  return view.lastRowId - run.lastRowId <= Math.max(INCREMENTAL_MIN_ROWS, run.values.length * INCREMENTAL_MAX_SHARE);
}

/** One ingest request (a single response or a batch) as the write path sees it. */
export interface IngestRequest {
  items: ValidResponse[];
  receivedAt: string;
  apiKeyId: number | null;
}

/**
 * The ingest bookkeeping for one request inside the caller's write transaction, which already holds the
 * experiment's row lock (`state` is what that lock read; kept current here). Shared by ingest and the bulk import.
 */
export async function ingestLocked(
  c: Queryable,
  experimentKey: number,
  state: ExperimentLockState | undefined,
  items: ValidResponse[],
  receivedAt: string,
  apiKeyId: number | null,
): Promise<IngestOutcome> {
  return (await ingestRequestsLocked(c, experimentKey, state, [{ items, receivedAt, apiKeyId }]))[0];
}

/**
 * Several requests to one experiment written together, with exactly the outcomes they would have one after
 * another: each request is all or nothing (a conflict stores none of it), a later request sees the responses of
 * the earlier ones (same id and hash = a repeat), and every request that stores something moves dataVersion by
 * one, in request order. The writes of all requests go in as one statement per table (unnest arrays), so a group
 * of 200 single responses costs the same handful of round trips as one. `state.dataVersion` is advanced.
 */
export async function ingestRequestsLocked(
  c: Queryable,
  experimentKey: number,
  state: ExperimentLockState | undefined,
  requests: IngestRequest[],
): Promise<IngestOutcome[]> {
  if (!state) return requests.map(() => ({ kind: 'not-found' }));
  if (state.status !== 'open') return requests.map(() => ({ kind: 'closed' }));

  // 1. One statement, after the lock: the stored hash of every client id of the group (idempotency, decided for
  //    every request before anything is written) and the experiment's integer measures (their per-value counts).
  const clientIds = [...new Set(requests.flatMap((r) => r.items.filter((x) => !x.generated).map((x) => x.responseId)))];
  const known = new Map<string, Uint8Array>();
  const lookup = (await c.query<{ integer_measures: (string | number)[]; ids: string[]; hashes: Buffer[] }>(IDEMPOTENCY_AND_MEASURES, [experimentKey, clientIds])).rows[0];
  lookup.ids.forEach((id, i) => known.set(id, lookup.hashes[i]));
  const integer = new Set<number>(lookup.integer_measures.map(Number)); // bigint[] arrives as text
  interface Decided {
    request: IngestRequest;
    isNew: boolean[];
    fresh: ValidResponse[];
    outcome: IngestOutcome | null;
  }
  const decided: Decided[] = [];
  for (const request of requests) {
    const { items } = request;
    const isNew = new Array<boolean>(items.length);
    const conflicts: { index: number; responseId: string }[] = [];
    const seenInBatch = new Map<string, Uint8Array>();
    for (let i = 0; i < items.length; i++) {
      const item = items[i];
      if (item.generated) {
        isNew[i] = true;
        continue;
      }
      const stored = seenInBatch.get(item.responseId) ?? known.get(item.responseId);
      if (stored === undefined) {
        isNew[i] = true;
        seenInBatch.set(item.responseId, item.contentHash);
      } else if (bytesEqual(stored, item.contentHash)) {
        isNew[i] = false;
      } else {
        conflicts.push({ index: i, responseId: item.responseId });
      }
    }
    if (conflicts.length > 0) {
      decided.push({ request, isNew, fresh: [], outcome: { kind: 'conflict', conflicts } });
      continue;
    }
    for (const [id, hash] of seenInBatch) known.set(id, hash);
    decided.push({ request, isNew, fresh: items.filter((_, i) => isNew[i]), outcome: null });
  }

  const writing = decided.filter((d) => d.outcome === null && d.fresh.length > 0);
  if (writing.length > 0) {
    // 2. Everything the group writes, in ONE statement (WRITE_GROUP): response rows in request and input order (ids
    //    drawn in that order, under the experiment's lock), value rows, per-value counts of integer measures
    //    (aggregated here first: one row per distinct key), per-condition counters, dataVersion + 1 per request that
    //    stores something, and the change notice (delivered on commit).
    const rows = writing.flatMap((d) => d.fresh.map((item) => ({ item, request: d.request })));
    const vOrdinal: number[] = [];
    const vMeasure: number[] = [];
    const vValue: number[] = [];
    // Per value: answers, and (migration 0005) those whose response carries a weight with their Σw and Σw².
    const counts = new Map<string, { m: number; c: number; v: number; n: number; wn: number; ws: number; wq: number }>();
    const perCondition = new Map<number, number>();
    rows.forEach(({ item }, index) => {
      for (const [measureKey, value] of item.values) {
        vOrdinal.push(index + 1);
        vMeasure.push(measureKey);
        vValue.push(value);
        if (integer.has(measureKey)) {
          const k = `${measureKey}|${item.conditionKey}|${value}`;
          const e = counts.get(k);
          const w = item.weight;
          if (e) {
            e.n++;
            if (w !== null) {
              e.wn++;
              e.ws += w;
              e.wq += w * w;
            }
          } else {
            counts.set(k, { m: measureKey, c: item.conditionKey, v: value, n: 1, wn: w === null ? 0 : 1, ws: w ?? 0, wq: w === null ? 0 : w * w });
          }
        }
      }
      perCondition.set(item.conditionKey, (perCondition.get(item.conditionKey) ?? 0) + 1);
    });
    const e = [...counts.values()];
    const r = await c.query<{ data_version: number; responses: number; value_count: number }>(WRITE_GROUP, [
      experimentKey,
      rows.map((x) => x.item.responseId),
      rows.map((x) => x.item.conditionKey),
      rows.map((x) => x.item.respondent),
      rows.map((x) => x.item.submittedAt),
      rows.map((x) => x.request.receivedAt),
      rows.map((x) => toBuffer(x.item.contentHash)),
      rows.map((x) => x.request.apiKeyId),
      rows.map((x) => x.item.weight),
      vOrdinal,
      vMeasure,
      vValue,
      e.map((x) => x.m),
      e.map((x) => x.c),
      e.map((x) => x.v),
      e.map((x) => x.n),
      e.map((x) => x.wn),
      e.map((x) => x.ws),
      e.map((x) => x.wq),
      [...perCondition.keys()],
      [...perCondition.values()],
      writing.length,
      CHANGE_CHANNEL,
    ]);
    const written = r.rows[0];
    if (!written) throw new Error(`experiment ${experimentKey} disappeared under its row lock`);
    if (written.responses !== rows.length || written.value_count !== vOrdinal.length) {
      throw new Error(`experiment ${experimentKey}: ${written.responses} of ${rows.length} responses and ${written.value_count} of ${vOrdinal.length} values written`);
    }
    if (written.data_version !== state.dataVersion + writing.length) {
      throw new Error(`dataVersion of experiment ${experimentKey} moved outside its row lock`);
    }
  }

  let version = state.dataVersion;
  const outcomes = decided.map((d): IngestOutcome => {
    if (d.outcome) return d.outcome;
    if (d.fresh.length > 0) version++;
    return {
      kind: 'stored',
      items: d.request.items.map((item, i) => ({ responseId: item.responseId, created: d.isNew[i] })),
      created: d.fresh.length,
      repeated: d.request.items.length - d.fresh.length,
      dataVersion: version,
    };
  });
  state.dataVersion = version;
  return outcomes;
}

export class PostgresResponseRepository implements ResponseRepository {
  /** Pending single responses per experiment, and whether that experiment's group transaction is running. */
  private readonly groups = new Map<number, { pending: PendingIngest[]; inFlight: boolean; scheduled: boolean }>();
  /** Group-commit figures: committed groups, requests in them, the largest group. */
  readonly groupStats = { groups: 0, requests: 0, largest: 0 };
  /** Sorted runs of continuous measures kept between comparisons, validated against every snapshot. */
  readonly sortedCache = new SortedValuesCache();

  constructor(private readonly db: PostgresDatabase) {}

  /**
   * Store validated responses in ONE transaction (see the header). A request with one response joins the group
   * commit of its experiment; a batch runs at once in its own transaction.
   */
  async ingest(experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): Promise<IngestOutcome> {
    if (items.length !== 1) {
      return this.db.writeLocked([experimentKey], (c, locked) => ingestLocked(c, experimentKey, locked.get(experimentKey), items, receivedAt, apiKeyId));
    }
    return new Promise<IngestOutcome>((resolve, reject) => {
      let g = this.groups.get(experimentKey);
      if (!g) this.groups.set(experimentKey, (g = { pending: [], inFlight: false, scheduled: false }));
      g.pending.push({ experimentKey, items, receivedAt, apiKeyId, resolve, reject });
      if (g.inFlight) return; // taken by the next group when the running one commits
      if (g.pending.length >= GROUP_COMMIT_MAX) this.flushGroup(experimentKey);
      else if (!g.scheduled) {
        g.scheduled = true;
        deferTurn(() => this.flushGroup(experimentKey));
      }
    });
  }

  /**
   * Write one experiment's pending single responses as ONE transaction: all requests together through
   * ingestRequestsLocked (one statement per table), or, when a statement fails, one SAVEPOINT per request so that
   * only the failing request is refused. Every promise settles after COMMIT (or its failure). At most one
   * group per experiment is in flight per process: requests arriving while it commits form the next group, which
   * starts as soon as it is done (classic group commit: the busier the experiment, the larger the groups). Other
   * experiments' groups run in parallel on other pool connections, so an experiment locked elsewhere for long (a
   * bulk import on another node) does not hold up the rest.
   */
  private flushGroup(experimentKey: number): void {
    const g = this.groups.get(experimentKey);
    if (!g) return;
    g.scheduled = false;
    if (g.inFlight) return;
    const group = g.pending.splice(0, GROUP_COMMIT_MAX);
    if (group.length === 0) {
      this.groups.delete(experimentKey);
      return;
    }
    g.inFlight = true;
    type Result = { ok: true; outcome: IngestOutcome } | { ok: false; error: unknown };
    // All requests in one go (no savepoint: the lock, one lookup, one write statement, COMMIT). If a statement fails
    // (a bad condition key, say), that transaction rolls back and a second one redoes the requests one savepoint
    // each, so that only the failing request is refused.
    const together = (): Promise<Result[]> =>
      this.db.writeLocked([experimentKey], async (c, locked) => {
        const outcomes = await ingestRequestsLocked(c, experimentKey, locked.get(experimentKey), group);
        return outcomes.map((outcome): Result => ({ ok: true, outcome }));
      });
    const oneByOne = (): Promise<Result[]> =>
      this.db.writeLocked([experimentKey], async (c, locked) => {
        const state = locked.get(experimentKey);
        const results: Result[] = [];
        for (const one of group) {
          await c.query('SAVEPOINT one_request');
          const kept = state?.dataVersion;
          try {
            const [outcome] = await ingestRequestsLocked(c, experimentKey, state, [one]);
            await c.query('RELEASE SAVEPOINT one_request');
            results.push({ ok: true, outcome });
          } catch (error) {
            if (isUnavailable(error)) throw error;
            await c.query('ROLLBACK TO SAVEPOINT one_request');
            if (state && kept !== undefined) state.dataVersion = kept;
            results.push({ ok: false, error });
          }
        }
        return results;
      });
    together()
      .catch((error: unknown) => {
        if (isUnavailable(error)) throw error;
        return oneByOne();
      })
      .then(
        (results) => {
          this.groupStats.groups++;
          this.groupStats.requests += group.length;
          if (group.length > this.groupStats.largest) this.groupStats.largest = group.length;
          results.forEach((r, i) => (r.ok ? group[i].resolve(r.outcome) : group[i].reject(r.error)));
        },
        (error: unknown) => {
          for (const one of group) one.reject(error);
        },
      )
      .finally(() => {
        g.inFlight = false;
        if (g.pending.length > 0) this.flushGroup(experimentKey);
        else this.groups.delete(experimentKey);
      });
  }

  async recordRejected(experimentKey: number, increments: RejectedIncrement[]): Promise<void> {
    if (increments.length === 0) return;
    const merged = new Map<string, RejectedIncrement>();
    for (const inc of increments) {
      const k = `${inc.measureKey}|${inc.reason}`;
      const e = merged.get(k);
      if (e) e.count += inc.count;
      else merged.set(k, { ...inc });
    }
    const e = [...merged.values()];
    await this.db.query(
      `INSERT INTO rejected_value_counts (experiment_id, measure_id, reason, count)
       SELECT $1, m, r, n FROM unnest($2::bigint[], $3::text[], $4::bigint[]) AS u(m, r, n)
       ON CONFLICT (experiment_id, measure_id, reason) DO UPDATE SET count = rejected_value_counts.count + EXCLUDED.count`,
      [experimentKey, e.map((x) => x.measureKey), e.map((x) => x.reason), e.map((x) => x.count)],
    );
  }

  async getRejectedCounts(experimentKey: number): Promise<RejectedCount[]> {
    const r = await this.db.query<RejectedCount>(
      `SELECT m.slug AS measure, r.reason AS reason, r.count AS count
       FROM rejected_value_counts r JOIN measures m ON m.id = r.measure_id
       WHERE r.experiment_id = $1 ORDER BY m.position, r.reason COLLATE "C"`,
      [experimentKey],
    );
    return r.rows;
  }

  async recordRejectedWeights(experimentKey: number, increments: RejectedWeightIncrement[]): Promise<void> {
    if (increments.every((i) => i.count <= 0)) return;
    await this.db.write((c) => addRejectedWeights(c, experimentKey, increments));
  }

  async getRejectedWeightCounts(experimentKey: number): Promise<RejectedWeightIncrement[]> {
    return this.db.snapshot((c) => readRejectedWeights(c, experimentKey));
  }

  async getWeightedSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean, form: 'sums' | 'pairs'): Promise<WeightedSnapshot> {
    return this.db.snapshot((c) => readWeightedSnapshot(c, measureKey, conditionKeys, includeExcluded, form));
  }

  async getAdjustmentRows(outcomeKey: number, covariateKeys: number[], conditionKeys: [number, number], includeExcluded: boolean): Promise<AdjustmentRows> {
    return this.db.snapshot((c) => readAdjustmentRows(c, outcomeKey, covariateKeys, conditionKeys, includeExcluded));
  }

  /** Responses of an experiment received at or after each time (one snapshot). */
  async countReceivedSince(experimentKey: number, since: readonly string[]): Promise<number[]> {
    return this.db.snapshot(async (c) => {
      const out: number[] = [];
      for (const t of since) {
        out.push((await c.query<{ n: number }>(`SELECT count(*) AS n FROM responses WHERE experiment_id = $1 AND received_at >= $2 COLLATE "C"`, [experimentKey, t])).rows[0].n);
      }
      return out;
    });
  }

  /**
   * The answers equal to each of `values` (one indexed lookup per value on (measure, condition, excluded, value)),
   * oldest arrival first within a value, at most `limit` in all, in ONE snapshot.
   */
  async getAnswersWithValues(measureKey: number, conditionKey: number, values: readonly number[], includeExcluded: boolean, limit: number): Promise<AnswerWithValue[]> {
    return this.db.snapshot(async (c) => {
      const out: AnswerWithValue[] = [];
      for (const value of values) {
        if (out.length >= limit) break;
        for (const excluded of includeExcluded ? [0, 1] : [0]) {
          const rows = (
            await c.query<{ response_id: string; value: number; received_at: string; excluded: number }>(
              `SELECT r.response_id, v.value, r.received_at, v.excluded FROM response_values v JOIN responses r ON r.id = v.response_id
               WHERE v.measure_id = $1 AND v.condition_id = $2 AND v.excluded = $3 AND v.value = $4 ORDER BY r.received_at COLLATE "C", r.id LIMIT $5`,
              [measureKey, conditionKey, excluded, value, limit - out.length],
            )
          ).rows;
          for (const x of rows) out.push({ responseId: x.response_id, value: x.value, receivedAt: x.received_at, excluded: x.excluded === 1 });
        }
      }
      return out;
    });
  }

  async getStored(experimentKey: number, responseId: string): Promise<StoredResponse | null> {
    return this.db.snapshot(async (c) => {
      const row = (
        await c.query<StoredResponseRow>(
          `SELECT ${STORED_RESPONSE_COLUMNS}
           FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE r.experiment_id = $1 AND r.response_id = $2`,
          [experimentKey, responseId],
        )
      ).rows[0];
      if (!row) return null;
      const values: Record<string, number> = {};
      const vs = await c.query<{ measure: string; value: number }>(
        `SELECT m.slug AS measure, v.value FROM response_values v JOIN measures m ON m.id = v.measure_id WHERE v.response_id = $1 ORDER BY m.position`,
        [row.id],
      );
      for (const v of vs.rows) values[v.measure] = v.value;
      return storedResponse(row, values);
    });
  }

  private async measure(c: Queryable, measureKey: number): Promise<MeasureRow> {
    const m = (
      await c.query<MeasureRow>(
        `SELECT m.id, m.experiment_id, m.min, m.max, m.is_integer, e.data_version FROM measures m JOIN experiments e ON e.id = m.experiment_id WHERE m.id = $1`,
        [measureKey],
      )
    ).rows[0];
    if (!m) throw new RangeError(`measure key ${measureKey} does not exist`);
    return m;
  }

  private integerMeasure(m: MeasureRow): void {
    if (!m.is_integer) throw new RangeError(`measure key ${m.id} is continuous; per-value counts exist only for integer measures`);
  }

  private async readValueCounts(c: Queryable, measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<[number, number][]> {
    const r = includeExcluded
      ? await c.query<[number, number]>({
          text: `SELECT value, sum(count) FROM value_counts WHERE measure_id = $1 AND condition_id = $2 GROUP BY value ORDER BY value`,
          values: [measureKey, conditionKey],
          rowMode: 'array',
        })
      : await c.query<[number, number]>({
          text: `SELECT value, count FROM value_counts WHERE measure_id = $1 AND condition_id = $2 AND excluded = 0 ORDER BY value`,
          values: [measureKey, conditionKey],
          rowMode: 'array',
        });
    return r.rows;
  }

  private async readDense(c: Queryable, m: MeasureRow, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    this.integerMeasure(m);
    const size = m.max - m.min + 1;
    if (size > MAX_DENSE_COUNTS) throw new RangeError(`measure key ${m.id} spans ${size} values (more than ${MAX_DENSE_COUNTS}); use getValueCounts`);
    const out = new Float64Array(size);
    for (const [value, count] of await this.readValueCounts(c, m.id, conditionKey, includeExcluded)) out[value - m.min] += count;
    return out;
  }

  async getCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.db.snapshot(async (c) => this.readDense(c, await this.measure(c, measureKey), conditionKey, includeExcluded));
  }

  async getValueCounts(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<WeightedValues> {
    return this.db.snapshot(async (c) => {
      this.integerMeasure(await this.measure(c, measureKey));
      const rows = (await this.readValueCounts(c, measureKey, conditionKey, includeExcluded)).filter((r) => r[1] > 0);
      return { values: Float64Array.from(rows, (r) => r[0]), counts: Float64Array.from(rows, (r) => r[1]) };
    });
  }

  /** The values epoch and the experiment's last response id, inside the caller's snapshot. */
  private async cacheView(c: Queryable, experimentKey: number): Promise<CacheView> {
    const r = await c.query<{ epoch: number; last: number }>(
      `SELECT (SELECT epoch FROM values_epoch WHERE id = 1) AS epoch, (SELECT coalesce(max(id), 0) FROM responses WHERE experiment_id = $1) AS last`,
      [experimentKey],
    );
    return { epoch: r.rows[0].epoch, lastRowId: r.rows[0].last };
  }

  private async readRun(c: Queryable, measureKey: number, conditionKey: number, excluded: 0 | 1): Promise<Float64Array> {
    const r = await c.query<[number]>({
      text: `SELECT value FROM response_values WHERE measure_id = $1 AND condition_id = $2 AND excluded = $3 ORDER BY value`,
      values: [measureKey, conditionKey, excluded],
      rowMode: 'array',
    });
    const out = sharedFloat64(r.rows.length);
    for (let i = 0; i < r.rows.length; i++) out[i] = r.rows[i][0];
    return out;
  }

  /** One run in value order through the cache, validated against `view` (read in the same snapshot). */
  private async readRunCached(c: Queryable, measureKey: number, conditionKey: number, excluded: 0 | 1, view: CacheView): Promise<Float64Array> {
    const key = runKey(measureKey, conditionKey, excluded);
    const run = this.sortedCache.get(key);
    if (run && run.epoch === view.epoch && run.lastRowId === view.lastRowId) {
      this.sortedCache.stats.hits++;
      return run.values;
    }
    if (run && mergeable(run, view)) {
      const added = await c.query<[number]>({
        // "+ 0" keeps the planner off response_values_scan (it would walk the whole run): only the primary-key
        // range on response_id is usable, O(new rows).
        text: `SELECT value FROM response_values
          WHERE response_id > $1 AND response_id <= $2 AND measure_id + 0 = $3 AND condition_id + 0 = $4 AND excluded + 0 = $5`,
        values: [run.lastRowId, view.lastRowId, measureKey, conditionKey, excluded],
        rowMode: 'array',
      });
      const values = mergeNewValues(
        run.values,
        added.rows.map((r) => r[0]),
      );
      this.sortedCache.stats.merges++;
      this.sortedCache.stats.mergedRows += added.rows.length;
      this.sortedCache.set(key, { values, lastRowId: view.lastRowId, epoch: view.epoch });
      return values;
    }
    if (run && run.epoch !== view.epoch) this.sortedCache.stats.invalidations++;
    const values = await this.readRun(c, measureKey, conditionKey, excluded);
    this.sortedCache.stats.fullReads++;
    this.sortedCache.set(key, { values, lastRowId: view.lastRowId, epoch: view.epoch });
    return values;
  }

  private async readSorted(c: Queryable, m: MeasureRow, conditionKey: number, includeExcluded: boolean, view: CacheView): Promise<Float64Array> {
    const kept = await this.readRunCached(c, m.id, conditionKey, 0, view);
    return includeExcluded ? mergeSorted(kept, await this.readRunCached(c, m.id, conditionKey, 1, view)) : kept;
  }

  async getSortedValues(measureKey: number, conditionKey: number, includeExcluded: boolean): Promise<Float64Array> {
    return this.db.snapshot(async (c) => {
      const m = await this.measure(c, measureKey);
      return this.readSorted(c, m, conditionKey, includeExcluded, await this.cacheView(c, m.experiment_id));
    });
  }

  async getSortedValuesSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.db.snapshot(async (c) => {
      const m = await this.measure(c, measureKey);
      const view = await this.cacheView(c, m.experiment_id);
      const groups: Float64Array[] = [];
      for (const k of conditionKeys) groups.push(await this.readSorted(c, m, k, includeExcluded, view));
      return { dataVersion: m.data_version, groups, ...(await this.snapshotContext(c, m)) };
    });
  }

  async getCountsSnapshot(measureKey: number, conditionKeys: number[], includeExcluded: boolean): Promise<MeasureSnapshot> {
    return this.db.snapshot(async (c) => {
      const m = await this.measure(c, measureKey);
      const groups: Float64Array[] = [];
      for (const k of conditionKeys) groups.push(await this.readDense(c, m, k, includeExcluded));
      return { dataVersion: m.data_version, groups, ...(await this.snapshotContext(c, m)) };
    });
  }

  private async snapshotContext(c: Queryable, m: MeasureRow): Promise<Pick<MeasureSnapshot, 'conditions' | 'rejected' | 'rejectedTotal'>> {
    const conditions = (
      await c.query<{ key: number; responses: number; excluded: number }>(
        `SELECT id AS key, response_count AS responses, excluded_count AS excluded FROM conditions WHERE experiment_id = $1 ORDER BY position`,
        [m.experiment_id],
      )
    ).rows as ConditionCounter[];
    const rejected = (
      await c.query<{ reason: RejectionReason; count: number }>(
        `SELECT reason, count FROM rejected_value_counts WHERE measure_id = $1 AND count > 0 ORDER BY reason COLLATE "C"`,
        [m.id],
      )
    ).rows;
    const total = (
      await c.query<{ n: number }>(`SELECT coalesce(sum(count), 0) AS n FROM rejected_value_counts WHERE experiment_id = $1`, [m.experiment_id])
    ).rows[0].n;
    return { conditions, rejected, rejectedTotal: total };
  }

  async countValues(measureKey: number): Promise<number> {
    return (await this.db.query<{ n: number }>(`SELECT count(*) AS n FROM response_values WHERE measure_id = $1`, [measureKey])).rows[0].n;
  }

  /**
   * What every cached reply is checked against: the stamp read in the same statement as `readWith` when the caller
   * asks right after reading it (definition-read.ts), else one prepared statement, no transaction (a single
   * statement sees one snapshot).
   */
  async getComparisonStamp(experimentKey: number, readWith?: ExperimentRecord): Promise<ComparisonStamp | null> {
    const fused = takeStampReadWith(readWith, experimentKey);
    if (fused) return fused;
    const r = await this.db.prepared<{ data_version: number; rejected: number; looks: number }>(COMPARISON_STAMP, [experimentKey]);
    const row = r.rows[0];
    return row ? { dataVersion: row.data_version, rejectedTotal: row.rejected, looks: row.looks } : null;
  }

  async setExcluded(
    experimentKey: number,
    responseId: string,
    change: { excluded: boolean; reason: string | null },
    apiKeyId: number | null,
    at: string,
  ): Promise<ExclusionOutcome> {
    return this.db.write(async (c): Promise<ExclusionOutcome> => {
      const state = (await lockExperiments(c, [experimentKey])).get(experimentKey);
      if (!state) return { kind: 'not-found' };
      const row = (
        await c.query<{ id: number; condition_id: number; condition: string; excluded: number; excluded_reason: string | null }>(
          `SELECT r.id, r.condition_id, c.slug AS condition, r.excluded, r.excluded_reason
           FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE r.experiment_id = $1 AND r.response_id = $2`,
          [experimentKey, responseId],
        )
      ).rows[0];
      if (!row) return { kind: 'not-found' };
      const target = change.excluded ? 1 : 0;
      if (row.excluded === target) {
        return { kind: 'unchanged', responseId, condition: row.condition, excluded: row.excluded === 1, reason: row.excluded_reason, dataVersion: state.dataVersion };
      }
      const from = row.excluded;
      const reason = change.excluded ? change.reason : null;
      await c.query(`UPDATE responses SET excluded = $1, excluded_reason = $2 WHERE id = $3`, [target, reason, row.id]);
      await c.query(`UPDATE response_values SET excluded = $1 WHERE response_id = $2`, [target, row.id]);
      const touched = await moveCounts(c, `v.response_id = $1`, [row.id], from, target);
      await recomputeWeightSums(c, touched);
      await c.query(`UPDATE conditions SET excluded_count = excluded_count + $1 WHERE id = $2`, [change.excluded ? 1 : -1, row.condition_id]);
      const dataVersion = await bumpDataVersion(c, experimentKey);
      await recordAudit(c, {
        experimentKey,
        action: change.excluded ? 'exclude' : 'restore',
        responseId,
        reason: change.excluded ? change.reason : row.excluded_reason,
        count: 1,
        apiKeyId,
        at,
        dataVersion,
      });
      await notifyChange(c, { experimentKey, dataVersion, kind: 'exclusion' });
      return { kind: 'changed', responseId, condition: row.condition, excluded: change.excluded, reason, dataVersion };
    });
  }

  async cleanUp(experimentKey: number, request: CleanUpRequest, apiKeyId: number | null, at: string): Promise<CleanUpOutcome> {
    return this.db.write(async (c) => cleanUpLocked(c, experimentKey, (await lockExperiments(c, [experimentKey])).get(experimentKey), request, apiKeyId, at));
  }

  async eraseRespondent(experimentKey: number, respondent: string, apiKeyId: number | null, at: string): Promise<ErasureOutcome> {
    return this.db.write(async (c): Promise<ErasureOutcome> => {
      const state = (await lockExperiments(c, [experimentKey])).get(experimentKey);
      if (!state) return { kind: 'not-found' };
      const rows = (
        await c.query<{ id: number; response_id: string; condition_id: number; excluded: number }>(
          `SELECT id, response_id, condition_id, excluded FROM responses WHERE experiment_id = $1 AND respondent = $2`,
          [experimentKey, respondent],
        )
      ).rows;
      let dataVersion = state.dataVersion;
      if (rows.length > 0) {
        // Counts are decremented per (measure, condition, excluded, value) with the number of erased answers there.
        await eraseRows(c, experimentKey, rows);
        dataVersion = await bumpDataVersion(c, experimentKey);
        await notifyChange(c, { experimentKey, dataVersion, kind: 'erasure' });
      }
      await recordAudit(c, { experimentKey, action: 'erase', responseId: null, reason: null, count: rows.length, apiKeyId, at, dataVersion });
      return { kind: 'erased', erased: rows.length, dataVersion };
    });
  }
}

/** Responses to erase: their row ids, client ids, conditions and excluded flags. */
interface ErasedRow {
  id: number;
  response_id: string;
  condition_id: number;
  excluded: number;
}

/**
 * Erase responses inside the caller's write transaction (which holds the experiment's lock): counts decremented
 * (read before the rows go), earlier audit rows redacted, values and responses deleted, the weighted sums of the
 * touched value_counts rows recomputed from what remains, per-condition counters lowered. No dataVersion, no audit.
 */
async function eraseRows(c: Queryable, experimentKey: number, rows: ErasedRow[]): Promise<void> {
  if (rows.length === 0) return;
  const ids = rows.map((r) => r.id);
  // Counts are decremented per (measure, condition, excluded, value) with the number of erased answers there.
  const touched = await moveCounts(c, `v.response_id = ANY($1::bigint[])`, [ids], null, null);
  await redactAudit(
    c,
    experimentKey,
    rows.map((r) => r.response_id),
  );
  await c.query(`DELETE FROM response_values WHERE response_id = ANY($1::bigint[])`, [ids]);
  await c.query(`DELETE FROM responses WHERE id = ANY($1::bigint[])`, [ids]);
  // Rows first, sums after: a weighted row's sums are recomputed from the answers that remain.
  await recomputeWeightSums(c, touched);
  const perCondition = new Map<number, { responses: number; excluded: number }>();
  for (const r of rows) {
    const e = perCondition.get(r.condition_id) ?? { responses: 0, excluded: 0 };
    e.responses++;
    e.excluded += r.excluded;
    perCondition.set(r.condition_id, e);
  }
  await c.query(
    `UPDATE conditions c SET response_count = c.response_count - u.n, excluded_count = c.excluded_count - u.x
     FROM unnest($1::bigint[], $2::bigint[], $3::bigint[]) AS u(id, n, x) WHERE c.id = u.id`,
    [[...perCondition.keys()], [...perCondition.values()].map((e) => e.responses), [...perCondition.values()].map((e) => e.excluded)],
  );
}

/**
 * Bulk clean-up (ResponseRepository.cleanUp) in ONE write transaction under the experiment's lock, with the same
 * answers as the SQLite store: the responses received in the window and/or through one key (in id order); exclude
 * takes those not yet excluded (one audit row each, with the reason), erase takes all (one audit row with the count
 * and the reason). dataVersion + 1 once when anything changes; a dry run writes nothing.
 */
export async function cleanUpLocked(c: Queryable, experimentKey: number, state: ExperimentLockState | undefined, request: CleanUpRequest, apiKeyId: number | null, at: string): Promise<CleanUpOutcome> {
  if (!state) return { kind: 'not-found' };
  const f = request.filter;
  const rows = (
    await c.query<ErasedRow>(
      `SELECT id, response_id, condition_id, excluded FROM responses
       WHERE experiment_id = $1 AND ($2::text IS NULL OR received_at >= $2 COLLATE "C") AND ($3::text IS NULL OR received_at <= $3 COLLATE "C")
         AND ($4::bigint IS NULL OR api_key_id = $4)
       ORDER BY id`,
      [experimentKey, f.receivedFrom, f.receivedTo, f.apiKeyId],
    )
  ).rows;
  const targets = request.action === 'exclude' ? rows.filter((r) => r.excluded === 0) : rows;
  if (request.dryRun || targets.length === 0) return { kind: 'done', matched: rows.length, changed: targets.length, dataVersion: state.dataVersion };
  const dataVersion = await bumpDataVersion(c, experimentKey);
  const ids = targets.map((r) => r.id);
  if (request.action === 'exclude') {
    await c.query(`UPDATE responses SET excluded = 1, excluded_reason = $2 WHERE id = ANY($1::bigint[])`, [ids, request.reason]);
    await c.query(`UPDATE response_values SET excluded = 1 WHERE response_id = ANY($1::bigint[])`, [ids]);
    await recomputeWeightSums(c, await moveCounts(c, `v.response_id = ANY($1::bigint[])`, [ids], 0, 1));
    const perCondition = new Map<number, number>();
    for (const r of targets) perCondition.set(r.condition_id, (perCondition.get(r.condition_id) ?? 0) + 1);
    await c.query(`UPDATE conditions c SET excluded_count = c.excluded_count + u.n FROM unnest($1::bigint[], $2::bigint[]) AS u(id, n) WHERE c.id = u.id`, [
      [...perCondition.keys()],
      [...perCondition.values()],
    ]);
    // One audit row per response (in id order), so that each can be restored (and its exclusion traced) one by one.
    await c.query(
      `INSERT INTO audit_log (experiment_id, action, response_id, reason, count, api_key_id, at, data_version)
       SELECT $1, 'exclude', u.rid, $3, 1, $4, $5, $6 FROM unnest($2::text[]) WITH ORDINALITY AS u(rid, ord) ORDER BY u.ord`,
      [experimentKey, targets.map((r) => r.response_id), request.reason, apiKeyId, at, dataVersion],
    );
    await notifyChange(c, { experimentKey, dataVersion, kind: 'exclusion' });
  } else {
    await eraseRows(c, experimentKey, targets);
    // The count, the reason given and the key that asked; no response ids.
    await recordAudit(c, { experimentKey, action: 'erase', responseId: null, reason: request.reason, count: targets.length, apiKeyId, at, dataVersion });
    await notifyChange(c, { experimentKey, dataVersion, kind: 'erasure' });
  }
  return { kind: 'done', matched: rows.length, changed: targets.length, dataVersion };
}

/** A value_counts row whose weighted sums must be recomputed. */
interface CountKey {
  m: number;
  cnd: number;
  x: number;
  v: number;
}

/**
 * Recompute weight_sum and weight_square_sum of the given value_counts rows from their response rows (run after the
 * rows changed). Removing a weight from a running sum can cancel catastrophically, so these sums are never
 * maintained by subtraction. O(answers sharing those values), through response_values_scan.
 */
async function recomputeWeightSums(c: Queryable, keys: CountKey[]): Promise<void> {
  if (keys.length === 0) return;
  await c.query(
    `UPDATE value_counts vc SET
       weight_sum = coalesce(s.ws, 0), weight_square_sum = coalesce(s.wq, 0)
     FROM (SELECT DISTINCT m, cnd, x, v FROM unnest($1::bigint[], $2::bigint[], $3::smallint[], $4::float8[]) AS u(m, cnd, x, v)) AS k
     LEFT JOIN LATERAL (
       SELECT sum(r.weight) AS ws, sum(r.weight * r.weight) AS wq
       FROM response_values rv JOIN responses r ON r.id = rv.response_id
       WHERE rv.measure_id = k.m AND rv.condition_id = k.cnd AND rv.excluded = k.x AND rv.value = k.v AND r.weight IS NOT NULL
     ) AS s ON true
     WHERE vc.measure_id = k.m AND vc.condition_id = k.cnd AND vc.excluded = k.x AND vc.value = k.v`,
    [keys.map((k) => k.m), keys.map((k) => k.cnd), keys.map((k) => k.x), keys.map((k) => k.v)],
  );
}

/**
 * Move the per-value counts of the integer values selected by `where` (over response_values v) from their current
 * excluded flag to `to`, or remove them (to = null). `from` null: each value's own flag (read before any update of
 * it). Rows reaching 0 are deleted, so value_counts always equals a GROUP BY over response_values. Throws when a
 * count to decrement is missing (the invariant was already broken).
 */
async function moveCounts(c: Queryable, where: string, params: unknown[], from: number | null, to: 0 | 1 | null): Promise<CountKey[]> {
  const n = params.length;
  const groups = (
    await c.query<{ measure_id: number; condition_id: number; excluded: number; value: number; n: number; wn: number; ws: number; wq: number }>(
      `SELECT v.measure_id, v.condition_id, ${from === null ? 'v.excluded' : `$${n + 1}::smallint`} AS excluded, v.value, count(*) AS n,
              count(r.weight) AS wn, coalesce(sum(r.weight), 0) AS ws, coalesce(sum(r.weight * r.weight), 0) AS wq
       FROM response_values v JOIN measures m ON m.id = v.measure_id JOIN responses r ON r.id = v.response_id
       WHERE ${where} AND m.is_integer
       GROUP BY 1, 2, 3, 4`,
      from === null ? params : [...params, from],
    )
  ).rows;
  if (groups.length === 0) return [];
  const cols = [groups.map((g) => g.measure_id), groups.map((g) => g.condition_id), groups.map((g) => g.excluded), groups.map((g) => g.value), groups.map((g) => g.n)];
  const weighted = [groups.map((g) => g.wn), groups.map((g) => g.ws), groups.map((g) => g.wq)];
  // The weighted count moves with the answers; the sums are set to exactly 0 when no weighted answer is left, and
  // otherwise recomputed from the rows afterwards by the caller (recomputeWeightSums on the keys returned).
  const dec = await c.query(
    `UPDATE value_counts vc SET count = vc.count - u.n, weighted_count = vc.weighted_count - u.wn,
       weight_sum = CASE WHEN vc.weighted_count - u.wn = 0 THEN 0 ELSE greatest(vc.weight_sum - u.ws, 0) END,
       weight_square_sum = CASE WHEN vc.weighted_count - u.wn = 0 THEN 0 ELSE greatest(vc.weight_square_sum - u.wq, 0) END
     FROM unnest($1::bigint[], $2::bigint[], $3::smallint[], $4::float8[], $5::bigint[], $6::bigint[], $7::float8[], $8::float8[]) AS u(m, cnd, x, v, n, wn, ws, wq)
     WHERE vc.measure_id = u.m AND vc.condition_id = u.cnd AND vc.excluded = u.x AND vc.value = u.v AND vc.count >= u.n AND vc.weighted_count >= u.wn`,
    [...cols, ...weighted],
  );
  if (dec.rowCount !== groups.length) {
    throw new Error(`value_counts lacks ${groups.length - (dec.rowCount ?? 0)} of the ${groups.length} counts to decrement (run splitballot check)`);
  }
  await c.query(
    `DELETE FROM value_counts vc USING unnest($1::bigint[], $2::bigint[], $3::smallint[], $4::float8[]) AS u(m, cnd, x, v)
     WHERE vc.measure_id = u.m AND vc.condition_id = u.cnd AND vc.excluded = u.x AND vc.value = u.v AND vc.count = 0`,
    cols.slice(0, 4),
  );
  if (to !== null) {
    await c.query(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count, weighted_count, weight_sum, weight_square_sum)
       SELECT m, cnd, $9::smallint, v, n, wn, ws, wq
       FROM unnest($1::bigint[], $2::bigint[], $3::smallint[], $4::float8[], $5::bigint[], $6::bigint[], $7::float8[], $8::float8[]) AS u(m, cnd, x, v, n, wn, ws, wq)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + EXCLUDED.count,
         weighted_count = value_counts.weighted_count + EXCLUDED.weighted_count,
         weight_sum = value_counts.weight_sum + EXCLUDED.weight_sum,
         weight_square_sum = value_counts.weight_square_sum + EXCLUDED.weight_square_sum`,
      [...cols, ...weighted, to],
    );
  }
  const touched: CountKey[] = [];
  for (const g of groups) {
    if (g.wn === 0) continue;
    touched.push({ m: g.measure_id, cnd: g.condition_id, x: g.excluded, v: g.value });
    if (to !== null) touched.push({ m: g.measure_id, cnd: g.condition_id, x: to, v: g.value });
  }
  return touched;
}
