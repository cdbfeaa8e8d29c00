/**
 * Issue 19 "Ingest at the speed of the storage engine": where each microsecond of a batch goes, and what the
 * store-level design changes would give. A script that prints figures (not a test).
 *
 *   npx tsx tests/bench/profile-ingest.ts [--reps 7] [--batches 5] [--rounds 2] [--skip-prototype]
 *
 * Part 1, profile of ONE batch of 10,000 responses × 3 items (an integer 0–100 item, a continuous item, an
 * integer 1–7 item; invented values from the seeded streams of tests/bench/data.ts), in-process, median of --reps
 * runs, each run with fresh client responseIds (so every response is new and its id is probed):
 *   - parse: parseJsonBody (the overlong-number scan + JSON.parse) and bare JSON.parse;
 *   - validation: checkBatch of server/services/ingest/validate.ts (schema fast path, scale, content hash), and the
 *     canonical hashing alone (contentHash on the same inputs), so validation without hashing is the difference;
 *   - the real store transaction (store.responses.ingest: BEGIN IMMEDIATE … COMMIT);
 *   - the same transaction REPLAYED statement by statement with the SQL of server/store/sqlite/responses-ingest.ts
 *     against a second database migrated with migrations/sqlite/*.sql: experiment state, idempotency probe (100
 *     ids per statement), max(id), response rows with their packed values (50 per statement), value rows (one row
 *     sorted by the clustered key of migration 0008 and written 100 per statement), count upserts,
 *     per-condition counters, dataVersion, COMMIT (the WAL fsync: synchronous = FULL), and one rejected-counter
 *     transaction (only written when a batch has refused values) for scale. The JavaScript bookkeeping of the
 *     real transaction is roughly its time minus the replayed statements.
 *
 * Part 2, prototype of the store-level changes on scratch databases with the service's pragmas (WAL,
 * synchronous = FULL, foreign_keys, 64 MiB cache). Each variant writes --batches batches of 10,000 three-item
 * responses (responses, values, count upserts, counters, dataVersion, COMMIT; idempotency probe by chunk) and
 * reports the median wall-clock and CPU (process.cpuUsage: user + system) µs per response over the batches after
 * the first; CPU time is the steadier figure on a shared machine, wall time includes the fsync wait:
 *   - values table: today's (PRIMARY KEY (response_id, measure_id) WITHOUT ROWID + index response_values_scan) vs
 *     one WITHOUT ROWID table clustered on (measure_id, condition_id, excluded, value, response_id), alone or with a
 *     narrow (response_id) index for per-response work (exclusion, erasure, newer-than reads);
 *   - rows per INSERT statement: 1, 50, 100, 500 (cached prepared statements);
 *   - foreign keys on vs off with the checks done once per batch inside the transaction;
 *   - idempotency: one probe per item, 100 / 500 ids per IN list, or one probe for the whole batch via json_each;
 *   - hashing: createHash per item vs crypto.hash one-shot;
 *   - all changes together.
 * The prototype tables live only in the scratch databases; nothing here is a migration.
 *
 * Bounded: ≈ 30–60 s on a busy 2-core machine. The load average is printed at start and end: the machine is
 * shared, so compare figures of the same run.
 */
import { createHash, hash as oneShotHash } from 'node:crypto';
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import { join } from 'node:path';
import Database from 'better-sqlite3';
import { openSqliteStore } from '../../server/store/sqlite/store.js';
import { checkBatch, contentHash } from '../../server/services/ingest/validate.js';
import { parseJsonBody } from '../../server/http/json-body.js';
import type { ExperimentRecord, ValidResponse } from '../../server/store/types.js';
import { generateStream } from './data.js';
import { abExperiment, argNum, argv, batchJson, fmt, logger, median, responseJson, table, writeResults } from './harness.js';

const log = logger('profile-ingest');
const BATCH = 10_000;
const REPS = argNum('--reps', 7);
const BATCHES = argNum('--batches', 5);
const ROUNDS = argNum('--rounds', 2);
const SKIP_PROTOTYPE = argv.includes('--skip-prototype');
const EXPERIMENT = abExperiment('bench-profile', 'Ingest profile (invented data)', [
  { id: 'agree', label: 'Agreement 1–7', min: 1, max: 7, integer: true, required: true },
]);

const loadAverage = (): string => os.loadavg().map((x) => x.toFixed(2)).join(' ');
const us = (ms: number): string => ((ms * 1000) / BATCH).toFixed(2);

// ---------------------------------------------------------------------------------------------------------------
// Data: batch `b` holds responses b·BATCH … (b+1)·BATCH − 1 of the seeded streams, alternating conditions.

const MAX_BATCHES = Math.max(REPS, BATCHES) + 2;
const half = (MAX_BATCHES * BATCH) / 2;
const streams = {
  ia: generateStream('integer-a', half),
  ib: generateStream('integer-b', half),
  ca: generateStream('continuous-a', half),
  cb: generateStream('continuous-b', half),
};

