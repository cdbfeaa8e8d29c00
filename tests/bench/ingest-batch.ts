/**
 * Benchmark 2 (issue 8): batch ingest over HTTP.
 *
 *   npx tsx tests/bench/ingest-batch.ts [--quick] [--responses 1000000]
 *
 * 1,000,000 responses (200,000 with --quick) with three items each (an integer 0–100 item, a continuous item and
 * an integer 1–7 item; invented values from tests/bench/data.ts), in batches of 10,000, POSTed to
 * /v1/experiments/{id}/responses/batch of the built server (child process, temp DB file, 127.0.0.1) with two
 * requests in flight. Every response carries a client responseId, so idempotency is checked for each. The bodies
 * are made before the clock starts. Target: ≥ 100,000 responses/s.
 *
 * Then a profile of the batch path in-process (same code, no HTTP) on one 10,000-response body: the JSON parse
 * with the overlong-number scan, validation (checkBatch: schema, scale, content hash), and the store's ONE
 * transaction (idempotency lookups, inserts, count upserts, counters, commit).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import { join } from 'node:path';
import { openSqliteStore } from '../../server/store/sqlite/store.js';
import { checkBatch } from '../../server/services/ingest/validate.js';
import { parseJsonBody } from '../../server/http/json-body.js';
import { ensureData, readStream } from './data.js';
import {
  abExperiment,
  api,
  argNum,
  batchJson,
  DATA_DIR,
  expectStatus,
  finish,
  fmt,
  logger,
  machine,
  median,
  newServiceEnv,
  percentile,
  QUICK,
  responseJson,
  sendBatches,
  startService,
  table,
} from './harness.js';

const log = logger('ingest-batch');
const TOTAL = argNum('--responses', QUICK ? 200_000 : 1_000_000);
const BATCH = 10_000;
const TARGET = 100_000;

const EXPERIMENT = abExperiment('bench-batch', 'Batch ingest benchmark (invented data)', [
  { id: 'agree', label: 'Agreement 1–7', min: 1, max: 7, integer: true, required: true },
]);

function makeBodies(total: number): string[] {
  const half = Math.ceil(total / 2);
  const ia = readStream(DATA_DIR, 'integer-a', half);
  const ib = readStream(DATA_DIR, 'integer-b', half);
  const ca = readStream(DATA_DIR, 'continuous-a', half);
  const cb = readStream(DATA_DIR, 'continuous-b', half);
  const bodies: string[] = [];
  for (let start = 0; start < total; start += BATCH) {
    const items: string[] = [];
    for (let i = start; i < Math.min(total, start + BATCH); i++) {
      const k = i >> 1;
      const a = (i & 1) === 0;
      const score = a ? ia[k] : ib[k];
      items.push(responseJson(`r${i}`, a ? 'a' : 'b', { score, amount: a ? ca[k] : cb[k], agree: 1 + (score % 7) }));
    }
    bodies.push(batchJson(items));
  }
  return bodies;
}

/** In-process profile of one batch body: parse+scan, validation, the store's transaction (ms, median of reps). */
async function profile(body: string, reps: number): Promise<Record<string, number>> {
  const dir = mkdtempSync(join(os.tmpdir(), 'splitballot-bench-profile-'));
  try {
    const store = openSqliteStore(join(dir, 'p.db'));
    await store.experiments.create({ ...EXPERIMENT, plannedPerCondition: null, thankYouUrl: null });
    const experiment = (await store.experiments.getBySlug(EXPERIMENT.id))!;
    const steps: Record<string, number[]> = { scan_and_parse: [], validate: [], store_transaction: [], total: [] };
    for (let r = 0; r < reps; r++) {
      const tag = `p${r}-`;
      const text = body.replaceAll('"responseId":"r', `"responseId":"${tag}`);
      const t0 = performance.now();
      const parsed = parseJsonBody(text, JSON.parse);
      const t1 = performance.now();
      const checked = checkBatch(experiment, parsed, new Date().toISOString());
      const t2 = performance.now();
      if (checked.errors.length > 0) throw new Error(`profile: ${JSON.stringify(checked.errors.slice(0, 3))}`);
      const outcome = await store.responses.ingest(experiment.key, checked.valid, new Date().toISOString(), null);
      const t3 = performance.now();
      if (outcome.kind !== 'stored') throw new Error(`profile: ${outcome.kind}`);
      steps.scan_and_parse.push(t1 - t0);
      steps.validate.push(t2 - t1);
      steps.store_transaction.push(t3 - t2);
      steps.total.push(t3 - t0);
    }
    await store.close();
    return Object.fromEntries(Object.entries(steps).map(([k, v]) => [k, median(v)]));
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

async function main(): Promise<void> {
  const started = new Date().toISOString();
  const m0 = machine();
  ensureData(DATA_DIR, log);
  log(`making ${fmt.int(TOTAL)} responses in ${Math.ceil(TOTAL / BATCH)} batches of ${fmt.int(BATCH)}`);
  const bodies = makeBodies(TOTAL);
  const bodyMb = bodies.reduce((s, b) => s + b.length, 0) / 1e6;

  const env = newServiceEnv('batch');
  let sent: { ms: number[]; totalMs: number };
  let rows = 0;
  try {
    const s = await startService(env);
    try {
      expectStatus(await api(s.url, 'POST', '/v1/experiments', env.adminKey, EXPERIMENT), [201], 'create experiment');
      log('sending');
      sent = await sendBatches(s.url, EXPERIMENT.id, env.adminKey, bodies, bodies.length, 2, (d) => {
        if (d % 10 === 0) log(`${fmt.int(Math.min(TOTAL, d * BATCH))} responses`);
      });
      const e = await api<{ counts: { responses: number } }>(s.url, 'GET', `/v1/experiments/${EXPERIMENT.id}`, env.adminKey);
      rows = e.body.counts?.responses ?? 0;
    } finally {
      await s.stop();
    }
  } finally {
    env.cleanup();
  }
  const perSecond = TOTAL / (sent.totalMs / 1000);
  log('profiling one batch in-process');
  const prof = await profile(bodies[0], QUICK ? 3 : 5);

  process.stdout.write(`\nBenchmark 2 — batch ingest, ${fmt.int(TOTAL)} responses × 3 items, batches of ${fmt.int(BATCH)}, 2 in flight (${bodyMb.toFixed(0)} MB of JSON)\n\n`);
  process.stdout.write(
    table(
      ['responses', 'seconds', 'responses/s', 'batch p50 ms', 'batch p99 ms', 'stored (server count)'],
      [[fmt.int(TOTAL), (sent.totalMs / 1000).toFixed(1), fmt.int(perSecond), fmt.ms(median(sent.ms)), fmt.ms(percentile(sent.ms, 99)), fmt.int(rows)]],
    ) + '\n\n',
  );
  process.stdout.write('Profile of one 10,000-response batch in-process (median ms; no HTTP):\n\n');
  process.stdout.write(
    table(
      ['scan + JSON.parse', 'validate (schema, scale, hash)', 'store transaction', 'total', '→ responses/s'],
      [[fmt.ms(prof.scan_and_parse), fmt.ms(prof.validate), fmt.ms(prof.store_transaction), fmt.ms(prof.total), fmt.int(BATCH / (prof.total / 1000))]],
    ) + '\n\n',
  );
  const met = perSecond >= TARGET && rows === TOTAL;
  const summary = `ingest-batch: ${fmt.int(perSecond)} responses/s over HTTP (target ≥ ${fmt.int(TARGET)}) — ${met ? 'MET' : 'MISSED'}`;
  finish('ingest-batch', log, {
    startedAt: started,
    finishedAt: new Date().toISOString(),
    machine: { ...m0, loadAverageEnd: machine().loadAverage },
    responses: TOTAL,
    batchSize: BATCH,
    inFlight: 2,
    bodyMegabytes: bodyMb,
    seconds: sent.totalMs / 1000,
    responsesPerSecond: perSecond,
    batchMs: { median: median(sent.ms), p99: percentile(sent.ms, 99) },
    storedCount: rows,
    profileMs: prof,
    target: TARGET,
    met,
    summary,
  });
}

await main();
