/**
 * PostgreSQL against the embedded store: `npx tsx tests/bench/postgres.ts [--seconds 8] [--sizes 100000,1000000] [--minutes 12]`
 * (needs `npm run build` first and PostgreSQL on 127.0.0.1:5432; not part of npm test).
 *
 * 1. Ingest over HTTP with real processes of the built server (dist/server/main.js, rate limit off):
 *    embedded SQLite (one node), PostgreSQL one node, PostgreSQL two nodes (clients spread over both).
 *    Single answers: 32 clients each posting one response at a time (each its own responseId) for --seconds;
 *    batches: 4 clients posting batches of 500. Prints acknowledged requests/s and answers/s.
 * 2. Comparison latency on both stores, in-process (buildApp + inject, so no network), for an integer item (0–10)
 *    and a continuous one (0–200) with N answers per condition for each N of --sizes: cold (store reopened, empty
 *    caches), warm (the same request again, median of 5), after new data (one response posted, then the
 *    comparison, median of 5). Data are loaded straight through the store in batches of 5,000.
 * Bounded: a scenario that would start after --minutes is skipped and said so. All data invented.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { contentHash } from '../../server/services/ingest/validate.js';
import { openPostgresStore } from '../../server/store/postgres/store.js';
import { openSqliteStore } from '../../server/store/sqlite/store.js';
import type { ExperimentRecord, Store, ValidResponse } from '../../server/store/types.js';
import { Rng } from '../helpers/rng.js';
import { ADMIN_SECRET, AUTH, HAVE_DIST, startBuiltServer, type BuiltServer } from '../reliability/built-server.js';
import { createTestDatabase, postgresAvailable } from '../store/postgres/pg-test-db.js';

const arg = (name: string, fallback: string) => {
  const i = process.argv.indexOf(name);
  return i >= 0 && process.argv[i + 1] ? process.argv[i + 1] : fallback;
};
const SECONDS = Number(arg('--seconds', '8'));
const SIZES = arg('--sizes', '100000,1000000').split(',').map(Number);
const DEADLINE = Date.now() + Number(arg('--minutes', '12')) * 60_000;
const NOW = '2027-03-01T12:00:00.000Z';
const log = (s: string) => process.stderr.write(`${s}\n`);
const out = (s: string) => process.stdout.write(`${s}\n`);
const inTime = (what: string) => {
  if (Date.now() < DEADLINE) return true;
  out(`${what}: skipped (time budget --minutes used up)`);
  return false;
};

const DEFINITION = {
  id: 'bench-water',
  title: 'Invented water-utility survey (benchmark)',
  conditions: [
    { id: 'bill-first', label: 'Bill first' },
    { id: 'service-first', label: 'Service first' },
  ],
  measures: [
    { id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true },
    { id: 'fair_price', label: 'Fair monthly price', min: 0, max: 200, integer: false, required: true },
  ],
};

// ------------------------------------------------------------------------------------------------ 1. ingest

async function post(base: string, path: string, body: unknown): Promise<number> {
  const r = await fetch(`${base}${path}`, { method: 'POST', headers: { ...AUTH, 'content-type': 'application/json' }, body: JSON.stringify(body) });
  await r.arrayBuffer();
  return r.status;
}

function answer(i: number, prefix: string) {
  return { responseId: `${prefix}-${i}`, condition: i % 2 === 0 ? 'bill-first' : 'service-first', values: { satisfaction: (i * 7) % 11, fair_price: ((i * 37) % 2000) / 10 } };
}

async function drive(nodes: BuiltServer[], clients: number, seconds: number, send: (base: string, n: number) => Promise<number>): Promise<number> {
  const until = Date.now() + seconds * 1000;
  let next = 0;
  let acknowledged = 0;
  await Promise.all(
    Array.from({ length: clients }, async (_, c) => {
      const base = nodes[c % nodes.length].base;
      while (Date.now() < until) {
        const got = await send(base, next++); // not `acknowledged += await …`: that reads the sum before the await
        acknowledged += got;
      }
    }),
  );
  return acknowledged;
}

async function ingestScenario(name: string, env: Record<string, string>, nodeCount: number): Promise<void> {
  if (!inTime(`ingest ${name}`)) return;
  const nodes: BuiltServer[] = [];
  try {
    for (let i = 0; i < nodeCount; i++) nodes.push(await startBuiltServer(env.SPLITBALLOT_DB ?? '/nonexistent/unused.db', env));
    if ((await post(nodes[0].base, '/v1/experiments', { ...DEFINITION, plannedPerCondition: null })) !== 201) throw new Error('experiment not created');
    const path = `/v1/experiments/${DEFINITION.id}/responses`;
    const singles = await drive(nodes, 32, SECONDS, async (base, n) => ((await post(base, path, answer(n, 's'))) === 201 ? 1 : 0));
    const batchRows = await drive(nodes, 4, SECONDS, async (base, n) =>
      (await post(base, `${path}/batch`, { responses: Array.from({ length: 500 }, (_, k) => answer(n * 500 + k, 'b')) })) === 201 ? 500 : 0,
    );
    out(`ingest ${name.padEnd(24)} single answers: ${Math.round(singles / SECONDS).toLocaleString('en-US').padStart(6)} req/s   batches of 500: ${Math.round(batchRows / SECONDS).toLocaleString('en-US').padStart(7)} answers/s`);
  } finally {
    for (const n of nodes) n.child.kill('SIGTERM');
    await Promise.all(nodes.map((n) => n.exited));
  }
}

// ------------------------------------------------------------------------------------------------ 2. comparisons

function item(e: ExperimentRecord, i: number, rng: Rng): ValidResponse {
  const c = e.conditions[i % 2];
  const sat = Math.floor(rng.uniform() * 11);
  const price = Math.round(rng.uniform() * 20000) / 100;
  return {
    responseId: `r-${i}`,
    generated: false,
    conditionKey: c.key,
    respondent: null,
    submittedAt: NOW,
    values: new Map([
      [e.measures[0].key, sat],
      [e.measures[1].key, price],
    ]),
    contentHash: contentHash(c.id, null, [
      ['satisfaction', sat],
      ['fair_price', price],
    ]),
  } as ValidResponse;
}

async function load(store: Store, slug: string, perCondition: number): Promise<void> {
  const created = await store.experiments.create({ ...DEFINITION, id: slug, plannedPerCondition: null, alpha: 0.05, thankYouUrl: null });
  if (created.kind !== 'created') throw new Error(`not created: ${created.kind}`);
  const e = created.experiment;
  const rng = new Rng(perCondition);
  const total = perCondition * 2;
  const started = Date.now();
  for (let i = 0; i < total; i += 5000) {
    const items = Array.from({ length: Math.min(5000, total - i) }, (_, k) => item(e, i + k, rng));
    const r = await store.responses.ingest(e.key, items, NOW, null);
    if (r.kind !== 'stored') throw new Error(r.kind);
  }
  log(`loaded ${total.toLocaleString('en-US')} responses into ${slug} in ${((Date.now() - started) / 1000).toFixed(0)} s`);
}

const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];

async function comparisonScenario(engine: string, open: () => Promise<Store>, perCondition: number): Promise<void> {
  if (!inTime(`comparisons ${engine} ${perCondition}`)) return;
  const slug = `bench-${perCondition}`;
  let store = await open();
  const admin = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(admin), scope: 'admin', experimentKey: null, label: 'bench', origin: 'cli', createdAt: NOW });
  await load(store, slug, perCondition);
  await store.close();
  store = await open(); // cold: nothing cached in this process
  const app = buildApp({ port: 0, host: '127.0.0.1', dbPath: '/nonexistent/unused.db', adminKeyHash: null, corsOrigins: [], logLevel: 'silent' }, { store, logStream: { write: () => undefined } });
  await app.ready();
  const headers = { authorization: `Bearer ${admin}` };
  const time = async (url: string) => {
    const t = performance.now();
    const r = await app.inject({ method: 'GET', url, headers });
    if (r.statusCode !== 200) throw new Error(`${url}: ${r.statusCode} ${r.body.slice(0, 200)}`);
    return performance.now() - t;
  };
  let extra = 0;
  try {
    for (const measure of ['satisfaction', 'fair_price']) {
      const url = `/v1/experiments/${slug}/comparisons/${measure}`;
      const cold = await time(url);
      const warmRuns: number[] = [];
      for (let i = 0; i < 5; i++) warmRuns.push(await time(url));
      const warm = median(warmRuns);
      const fresh: number[] = [];
      for (let i = 0; i < 5; i++) {
        const p = await app.inject({ method: 'POST', url: `/v1/experiments/${slug}/responses`, headers, payload: answer(extra++, 'new') });
        if (p.statusCode !== 201) throw new Error(`post: ${p.statusCode}`);
        fresh.push(await time(url));
      }
      out(
        `compare ${engine.padEnd(10)} ${measure === 'satisfaction' ? 'integer   ' : 'continuous'} ${perCondition.toExponential(0).padStart(5)}/condition: ` +
          `cold ${cold.toFixed(1).padStart(7)} ms   warm ${warm.toFixed(2).padStart(6)} ms   after new data ${median(fresh).toFixed(1).padStart(6)} ms`,
      );
    }
  } finally {
    await app.close();
    await store.close();
  }
}

// ------------------------------------------------------------------------------------------------ run

if (!HAVE_DIST) throw new Error('run `npm run build` first (the ingest part starts dist/server/main.js)');
if (!(await postgresAvailable('the PostgreSQL benchmark'))) process.exit(1);
out(`tests/bench/postgres.ts — ${new Date().toISOString()}; --seconds ${SECONDS}, --sizes ${SIZES.join(',')}; invented data`);
const dir = mkdtempSync(join(tmpdir(), 'sb-bench-pg-'));
const dbs: Awaited<ReturnType<typeof createTestDatabase>>[] = [];
try {
  const base = { SPLITBALLOT_RATE_LIMIT_INGEST: '0', SPLITBALLOT_ADMIN_KEY: ADMIN_SECRET };
  await ingestScenario('embedded SQLite, 1 node', { ...base, SPLITBALLOT_DB: join(dir, 'ingest.db') }, 1);
  for (const nodes of [1, 2]) {
    const db = await createTestDatabase();
    dbs.push(db);
    await ingestScenario(`PostgreSQL, ${nodes} node${nodes === 1 ? '' : 's'}`, { ...base, SPLITBALLOT_DATABASE_URL: db.url }, nodes);
  }
  const cmpDb = await createTestDatabase();
  dbs.push(cmpDb);
  for (const n of SIZES) {
    await comparisonScenario('SQLite', async () => openSqliteStore(join(dir, 'compare.db')), n);
    await comparisonScenario('PostgreSQL', async () => openPostgresStore(cmpDb.url), n);
  }
} finally {
  for (const db of dbs) await db.drop().catch(() => undefined);
  rmSync(dir, { recursive: true, force: true });
}
