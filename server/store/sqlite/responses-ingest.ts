/**
 * Ingest of responses into SQLite: ONE write transaction per request or per group of single responses (group
 * commit), with idempotency, value rows, per-value counts, per-condition counters and dataVersion + 1; and the
 * rejected-value counters. Part of the response repository (responses.ts is the facade and says the rules).
 */
import type { SqliteDatabase } from './open.js';
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

/** Merge two non-decreasing Float64Arrays. O(a + b). */

export const RESPONSE_ROWS_PER_INSERT = 50;

export const VALUE_ROWS_PER_INSERT = 100;

const RESPONSE_COLUMNS = 10;

const VALUE_COLUMNS = 4;

/** Client ids looked up per statement in a batch. */
export const ID_LOOKUP_CHUNK = 100;

/**
 * Values of one run added after a known response id. The unary + keeps SQLite off response_values_scan (equality on
 * its first three columns would make it walk the whole run); only the primary-key range on response_id is then
 * usable: O(new rows). Exported for the query-plan test.
 */

export const GROUP_COMMIT_MAX = 256;

/** The next turn of the event loop (captured at load, so fake timers in tests cannot stall a commit). */

const deferTurn: (fn: () => void) => void = globalThis.setImmediate.bind(globalThis);

/** What one transaction adds to one value_counts row. */
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

/** Ingest with group commit and the rejected-value counters (see the facade in responses.ts for the rules). */
export class SqliteIngestWriter {
  private readonly experimentState;
  private readonly integerMeasures;
  private readonly existingHash;
  private readonly insertResponseWithId;
  private readonly insertResponsesMany;
  private readonly insertValuesMany;
  private readonly hashesOf;
  private readonly insertValue;
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
    this.integerMeasures = db
      .prepare<[number], number>(`SELECT id FROM measures WHERE experiment_id = ? AND is_integer = 1`)
      .pluck();
    this.existingHash = db
      .prepare<[number, string], Buffer>(`SELECT content_hash FROM responses WHERE experiment_id = ? AND response_id = ?`)
      .pluck();
    this.insertResponseWithId = db.prepare<unknown[]>(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id, weight)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.insertResponsesMany = db.prepare<unknown[]>(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id, weight)
       VALUES ${Array.from({ length: RESPONSE_ROWS_PER_INSERT }, () => '(?, ?, ?, ?, ?, ?, ?, ?, ?, ?)').join(', ')}`,
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
        const countIncrements = new Map<number, Map<number, Map<number, CountIncrement>>>();
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
          responseParams.push(rowId, experimentKey, item.responseId, item.conditionKey, item.respondent, item.submittedAt, receivedAt, item.contentHash, apiKeyId, item.weight);
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
              let inc = byValue.get(value);
              if (!inc) byValue.set(value, (inc = { count: 0, weighted: 0, weightSum: 0, weightSquareSum: 0 }));
              inc.count += 1;
              if (item.weight !== null) {
                inc.weighted += 1;
                inc.weightSum += item.weight;
                inc.weightSquareSum += item.weight * item.weight;
              }
            }
          }
          perCondition.set(item.conditionKey, (perCondition.get(item.conditionKey) ?? 0) + 1);
          created++;
        }
        flushResponses();
        flushValues();
        for (const [measure, byCondition] of countIncrements) {
          for (const [condition, byValue] of byCondition) for (const [value, c] of byValue) this.upsertCount.run(measure, condition, value, c.count, c.weighted, c.weightSum, c.weightSquareSum);
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