function batchBody(b: number, tag: string): string {
  const items: string[] = [];
  for (let i = b * BATCH; i < (b + 1) * BATCH; i++) {
    const k = i >> 1;
    const a = (i & 1) === 0;
    const score = a ? streams.ia[k] : streams.ib[k];
    items.push(responseJson(`${tag}${i}`, a ? 'a' : 'b', { score, amount: a ? streams.ca[k] : streams.cb[k], agree: 1 + (score % 7) }));
  }
  return batchJson(items);
}

function tempDir(): string {
  return mkdtempSync(join(os.tmpdir(), 'splitballot-profile-'));
}

/** Wall-clock and CPU (user + system of this process) milliseconds. */
interface Clock {
  wall: number;
  cpu: number;
}

function timed<T>(fn: () => T): [T, Clock] {
  const c0 = process.cpuUsage();
  const t0 = performance.now();
  const r = fn();
  const wall = performance.now() - t0;
  const c = process.cpuUsage(c0);
  return [r, { wall, cpu: (c.user + c.system) / 1000 }];
}

const minus = (a: Clock, b: Clock): Clock => ({ wall: a.wall - b.wall, cpu: a.cpu - b.cpu });
const plus = (a: Clock, b: Clock): Clock => ({ wall: a.wall + b.wall, cpu: a.cpu + b.cpu });
const ZERO: Clock = { wall: 0, cpu: 0 };

// ---------------------------------------------------------------------------------------------------------------
// Part 1: the profile.

/** The statements of responses-ingest.ts, prepared on a raw connection, run one step at a time (ms per step). */
function replayTransaction(db: Database.Database, experimentKey: number, items: ValidResponse[], receivedAt: string): Record<string, Clock> {
  const s = replayStatements(db);
  const t: Record<string, Clock> = {};
  const step = (name: string, fn: () => void): void => {
    t[name] = plus(t[name] ?? ZERO, timed(fn)[1]);
  };
  step('begin immediate', () => db.exec('BEGIN IMMEDIATE'));
  let integerMeasures = new Set<number>();
  step('experiment state + integer measures', () => {
    s.experimentState.get(experimentKey);
    integerMeasures = new Set(s.integerMeasures.all(experimentKey) as number[]);
  });
  step('idempotency probe (100 ids / statement)', () => {
    const ids = items.map((x) => x.responseId);
    for (let start = 0; start + 100 <= ids.length; start += 100) s.hashesOf.all(experimentKey, ...ids.slice(start, start + 100));
  });
  let nextId = 0;
  step('max(id)', () => {
    nextId = (s.maxResponseId.get() as number) + 1;
  });
  const firstId = nextId;
  // Parameters are built outside the timed statements (the real code builds them in JavaScript, counted below).
  const responseChunks: unknown[][] = [];
  const valueChunks: unknown[][] = [];
  let rp: unknown[] = [];
  let vp: unknown[] = [];
  const counts = new Map<string, number>();
  const perCondition = new Map<number, number>();
  for (let i = 0; i < items.length; i++) {
    const it = items[i];
    const id = firstId + i;
    let packed = '';
    for (const [m, v] of it.values) packed += packed.length === 0 ? `${m}=${v}` : `,${m}=${v}`;
    rp.push(id, experimentKey, it.responseId, it.conditionKey, it.respondent, it.submittedAt, receivedAt, it.contentHash, null, null, packed);
    if (rp.length === 50 * 11) (responseChunks.push(rp), (rp = []));
    for (const [m, v] of it.values) {
      vp.push(id, m, it.conditionKey, v);
      if (vp.length === 100 * 4) (valueChunks.push(vp), (vp = []));
      if (integerMeasures.has(m)) counts.set(`${m}|${it.conditionKey}|${v}`, (counts.get(`${m}|${it.conditionKey}|${v}`) ?? 0) + 1);
    }
    perCondition.set(it.conditionKey, (perCondition.get(it.conditionKey) ?? 0) + 1);
  }
  if (rp.length > 0 || vp.length > 0) throw new Error('replay: the batch size must be a multiple of 100');
  step('response rows (50 / INSERT)', () => {
    for (const c of responseChunks) s.insertResponsesMany.run(c);
  });
  // As responses-ingest.ts does: the batch's value rows sorted by the clustered key, 100 per statement.
  const sortedChunks: unknown[][] = [];
  {
    const all: [number, number, number, number][] = [];
    for (const c of valueChunks) for (let k = 0; k < c.length; k += 4) all.push([c[k] as number, c[k + 1] as number, c[k + 2] as number, c[k + 3] as number]);
    step('sort value rows by the clustered key', () => {
      all.sort((a, b) => a[1] - b[1] || a[2] - b[2] || a[3] - b[3] || a[0] - b[0]);
    });
    for (let start = 0; start < all.length; start += 100) sortedChunks.push(all.slice(start, start + 100).flat());
  }
  step('value rows (100 / INSERT, sorted)', () => {
    for (const c of sortedChunks) {
      if (c.length === 400) s.insertValuesMany.run(c);
      else for (let k = 0; k < c.length; k += 4) s.insertValue.run(c[k], c[k + 1], c[k + 2], c[k + 3]);
    }
  });
  step('count upserts', () => {
    for (const [k, n] of counts) {
      const [m, c, v] = k.split('|').map(Number);
      s.upsertCount.run(m, c, v, n);
    }
  });
  step('condition counters', () => {
    for (const [c, n] of perCondition) s.bumpCondition.run(n, c);
  });
  step('dataVersion', () => s.bumpVersion.get(experimentKey));
  step('commit (WAL fsync)', () => db.exec('COMMIT'));
  return t;
}

