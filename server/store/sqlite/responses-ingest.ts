/**
 * Ingest of responses into SQLite: ONE write transaction per request or per group of single responses (group
 * commit), with idempotency, value rows, per-value counts, per-condition counters and dataVersion + 1; and the
 * rejected-value counters. Part of the response repository (responses.ts is the facade and says the rules).
 */
import type { SqliteDatabase } from './open.js';
import { appendPacked } from './packed-values.js';
import type {
  IngestOutcome,
  RejectedIncrement,
  RejectedWeightIncrement,
  ValidResponse,
} from '../types.js';

function bytesEqual(a: Uint8Array, b: Uint8Array): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

export const RESPONSE_ROWS_PER_INSERT = 50;

/**
 * Value rows per multi-row INSERT. A batch's value rows are sorted by the clustered key of migration 0008
 * (measure, condition, value, response) first, so that consecutive rows land next to each other in the one B-tree:
 * sorted and 100 per statement measured ≈ 6 CPU µs per three-value response against ≈ 8.5 for one row per call and
 * ≈ 20 for 100 unsorted rows per statement (a scratch table of 10,000-response batches on the 2-core development
 * machine under load; one-off). Fewer rows than this, and the remainder, go one row per call.
 */
export const VALUE_ROWS_PER_INSERT = 100;

const RESPONSE_COLUMNS = 11;

/** Client ids looked up per statement in a batch (one indexed probe per chunk). */
export const ID_LOOKUP_CHUNK = 100;

export const GROUP_COMMIT_MAX = 256;

/**
 * Integer measures spanning at most this many values are tallied in typed arrays, when the arrays (values ×
 * conditions) are not much larger than the transaction (at most max(1,024, 8 × its responses) cells: a single
 * response on a wide scale gets a map, not a large array); otherwise in a map.
 */
export const DENSE_TALLY_MAX = 4096;

/** The next turn of the event loop (captured at load, so fake timers in tests cannot stall a commit). */

const deferTurn: (fn: () => void) => void = globalThis.setImmediate.bind(globalThis);

/** What one transaction adds to one value_counts row (sparse tallies). */
interface CountIncrement {
  count: number;
  weighted: number;
  weightSum: number;
  weightSquareSum: number;
}

interface PendingIngest {
  experimentKey: number;
  items: ValidResponse[];
  receivedAt: string;
  apiKeyId: number | null;
  resolve: (outcome: IngestOutcome) => void;
  reject: (error: unknown) => void;
}

interface MeasureOfExperiment {
  id: number;
  is_integer: number;
  min: number;
  max: number;
}

type UpsertCount = (measure: number, condition: number, value: number, count: number, weighted: number, weightSum: number, weightSquareSum: number) => void;

/**
 * What one transaction adds to value_counts for one integer measure, per condition and value: typed arrays indexed
 * by (condition index, value − min) when the measure spans at most DENSE_TALLY_MAX values (the weighted columns only
 * once a weighted answer came), a map per condition otherwise. One upsert per (condition, value) with a count.
 */
class IntegerTally {
  private readonly counts: Int32Array | null;
  private weighted: Int32Array | null = null;
  private weightSums: Float64Array | null = null;
  private weightSquares: Float64Array | null = null;
  private readonly sparse: Map<number, CountIncrement>[] | null;

  constructor(
    private readonly min: number,
    private readonly size: number,
    private readonly conditionCount: number,
    responses: number,
  ) {
    const dense = size <= DENSE_TALLY_MAX && size * conditionCount <= Math.max(1024, 8 * responses);
    this.counts = dense ? new Int32Array(size * conditionCount) : null;
    this.sparse = dense ? null : Array.from({ length: conditionCount }, () => new Map<number, CountIncrement>());
  }