const replayCache = new WeakMap<Database.Database, ReturnType<typeof prepareReplay>>();
function replayStatements(db: Database.Database) {
  let s = replayCache.get(db);
  if (!s) replayCache.set(db, (s = prepareReplay(db)));
  return s;
}
function prepareReplay(db: Database.Database) {
  return {
    experimentState: db.prepare(`SELECT status, data_version FROM experiments WHERE id = ?`),
    integerMeasures: db.prepare(`SELECT id FROM measures WHERE experiment_id = ? AND is_integer = 1`).pluck(),
    hashesOf: db
      .prepare(`SELECT response_id, content_hash FROM responses WHERE experiment_id = ? AND response_id IN (${Array.from({ length: 100 }, () => '?').join(', ')})`)
      .raw(),
    maxResponseId: db.prepare(`SELECT coalesce(max(id), 0) FROM responses`).pluck(),
    insertResponsesMany: db.prepare(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id, weight, packed_values)
       VALUES ${Array.from({ length: 50 }, () => '(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)').join(', ')}`,
    ),
    insertValue: db.prepare(`INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES (?, ?, ?, 0, ?)`),
    insertValuesMany: db.prepare(
      `INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES ${Array.from({ length: 100 }, () => '(?, ?, ?, 0, ?)').join(', ')}`,
    ),
    upsertCount: db.prepare(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, 0, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count`,
    ),
    bumpCondition: db.prepare(`UPDATE conditions SET response_count = response_count + ? WHERE id = ?`),
    bumpVersion: db.prepare(`UPDATE experiments SET data_version = data_version + 1 WHERE id = ? RETURNING data_version`).pluck(),
    upsertRejected: db.prepare(
      `INSERT INTO rejected_value_counts (experiment_id, measure_id, reason, count) VALUES (?, ?, ?, ?)
       ON CONFLICT (experiment_id, measure_id, reason) DO UPDATE SET count = rejected_value_counts.count + excluded.count`,
    ),
  };
}

async function profile(): Promise<Record<string, unknown>> {
  const dir = tempDir();
  try {
    const real = openSqliteStore(join(dir, 'real.db'));
    const copy = openSqliteStore(join(dir, 'replay.db')); // the same migrations: a copy of the schema
    const def = { ...EXPERIMENT, plannedPerCondition: null, thankYouUrl: null };
    await real.experiments.create(def);
    await copy.experiments.create(def);
    const exp = (await real.experiments.getBySlug(EXPERIMENT.id)) as ExperimentRecord;
    const expCopy = (await copy.experiments.getBySlug(EXPERIMENT.id)) as ExperimentRecord;
    const steps: Record<string, Clock[]> = {};
    const add = (k: string, c: Clock): void => void (steps[k] ??= []).push(c);
    for (let r = 0; r < REPS; r++) {
      const body = batchBody(r, `p${r}-`);
      const receivedAt = new Date().toISOString();
      const [, bare] = timed(() => JSON.parse(body));
      const [parsed, parse] = timed(() => parseJsonBody(body, JSON.parse));
      const [checked, validate] = timed(() => checkBatch(exp, parsed, receivedAt));
      if (checked.errors.length > 0 || checked.valid.length !== BATCH) throw new Error(`profile: ${JSON.stringify(checked.errors.slice(0, 3))}`);
      // Canonical hashing alone, on the very inputs checkItem hashes (condition id, respondent, [measure id, value]).
      const byKey = new Map(exp.measures.map((m) => [m.key, m.id]));
      const condId = new Map(exp.conditions.map((c) => [c.key, c.id]));
      const canon = checked.valid.map((v) => ({ c: condId.get(v.conditionKey)!, r: v.respondent, vals: [...v.values].map(([k, x]) => [byKey.get(k)!, x] as [string, number]) }));
      const [, hashing] = timed(() => {
        for (const x of canon) contentHash(x.c, x.r, x.vals);
      });
      const [, stringifyOnly] = timed(() => {
        for (const x of canon) JSON.stringify([x.c, x.r, x.vals]);
      });
      const [, earlier] = timed(() => {
        for (const x of canon) createHash('sha256').update(JSON.stringify([x.c, x.r, x.vals]), 'utf8').digest();
      });
      const [, oneShot] = timed(() => {
        for (const x of canon) oneShotHash('sha256', JSON.stringify([x.c, x.r, x.vals]), 'buffer');
      });
      const [outcome, tx] = await (async (): Promise<[Awaited<ReturnType<typeof real.responses.ingest>>, Clock]> => {
        const c0 = process.cpuUsage();
        const t0 = performance.now();
        const o = await real.responses.ingest(exp.key, checked.valid, receivedAt, null);
        const wall = performance.now() - t0;
        const c = process.cpuUsage(c0);
        return [o, { wall, cpu: (c.user + c.system) / 1000 }];
      })();
      if (outcome.kind !== 'stored' || outcome.created !== BATCH) throw new Error(`profile: ${outcome.kind}`);
      // The replay inserts the same items (ids are fresh in the copy too) into the copy of the schema.
      const copyItems = checked.valid.map((v) => ({ ...v, conditionKey: v.conditionKey - exp.conditions[0].key + expCopy.conditions[0].key, values: new Map([...v.values].map(([k, x]) => [k - exp.measures[0].key + expCopy.measures[0].key, x])) }));
      const replay = replayTransaction(copy.db, expCopy.key, copyItems, receivedAt);
      const [, rejected] = timed(() => {
        const s = replayStatements(copy.db);
        copy.db.transaction(() => {
          for (const m of expCopy.measures) s.upsertRejected.run(expCopy.key, m.key, 'out_of_range', 1);
        }).immediate();
      });
      add('JSON.parse alone', bare);
      add('parse: overlong-number scan + JSON.parse', parse);
      add('validation incl. hashing (checkBatch)', validate);
      add('  canonical hashing alone (contentHash: canonical text + crypto.hash)', hashing);
      add('    (earlier form: JSON.stringify + createHash, as before migration 0008)', earlier);
      add('    (earlier form: JSON.stringify of the canonical array alone)', stringifyOnly);
      add('    (earlier form: JSON.stringify + crypto.hash one-shot)', oneShot);
      add('  validation without hashing (difference; checkBatch builds the text while checking)', minus(validate, hashing));
      add('store transaction (real, store.responses.ingest)', tx);
      let replayTotal = ZERO;
      for (const [k, v] of Object.entries(replay)) {
        add(`  replay: ${k}`, v);
        replayTotal = plus(replayTotal, v);
      }
      add('  replay: sum of statements', replayTotal);
      add('  JS bookkeeping in the real transaction (real − replay sum)', minus(tx, replayTotal));
      add('rejected counters (own transaction, 3 upserts + commit; only when values were refused)', rejected);
      add('total parse + validation + store', plus(plus(parse, validate), tx));
      log(`profile rep ${r + 1}/${REPS}: parse ${parse.wall.toFixed(1)} ms, validate ${validate.wall.toFixed(1)} ms, tx ${tx.wall.toFixed(1)} ms (wall)`);
    }
    // Guard: the replay wrote what the real transaction wrote.
    const rowsOf = (db: Database.Database): string =>
      (db.prepare(`SELECT (SELECT count(*) FROM responses), (SELECT count(*) FROM response_values), (SELECT sum(count) FROM value_counts)`).raw().get() as number[]).join('/');
    if (rowsOf(real.db) !== rowsOf(copy.db)) throw new Error(`profile: the replay stored ${rowsOf(copy.db)} rows, the store ${rowsOf(real.db)}`);
    await real.close();
    await copy.close();
    const w = (v: Clock[]): number[] => v.map((x) => x.wall);
    const c = (v: Clock[]): number[] => v.map((x) => x.cpu);
    const rows = Object.entries(steps).map(([k, v]) => [k, fmt.ms(median(w(v))), us(median(w(v))), us(Math.min(...w(v))), us(median(c(v)))]);
    process.stdout.write(`\nPart 1 — profile of one batch of ${fmt.int(BATCH)} responses × 3 items, median of ${REPS} runs (fresh ids each run)\n\n`);
    process.stdout.write(
      table(['step', 'wall ms / batch (median)', 'wall µs / response (median)', 'wall µs / response (min)', 'CPU µs / response (median)'], rows) + '\n\n',
    );
    return Object.fromEntries(
      Object.entries(steps).map(([k, v]) => [k, { wallMedianMs: median(w(v)), wallMinMs: Math.min(...w(v)), wallUsPerResponse: (median(w(v)) * 1000) / BATCH, cpuUsPerResponse: (median(c(v)) * 1000) / BATCH }]),
    );
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

// ---------------------------------------------------------------------------------------------------------------
// Part 2: the prototype. A self-contained copy of the tables ingest touches (as in migrations/sqlite/0001_init.sql),
// with the values table in one of three layouts.

type ValuesLayout = 'today' | 'clustered' | 'clustered+response-index';
type Probe = 'per-item' | 'in-100' | 'in-500' | 'json_each';
interface Variant {
  name: string;
  layout: ValuesLayout;
  rowsPerInsert: number;
  foreignKeys: boolean;
  probe: Probe;
}

function scratchSchema(layout: ValuesLayout): string {
  const values =
    layout === 'today'
      ? `CREATE TABLE response_values (
           response_id INTEGER NOT NULL REFERENCES responses (id) ON DELETE CASCADE,
           measure_id INTEGER NOT NULL REFERENCES measures (id),
           condition_id INTEGER NOT NULL REFERENCES conditions (id),
           excluded INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
           value REAL NOT NULL,
           PRIMARY KEY (response_id, measure_id)) STRICT, WITHOUT ROWID;
         CREATE INDEX response_values_scan ON response_values (measure_id, condition_id, excluded, value);`
      : `CREATE TABLE response_values (
           measure_id INTEGER NOT NULL REFERENCES measures (id),
           condition_id INTEGER NOT NULL REFERENCES conditions (id),
           excluded INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
           value REAL NOT NULL,
           response_id INTEGER NOT NULL REFERENCES responses (id) ON DELETE CASCADE,
           PRIMARY KEY (measure_id, condition_id, excluded, value, response_id)) STRICT, WITHOUT ROWID;` +
        (layout === 'clustered+response-index' ? `CREATE INDEX response_values_by_response ON response_values (response_id);` : '');
  return `
    CREATE TABLE experiments (id INTEGER PRIMARY KEY, slug TEXT NOT NULL UNIQUE, status TEXT NOT NULL DEFAULT 'open',
      data_version INTEGER NOT NULL DEFAULT 0 CHECK (data_version >= 0)) STRICT;
    CREATE TABLE conditions (id INTEGER PRIMARY KEY, experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
      slug TEXT NOT NULL, response_count INTEGER NOT NULL DEFAULT 0 CHECK (response_count >= 0), UNIQUE (experiment_id, slug)) STRICT;
    CREATE TABLE measures (id INTEGER PRIMARY KEY, experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
      slug TEXT NOT NULL, is_integer INTEGER NOT NULL, UNIQUE (experiment_id, slug)) STRICT;
    CREATE TABLE api_keys (id INTEGER PRIMARY KEY) STRICT;
    CREATE TABLE responses (
      id INTEGER PRIMARY KEY,
      experiment_id INTEGER NOT NULL REFERENCES experiments (id) ON DELETE CASCADE,
      response_id TEXT NOT NULL,
      condition_id INTEGER NOT NULL REFERENCES conditions (id),
      respondent TEXT,
      submitted_at TEXT NOT NULL,
      received_at TEXT NOT NULL,
      excluded INTEGER NOT NULL DEFAULT 0 CHECK (excluded IN (0, 1)),
      excluded_reason TEXT,
      content_hash BLOB NOT NULL CHECK (length(content_hash) = 32),
      api_key_id INTEGER REFERENCES api_keys (id) ON DELETE SET NULL,
      UNIQUE (experiment_id, response_id)) STRICT;
    CREATE INDEX responses_by_respondent ON responses (experiment_id, respondent) WHERE respondent IS NOT NULL;
    ${values}
    CREATE TABLE value_counts (measure_id INTEGER NOT NULL REFERENCES measures (id) ON DELETE CASCADE,
      condition_id INTEGER NOT NULL REFERENCES conditions (id) ON DELETE CASCADE, excluded INTEGER NOT NULL,
      value REAL NOT NULL, count INTEGER NOT NULL CHECK (count >= 0),
      PRIMARY KEY (measure_id, condition_id, excluded, value)) STRICT, WITHOUT ROWID;
    INSERT INTO experiments (id, slug) VALUES (1, 'bench');
    INSERT INTO conditions (id, experiment_id, slug) VALUES (1, 1, 'a'), (2, 1, 'b');
    INSERT INTO measures (id, experiment_id, slug, is_integer) VALUES (1, 1, 'score', 1), (2, 1, 'amount', 0), (3, 1, 'agree', 1);`;
}

function openScratch(path: string, foreignKeys: boolean): Database.Database {
  const db = new Database(path);
  db.pragma('journal_mode = WAL');
  db.pragma('cache_size = -65536');
  db.pragma('synchronous = FULL');
  db.pragma(`foreign_keys = ${foreignKeys ? 'ON' : 'OFF'}`);
  return db;
}

interface PlainItem {
  responseId: string;
  condition: number;
  values: [number, number][];
  hash: Buffer;
}

function plainBatch(b: number): PlainItem[] {
  const out: PlainItem[] = [];
  for (let i = b * BATCH; i < (b + 1) * BATCH; i++) {
    const k = i >> 1;
    const a = (i & 1) === 0;
    const score = a ? streams.ia[k] : streams.ib[k];
    const values: [number, number][] = [[1, score], [2, a ? streams.ca[k] : streams.cb[k]], [3, 1 + (score % 7)]];
    out.push({ responseId: `r${i}`, condition: a ? 1 : 2, values, hash: createHash('sha256').update(JSON.stringify([a ? 'a' : 'b', null, values])).digest() });
  }
  return out;
}

function placeholders(rows: number, row: string): string {
  return Array.from({ length: rows }, () => row).join(', ');
}

/** Write `batches` batches with one variant; returns ms per batch and the step split of the last batches. */
interface VariantResult {
  batchMs: number[];
  cpuMs: number[];
  stepMs: Record<string, number[]>;
  stepCpu: Record<string, number[]>;
}

function runVariant(v: Variant, batches: PlainItem[][]): VariantResult {
  const dir = tempDir();
  const db = openScratch(join(dir, 'v.db'), v.foreignKeys);
  try {
    db.exec(scratchSchema(v.layout));
    const R = v.rowsPerInsert;
    const valueCols = v.layout === 'today' ? '(response_id, measure_id, condition_id, excluded, value)' : '(measure_id, condition_id, excluded, value, response_id)';
    const valueRow = v.layout === 'today' ? '(?, ?, ?, 0, ?)' : '(?, ?, 0, ?, ?)';
    const insResp = (n: number) =>
      db.prepare(`INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, content_hash, api_key_id) VALUES ${placeholders(n, '(?, ?, ?, ?, ?, ?, ?, ?, ?)')}`);
    const insVal = (n: number) => db.prepare(`INSERT INTO response_values ${valueCols} VALUES ${placeholders(n, valueRow)}`);
    const respMany = insResp(R);
    const valMany = insVal(R);
    const probeSize = v.probe === 'in-500' ? 500 : v.probe === 'in-100' ? 100 : 1;
    const probeOne = db.prepare(`SELECT content_hash FROM responses WHERE experiment_id = ? AND response_id = ?`).pluck();
    const probeIn = db.prepare(`SELECT response_id, content_hash FROM responses WHERE experiment_id = ? AND response_id IN (${placeholders(probeSize, '?')})`).raw();
    const probeJson = db.prepare(`SELECT response_id, content_hash FROM responses WHERE experiment_id = ? AND response_id IN (SELECT value FROM json_each(?))`).raw();
    const maxId = db.prepare(`SELECT coalesce(max(id), 0) FROM responses`).pluck();
    const upsertCount = db.prepare(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, 0, ?, ?)
       ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + excluded.count`,
    );
    const bumpCondition = db.prepare(`UPDATE conditions SET response_count = response_count + ? WHERE id = ?`);
    const bumpVersion = db.prepare(`UPDATE experiments SET data_version = data_version + 1 WHERE id = ? RETURNING data_version`).pluck();
    // The once-per-batch replacement of the foreign-key checks: the batch's condition and measure ids must belong
    // to the experiment (one statement each), the api key must exist; response_values.response_id points at rows
    // this very transaction inserted, so it holds by construction.
    const checkConditions = db.prepare(`SELECT count(*) FROM conditions WHERE experiment_id = ? AND id IN (SELECT value FROM json_each(?))`).pluck();
    const checkMeasures = db.prepare(`SELECT count(*) FROM measures WHERE experiment_id = ? AND id IN (SELECT value FROM json_each(?))`).pluck();
    const integer = new Set([1, 3]);
    const batchMs: number[] = [];
    const cpuMs: number[] = [];
    const stepMs: Record<string, number[]> = {};
    const stepCpu: Record<string, number[]> = {};
    let c0 = process.cpuUsage();
    let p0 = performance.now();
    const t = (name: string): void => {
      (stepMs[name] ??= []).push(performance.now() - p0);
      const c = process.cpuUsage(c0);
      (stepCpu[name] ??= []).push((c.user + c.system) / 1000);
      c0 = process.cpuUsage();
      p0 = performance.now();
    };
    const receivedAt = new Date().toISOString();
    for (const items of batches) {
      const batchCpu0 = process.cpuUsage();
      const t0 = performance.now();
      db.exec('BEGIN IMMEDIATE');
      // Idempotency.
      c0 = process.cpuUsage();
      p0 = performance.now();
      const found = new Map<string, Buffer>();
      if (v.probe === 'per-item') {
        for (const it of items) {
          const h = probeOne.get(1, it.responseId) as Buffer | undefined;
          if (h) found.set(it.responseId, h);
        }
      } else if (v.probe === 'json_each') {
        for (const [id, h] of probeJson.all(1, JSON.stringify(items.map((x) => x.responseId))) as [string, Buffer][]) found.set(id, h);
      } else {
        for (let s = 0; s < items.length; s += probeSize) {
          for (const [id, h] of probeIn.all(1, ...items.slice(s, s + probeSize).map((x) => x.responseId)) as [string, Buffer][]) found.set(id, h);
        }
      }
      if (found.size !== 0) throw new Error('prototype: every response is new');
      t('idempotency');
      // Foreign-key replacement.
      if (!v.foreignKeys) {
        const conds = [...new Set(items.map((x) => x.condition))];
        const meas = [...new Set(items.flatMap((x) => x.values.map((y) => y[0])))];
        if (checkConditions.get(1, JSON.stringify(conds)) !== conds.length || checkMeasures.get(1, JSON.stringify(meas)) !== meas.length) {
          throw new Error('prototype: batch check failed');
        }
      }
      t('batch checks');
      // Response rows.
      let next = (maxId.get() as number) + 1;
      const first = next;
      let params: unknown[] = [];
      for (const it of items) {
        params.push(next++, 1, it.responseId, it.condition, null, receivedAt, receivedAt, it.hash, null);
        if (params.length === R * 9) (respMany.run(params), (params = []));
      }
      for (let r = 0; r < params.length; r += 9) insResp(1).run(params.slice(r, r + 9));
      t('response rows');
      // Value rows and count increments.
      params = [];
      const counts = new Map<number, number>(); // key = measure·1e6 + condition·1e3 + value (values 0–100 here)
      let id = first;
      for (const it of items) {
        for (const [m, x] of it.values) {
          if (v.layout === 'today') params.push(id, m, it.condition, x);
          else params.push(m, it.condition, x, id);
          if (params.length === R * 4) (valMany.run(params), (params = []));
          if (integer.has(m)) {
            const k = m * 1e6 + it.condition * 1e3 + x;
            counts.set(k, (counts.get(k) ?? 0) + 1);
          }
        }
        id++;
      }
      for (let r = 0; r < params.length; r += 4) insVal(1).run(params.slice(r, r + 4));
      t('value rows');
      for (const [k, n] of counts) upsertCount.run(Math.floor(k / 1e6), Math.floor((k % 1e6) / 1e3), k % 1e3, n);
      bumpCondition.run(items.length / 2, 1);
      bumpCondition.run(items.length / 2, 2);
      bumpVersion.get(1);
      t('counts + counters + dataVersion');
      db.exec('COMMIT');
      t('commit');
      batchMs.push(performance.now() - t0);
      const c = process.cpuUsage(batchCpu0);
      cpuMs.push((c.user + c.system) / 1000);
    }
    // Guard: the timed code did the whole work.
    const n = batches.reduce((t, x) => t + x.length, 0);
    const got = db.prepare(`SELECT (SELECT count(*) FROM responses), (SELECT count(*) FROM response_values), (SELECT sum(count) FROM value_counts)`).raw().get() as number[];
    if (got[0] !== n || got[1] !== 3 * n || got[2] !== 2 * n) throw new Error(`prototype ${v.name}: stored ${got.join('/')} rows, expected ${n}/${3 * n}/${2 * n}`);
    return { batchMs, cpuMs, stepMs, stepCpu };
  } finally {
    db.close();
    rmSync(dir, { recursive: true, force: true });
  }
}

function prototype(): Record<string, unknown> {
  log(`prototype: preparing ${BATCHES} batches`);
  const batches = Array.from({ length: BATCHES }, (_, b) => plainBatch(b));
  const base: Variant = { name: 'today: rowid-keyed values + scan index, 100 rows / INSERT, FKs on, probe 100 ids', layout: 'today', rowsPerInsert: 100, foreignKeys: true, probe: 'in-100' };
  const variants: Variant[] = [
    base,
    { ...base, name: 'values clustered (m, c, excluded, value, response), no other index', layout: 'clustered' },
    { ...base, name: 'values clustered + narrow (response_id) index', layout: 'clustered+response-index' },
    { ...base, name: '1 row / INSERT', rowsPerInsert: 1 },
    { ...base, name: '50 rows / INSERT', rowsPerInsert: 50 },
    { ...base, name: '500 rows / INSERT', rowsPerInsert: 500 },
    { ...base, name: 'FKs off + per-batch checks', foreignKeys: false },
    { ...base, name: 'idempotency: 1 probe per item', probe: 'per-item' },
    { ...base, name: 'idempotency: 500 ids per IN list', probe: 'in-500' },
    { ...base, name: 'idempotency: 1 probe per batch (json_each)', probe: 'json_each' },
    { name: 'ALL: clustered, 500 rows / INSERT, FKs off + checks, json_each probe', layout: 'clustered', rowsPerInsert: 500, foreignKeys: false, probe: 'json_each' },
    { name: 'ALL with 1 row / INSERT', layout: 'clustered', rowsPerInsert: 1, foreignKeys: false, probe: 'json_each' },
    { name: 'ALL with 1 row / INSERT + narrow (response_id) index', layout: 'clustered+response-index', rowsPerInsert: 1, foreignKeys: false, probe: 'json_each' },
    { name: 'today but FKs off + checks, 1 row / INSERT', layout: 'today', rowsPerInsert: 1, foreignKeys: false, probe: 'in-100' },
  ];
  // Two rounds, interleaved, so that a burst of load on the shared machine hits every variant alike.
  const results = new Map<string, VariantResult>();
  for (let round = 0; round < ROUNDS; round++) {
    for (const v of variants) {
      const r = runVariant(v, batches);
      const prev = results.get(v.name);
      const dropFirst = (o: Record<string, number[]>) => Object.fromEntries(Object.entries(o).map(([k, x]) => [k, x.slice(1)]));
      if (!prev) results.set(v.name, { batchMs: r.batchMs.slice(1), cpuMs: r.cpuMs.slice(1), stepMs: dropFirst(r.stepMs), stepCpu: dropFirst(r.stepCpu) });
      else {
        prev.batchMs.push(...r.batchMs.slice(1));
        prev.cpuMs.push(...r.cpuMs.slice(1));
        for (const [k, x] of Object.entries(r.stepMs)) prev.stepMs[k].push(...x.slice(1));
        for (const [k, x] of Object.entries(r.stepCpu)) prev.stepCpu[k].push(...x.slice(1));
      }
      log(`round ${round + 1}: ${v.name}: median ${us(median(r.batchMs.slice(1)))} µs/response`);
    }
  }
  const baseUs = (median(results.get(base.name)!.batchMs) * 1000) / BATCH;
  const baseCpu = median(results.get(base.name)!.cpuMs);
  const stepNames = ['idempotency', 'batch checks', 'response rows', 'value rows', 'counts + counters + dataVersion', 'commit'];
  const rows = variants.map((v) => {
    const r = results.get(v.name)!;
    const u = (median(r.batchMs) * 1000) / BATCH;
    return [v.name, u.toFixed(2), us(Math.min(...r.batchMs)), us(median(r.cpuMs)), (baseUs / u).toFixed(2) + '×', (baseCpu / median(r.cpuMs)).toFixed(2) + '×', ...stepNames.map((s) => us(median(r.stepCpu[s])))];
  });
  process.stdout.write(
    `\nPart 2 — prototype store transaction, ${BATCHES} batches of ${fmt.int(BATCH)} × 3 items per variant, first batch dropped, ${ROUNDS} interleaved rounds; µs per response (median)\n\n`,
  );
  process.stdout.write(table(['variant', 'wall µs / resp. (median)', 'wall (min)', 'CPU µs / resp. (median)', 'speed-up wall', 'speed-up CPU', ...stepNames.map((x) => `${x} (CPU)`)], rows) + '\n\n');
  // Hashing: createHash per item vs crypto.hash one-shot, on the same canonical strings.
  const canon = batches[0].map((x) => JSON.stringify([x.condition === 1 ? 'a' : 'b', null, x.values]));
  const h1: number[] = [];
  const h2: number[] = [];
  for (let r = 0; r < 7; r++) {
    h1.push(timed(() => canon.forEach((s) => createHash('sha256').update(s, 'utf8').digest()))[1].cpu);
    h2.push(timed(() => canon.forEach((s) => oneShotHash('sha256', s, 'buffer')))[1].cpu);
  }
  process.stdout.write(table(['hash of the canonical string (no stringify)', 'CPU µs / response'], [['createHash().update().digest()', us(median(h1))], ['crypto.hash one-shot', us(median(h2))]]) + '\n\n');
  // The floor: what SQLite itself does with narrow rows on this machine (4 rows per response: 1 + 3 values), one
  // transaction per 10,000 responses, one cached single-row INSERT, no index, no foreign key, no JavaScript work
  // beyond the bind.
  const floorCpu: number[] = [];
  const floorWall: number[] = [];
  {
    const dir = tempDir();
    const db = openScratch(join(dir, 'floor.db'), false);
    try {
      db.exec(`CREATE TABLE narrow (a INTEGER NOT NULL, b INTEGER NOT NULL, v REAL NOT NULL) STRICT`);
      const ins = db.prepare(`INSERT INTO narrow (a, b, v) VALUES (?, ?, ?)`);
      const tx = db.transaction((items: PlainItem[], first: number) => {
        for (let i = 0; i < items.length; i++) {
          ins.run(first + i, items[i].condition, 0);
          for (const [m, x] of items[i].values) ins.run(first + i, m, x);
        }
      });
      for (let b = 0; b < batches.length; b++) {
        const [, c] = timed(() => tx.immediate(batches[b], b * BATCH));
        if (b > 0) (floorCpu.push(c.cpu), floorWall.push(c.wall));
      }
    } finally {
      db.close();
      rmSync(dir, { recursive: true, force: true });
    }
  }
  process.stdout.write(
    table(
      ['floor: 4 narrow rows per response into a plain rowid table, 1 row / INSERT, one transaction per batch', 'wall µs / response', 'CPU µs / response'],
      [['(no index, no foreign key, commit included)', us(median(floorWall)), us(median(floorCpu))]],
    ) + '\n\n',
  );
  return {
    floorUsPerResponse: { wall: (median(floorWall) * 1000) / BATCH, cpu: (median(floorCpu) * 1000) / BATCH },
    variants: variants.map((v) => ({ ...v, usPerResponse: (median(results.get(v.name)!.batchMs) * 1000) / BATCH, cpuUsPerResponse: (median(results.get(v.name)!.cpuMs) * 1000) / BATCH, steps: Object.fromEntries(stepNames.map((s) => [s, { wallUs: (median(results.get(v.name)!.stepMs[s]) * 1000) / BATCH, cpuUs: (median(results.get(v.name)!.stepCpu[s]) * 1000) / BATCH }])) })),
    hashUs: { createHash: (median(h1) * 1000) / BATCH, oneShot: (median(h2) * 1000) / BATCH },
  };
}

async function main(): Promise<void> {
  const startedAt = new Date().toISOString();
  const loadStart = loadAverage();
  const t0 = performance.now();
  log(`load average ${loadStart}`);
  const profiled = await profile();
  const proto = SKIP_PROTOTYPE ? null : prototype();
  const loadEnd = loadAverage();
  process.stdout.write(`load average (1, 5, 15 min): start ${loadStart}, end ${loadEnd}; ${os.cpus().length} cores; ${((performance.now() - t0) / 1000).toFixed(1)} s\n`);
  const file = writeResults('profile-ingest', { startedAt, finishedAt: new Date().toISOString(), loadAverage: { start: loadStart, end: loadEnd }, reps: REPS, batches: BATCHES, profile: profiled, prototype: proto });
  log(`wrote ${file}`);
}

await main();