  add(conditionIndex: number, value: number, weight: number | null): void {
    if (this.counts) {
      const at = conditionIndex * this.size + (value - this.min);
      this.counts[at]++;
      if (weight !== null) {
        if (!this.weighted) {
          this.weighted = new Int32Array(this.counts.length);
          this.weightSums = new Float64Array(this.counts.length);
          this.weightSquares = new Float64Array(this.counts.length);
        }
        this.weighted[at]++;
        this.weightSums![at] += weight;
        this.weightSquares![at] += weight * weight;
      }
      return;
    }
    const byValue = this.sparse![conditionIndex];
    let inc = byValue.get(value);
    if (!inc) byValue.set(value, (inc = { count: 0, weighted: 0, weightSum: 0, weightSquareSum: 0 }));
    inc.count += 1;
    if (weight !== null) {
      inc.weighted += 1;
      inc.weightSum += weight;
      inc.weightSquareSum += weight * weight;
    }
  }

  flush(measureKey: number, conditionKeys: readonly number[], upsert: UpsertCount): void {
    if (this.counts) {
      const counts = this.counts;
      for (let ci = 0; ci < this.conditionCount; ci++) {
        const base = ci * this.size;
        for (let k = 0; k < this.size; k++) {
          const n = counts[base + k];
          if (n === 0) continue;
          const at = base + k;
          if (this.weighted) upsert(measureKey, conditionKeys[ci], this.min + k, n, this.weighted[at], this.weightSums![at], this.weightSquares![at]);
          else upsert(measureKey, conditionKeys[ci], this.min + k, n, 0, 0, 0);
        }
      }
      return;
    }
    this.sparse!.forEach((byValue, ci) => {
      for (const [value, c] of byValue) upsert(measureKey, conditionKeys[ci], value, c.count, c.weighted, c.weightSum, c.weightSquareSum);
    });
  }
}

/**
 * The value rows of one transaction, gathered first and inserted in the clustered key's order (measure, condition,
 * value, response; excluded is 0 for every new row), VALUE_ROWS_PER_INSERT per statement.
 */
class ValueRows {
  private readonly responseIds: number[] = [];
  private readonly measureKeys: number[] = [];
  private readonly conditionKeys: number[] = [];
  private readonly values: number[] = [];

  add(responseRowId: number, measureKey: number, conditionKey: number, value: number): void {
    this.responseIds.push(responseRowId);
    this.measureKeys.push(measureKey);
    this.conditionKeys.push(conditionKey);
    this.values.push(value);
  }

  insert(one: { run(r: number, m: number, c: number, v: number): unknown }, many: { run(params: unknown[]): unknown }): void {
    const n = this.values.length;
    const { responseIds: r, measureKeys: m, conditionKeys: c, values: v } = this;
    if (n < VALUE_ROWS_PER_INSERT) {
      for (let i = 0; i < n; i++) one.run(r[i], m[i], c[i], v[i]);
      return;
    }
    const order = new Uint32Array(n);
    for (let i = 0; i < n; i++) order[i] = i;
    order.sort((a, b) => m[a] - m[b] || c[a] - c[b] || v[a] - v[b] || r[a] - r[b]);
    const params = new Array<unknown>(VALUE_ROWS_PER_INSERT * 4);
    const whole = n - (n % VALUE_ROWS_PER_INSERT);
    for (let start = 0; start < whole; start += VALUE_ROWS_PER_INSERT) {
      for (let k = 0; k < VALUE_ROWS_PER_INSERT; k++) {
        const i = order[start + k];
        params[4 * k] = r[i];
        params[4 * k + 1] = m[i];
        params[4 * k + 2] = c[i];
        params[4 * k + 3] = v[i];
      }
      many.run(params);
    }
    for (let k = whole; k < n; k++) {
      const i = order[k];
      one.run(r[i], m[i], c[i], v[i]);
    }
  }
}

/** Ingest with group commit and the rejected-value counters (see the facade in responses.ts for the rules). */
export class SqliteIngestWriter {
  private readonly experimentState;
  private readonly measuresOf;
  private readonly conditionsOf;
  private readonly apiKeyExists;
  private readonly existingHash;
  private readonly insertResponseWithId;
  private readonly insertResponsesMany;
  private readonly hashesOf;
  private readonly hashesOfSize = new Map<number, ReturnType<SqliteIngestWriter['prepareHashes']>>();
  private readonly insertValue;
  private readonly insertValuesMany;
  private readonly upsertCount;
  private readonly bumpCondition;
  private readonly bumpVersion;
  private readonly upsertRejected;
  private readonly upsertRejectedWeight;
  private readonly maxResponseId;
  private readonly ingestTx;
  private readonly groupTx;
  private readonly rejectedTx;
  private group: PendingIngest[] = [];
  private flushScheduled = false;
  /** Group commits so far: how many groups, how many requests in them, the largest group. */
  readonly groupStats = { groups: 0, requests: 0, largest: 0 };

  constructor(private readonly db: SqliteDatabase) {
    this.experimentState = db.prepare<[number], { status: string; data_version: number }>(
      `SELECT status, data_version FROM experiments WHERE id = ?`,
    );
    this.measuresOf = db.prepare<[number], MeasureOfExperiment>(`SELECT id, is_integer, min, max FROM measures WHERE experiment_id = ?`);
    this.conditionsOf = db.prepare<[number], number>(`SELECT id FROM conditions WHERE experiment_id = ? ORDER BY id`).pluck();
    this.apiKeyExists = db.prepare<[number], number>(`SELECT 1 FROM api_keys WHERE id = ?`).pluck();
    this.existingHash = db
      .prepare<[number, string], Buffer>(`SELECT content_hash FROM responses WHERE experiment_id = ? AND response_id = ?`)
      .pluck();
    const responseInsert = `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id, weight, packed_values) VALUES `;
    const responseTuple = '(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)';
    this.insertResponseWithId = db.prepare<unknown[]>(responseInsert + responseTuple);
    this.insertResponsesMany = db.prepare<unknown[]>(responseInsert + Array.from({ length: RESPONSE_ROWS_PER_INSERT }, () => responseTuple).join(', '));
    this.hashesOf = this.prepareHashes(ID_LOOKUP_CHUNK);
    this.insertValue = db.prepare<[number, number, number, number]>(
      `INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES (?, ?, ?, 0, ?)`,
    );
    this.insertValuesMany = db.prepare<unknown[]>(
      `INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value)
       VALUES ${Array.from({ length: VALUE_ROWS_PER_INSERT }, () => '(?, ?, ?, 0, ?)').join(', ')}`,
    );
    // The weighted columns (migration 0005) travel with the count: answers whose response carries a weight, Σw, Σw².
    this.upsertCount = db.prepare<[number, number, number, number, number, number, number]>(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count, weighted_count, weight_sum, weight_square_sum)
       VALUES (?, ?, 0, ?, ?, ?, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count,
         weighted_count = value_counts.weighted_count + excluded.weighted_count,
         weight_sum = value_counts.weight_sum + excluded.weight_sum,
         weight_square_sum = value_counts.weight_square_sum + excluded.weight_square_sum`,
    );
    this.bumpCondition = db.prepare<[number, number]>(`UPDATE conditions SET response_count = response_count + ? WHERE id = ?`);
    this.bumpVersion = db
      .prepare<[number], number>(`UPDATE experiments SET data_version = data_version + 1 WHERE id = ? RETURNING data_version`)
      .pluck();
    this.upsertRejected = db.prepare<[number, number, string, number]>(
      `INSERT INTO rejected_value_counts (experiment_id, measure_id, reason, count) VALUES (?, ?, ?, ?)
       ON CONFLICT (experiment_id, measure_id, reason) DO UPDATE SET count = rejected_value_counts.count + excluded.count`,
    );
    this.upsertRejectedWeight = db.prepare<[number, string, number]>(
      `INSERT INTO rejected_weight_counts (experiment_id, reason, count) VALUES (?, ?, ?)
       ON CONFLICT (experiment_id, reason) DO UPDATE SET count = rejected_weight_counts.count + excluded.count`,
    );
    this.maxResponseId = db.prepare<[], number>(`SELECT coalesce(max(id), 0) FROM responses`).pluck();
    const upsert: UpsertCount = (m, c, v, n, wn, ws, wq) => void this.upsertCount.run(m, c, v, n, wn, ws, wq);
    this.ingestTx = db.transaction(
      (experimentKey: number, items: ValidResponse[], receivedAt: string, apiKeyId: number | null): IngestOutcome => {
        const state = this.experimentState.get(experimentKey);
        if (!state) return { kind: 'not-found' };
        if (state.status !== 'open') return { kind: 'closed' };

        // 1. Idempotency: decide for every item before writing anything. A batch looks its client ids up
        //    ID_LOOKUP_CHUNK at a time (one indexed probe per chunk instead of one statement per item).
        const storedHashes = items.length > 1 ? this.lookupHashes(experimentKey, items) : null;
        const isNew = new Uint8Array(items.length);
        let conflicts: { index: number; responseId: string }[] | null = null;
        const seenInBatch = items.length > 1 ? new Map<string, Uint8Array>() : null;
        for (let i = 0; i < items.length; i++) {
          const item = items[i];
          if (item.generated) {
            isNew[i] = 1;
            continue;
          }
          const earlier = seenInBatch?.get(item.responseId);
          const stored = earlier ?? (storedHashes ? storedHashes.get(item.responseId) : this.existingHash.get(experimentKey, item.responseId));
          if (stored === undefined) {
            isNew[i] = 1;
            seenInBatch?.set(item.responseId, item.contentHash);
          } else if (!bytesEqual(stored, item.contentHash)) {
            (conflicts ??= []).push({ index: i, responseId: item.responseId });
          }
        }
        if (conflicts) return { kind: 'conflict', conflicts };

        // 2. The referential rules, once per batch (response_values has no REFERENCES since migration 0008): every
        //    condition and measure named belongs to this experiment, the API key exists. A failure is a caller's
        //    bug (validation resolves both against the experiment), so it throws and the transaction rolls back.
        const conditionKeys = this.conditionsOf.all(experimentKey);
        const conditionIndex = new Map<number, number>();
        conditionKeys.forEach((key, i) => conditionIndex.set(key, i));
        const tallies = new Map<number, IntegerTally | null>();
        for (const m of this.measuresOf.all(experimentKey)) {
          tallies.set(m.id, m.is_integer === 1 ? new IntegerTally(m.min, m.max - m.min + 1, conditionKeys.length, items.length) : null);
        }
        if (apiKeyId !== null && this.apiKeyExists.get(apiKeyId) === undefined) throw new Error(`API key ${apiKeyId} does not exist`);

        // 3. Writes. Ids are given explicitly (max(id) + 1, + 2, …: exactly what SQLite would pick, since this
        //    transaction is the only writer), so response rows go in as multi-row INSERTs of up to
        //    RESPONSE_ROWS_PER_INSERT rows; each value is one call of one cached single-row INSERT (one B-tree insert).
        const perCondition = new Int32Array(conditionKeys.length);
        let created = 0;
        let nextId = (this.maxResponseId.get() as number) + 1;
        const responseParams: unknown[] = [];
        const flushResponses = (): void => {
          const rows = responseParams.length / RESPONSE_COLUMNS;
          if (rows === 0) return;
          if (rows === RESPONSE_ROWS_PER_INSERT) this.insertResponsesMany.run(responseParams);
          else for (let r = 0; r < rows; r++) this.insertResponseWithId.run(responseParams.slice(r * RESPONSE_COLUMNS, (r + 1) * RESPONSE_COLUMNS));
          responseParams.length = 0;
        };
        const rows = new ValueRows();
        for (let i = 0; i < items.length; i++) {
          if (isNew[i] === 0) continue;
          const item = items[i];
          const ci = conditionIndex.get(item.conditionKey);
          if (ci === undefined) throw new Error(`condition ${item.conditionKey} is not a condition of experiment ${experimentKey}`);
          const rowId = nextId++;
          let packed = '';
          for (const [measureKey, value] of item.values) {
            const tally = tallies.get(measureKey);
            if (tally === undefined) throw new Error(`measure ${measureKey} is not a measure of experiment ${experimentKey}`);
            rows.add(rowId, measureKey, item.conditionKey, value);
            if (tally !== null) tally.add(ci, value, item.weight);
            packed = appendPacked(packed, measureKey, value);
          }
          responseParams.push(rowId, experimentKey, item.responseId, item.conditionKey, item.respondent, item.submittedAt, receivedAt, item.contentHash, apiKeyId, item.weight, packed);
          if (responseParams.length === RESPONSE_ROWS_PER_INSERT * RESPONSE_COLUMNS) flushResponses();
          perCondition[ci]++;
          created++;
        }
        flushResponses();
        rows.insert(this.insertValue, this.insertValuesMany);
        for (const [measureKey, tally] of tallies) if (tally) tally.flush(measureKey, conditionKeys, upsert);
        for (let ci = 0; ci < conditionKeys.length; ci++) if (perCondition[ci] > 0) this.bumpCondition.run(perCondition[ci], conditionKeys[ci]);
        const dataVersion = created > 0 ? (this.bumpVersion.get(experimentKey) as number) : state.data_version;
        const outcomeItems = new Array<{ responseId: string; created: boolean }>(items.length);
        for (let i = 0; i < items.length; i++) outcomeItems[i] = { responseId: items[i].responseId, created: isNew[i] === 1 };
        return { kind: 'stored', items: outcomeItems, created, repeated: items.length - created, dataVersion };
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

  private prepareHashes(size: number) {
    return this.db
      .prepare<unknown[], [string, Buffer]>(
        `SELECT response_id, content_hash FROM responses WHERE experiment_id = ? AND response_id IN (${Array.from({ length: size }, () => '?').join(', ')})`,
      )
      .raw();
  }

  /** Stored content hashes of the batch's client ids: one indexed probe (an IN list) per ID_LOOKUP_CHUNK ids. */
  private lookupHashes(experimentKey: number, items: ValidResponse[]): Map<string, Uint8Array> {
    const found = new Map<string, Uint8Array>();
    const chunk: unknown[] = [experimentKey];
    const probe = (): void => {
      const size = chunk.length - 1;
      if (size === 0) return;
      let stmt = size === ID_LOOKUP_CHUNK ? this.hashesOf : this.hashesOfSize.get(size);
      if (!stmt) this.hashesOfSize.set(size, (stmt = this.prepareHashes(size)));
      for (const [id, hash] of stmt.all(chunk)) found.set(id, hash);
      chunk.length = 1;
    };
    for (const item of items) {
      if (item.generated) continue;
      chunk.push(item.responseId);
      if (chunk.length - 1 === ID_LOOKUP_CHUNK) probe();
    }
    probe();
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

  async recordRejectedWeights(experimentKey: number, increments: RejectedWeightIncrement[]): Promise<void> {
    if (increments.length === 0) return;
    this.db.transaction(() => {
      for (const inc of increments) if (inc.count > 0) this.upsertRejectedWeight.run(experimentKey, inc.reason, inc.count);
    }).immediate();
  }

  async recordRejected(experimentKey: number, increments: RejectedIncrement[]): Promise<void> {
    if (increments.length === 0) return;
    this.rejectedTx.immediate(experimentKey, increments);
  }
}
