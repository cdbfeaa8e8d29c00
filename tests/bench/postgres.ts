/**
 * PostgreSQL against the embedded store:
 * `npx tsx tests/bench/postgres.ts [--seconds 8] [--sizes 100000,1000000] [--minutes 12] [--only ingest|comparisons] [--rounds 1]
 *   [--experiments 1] [--warm 200]`
 * (needs `npm run build` first and PostgreSQL on 127.0.0.1:5432; not part of npm test).
 *
 * 1. Ingest over HTTP with real processes of the built server (dist/server/main.js, rate limit off):
 *    embedded SQLite (one node), PostgreSQL one node, PostgreSQL two nodes (clients spread over both).
 *    Single answers: 32 clients each posting one response at a time (each its own responseId) for --seconds;
 *    batches: 4 clients posting batches of 500. Prints acknowledged requests/s and answers/s.
 *    Each ingest phase also prints where the time went (CPU of each process, write transactions, lock waits).
 * 2. Comparison latency on both stores, in-process (buildApp + inject, so no network), for an integer item (0–10)
 *    and a continuous one (0–200) with N answers per condition for each N of --sizes: cold (store reopened, empty
 *    caches), after new data (one response posted, then the comparison, median of 5), then warm (the same request
 *    again, a cache hit validated against the database): --warm requests per store, SQLite and PostgreSQL
 *    interleaved one by one so both see the same load, with the statements and pool checkouts of one warm request
 *    on PostgreSQL. Data are loaded straight through the store in batches of 5,000.
 * Bounded: a scenario that would start after --minutes is skipped and said so. All data invented.
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import pgModule from 'pg';
import type pg from 'pg';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { contentHash } from '../../server/services/ingest/validate.js';
import { openPostgresStore, type PostgresStore } from '../../server/store/postgres/store.js';
import { openSqliteStore } from '../../server/store/sqlite/store.js';
import type { ExperimentRecord, Store, ValidResponse } from '../../server/store/types.js';
import { Rng } from '../helpers/rng.js';
import { ADMIN_SECRET, AUTH, HAVE_DIST, startBuiltServer, type BuiltServer } from '../reliability/built-server.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';

const arg = (name: string, fallback: string) => {
  const i = process.argv.indexOf(name);
  return i >= 0 && process.argv[i + 1] ? process.argv[i + 1] : fallback;
};
const SECONDS = Number(arg('--seconds', '8'));
const SIZES = arg('--sizes', '100000,1000000').split(',').map(Number);
/** --only ingest | comparisons: run one part. */
const ONLY = arg('--only', '');
const ROUNDS = Number(arg('--rounds', '1'));
/** Experiments the ingest clients write to (request n to experiment n mod K). */
const EXPERIMENTS = Number(arg('--experiments', '1'));
/** Warm requests per store and item (interleaved). */
const WARM_ROUNDS = Number(arg('--warm', '200'));
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

// Where the time goes during an ingest phase: CPU seconds of each node process, of this driver, of the PostgreSQL
// backends serving the bench database and of the whole machine (every process, other work included), from /proc;
// write transactions of the phase (distinct xmin of the responses it stored: one per group commit or batch), and
// backends waiting for a lock, sampled every 25 ms from pg_stat_activity (on the experiment's row: ingest
// transactions of other groups and nodes queue there).
const CLOCK_TICKS = 100; // USER_HZ on Linux
function processCpuSeconds(pid: number): number {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return (Number(fields[11]) + Number(fields[12])) / CLOCK_TICKS; // utime, stime
  } catch {
    return 0; // the process has ended
  }
}
function machineCpu(): { busy: number; total: number } {
  const f = readFileSync('/proc/stat', 'utf8').split('\n')[0].trim().split(/\s+/).slice(1).map(Number);
  const total = f.slice(0, 8).reduce((a, b) => a + b, 0);
  return { busy: (total - f[3] - f[4]) / CLOCK_TICKS, total: total / CLOCK_TICKS };
}

interface PhaseProfile {
  nodeCpu: number[];
  driverCpu: number;
  pgCpu: number | null;
  machineBusy: number;
  machineCores: number;
  commits: number | null;
  lockWaiting: number | null;
  active: number | null;
}

async function profiled(nodes: BuiltServer[], admin: pg.Client | null, prefix: string, run: () => Promise<number>): Promise<{ acknowledged: number; seconds: number; profile: PhaseProfile }> {
  const backends = async () =>
    admin ? (await admin.query<{ pid: number }>(`SELECT pid FROM pg_stat_activity WHERE datname = current_database() AND pid <> pg_backend_pid()`)).rows.map((r) => r.pid) : [];
  const transactions = async () =>
    admin ? Number((await admin.query(`SELECT count(DISTINCT xmin::text) AS n FROM responses WHERE response_id LIKE $1`, [`${prefix}-%`])).rows[0].n) : 0;
  const pgBefore = new Map((await backends()).map((pid) => [pid, processCpuSeconds(pid)]));
  const nodeBefore = nodes.map((n) => processCpuSeconds(n.child.pid!));
  const driverBefore = process.cpuUsage();
  const machineBefore = machineCpu();
  const started = performance.now();
  let samples = 0;
  let waiting = 0;
  let active = 0;
  let sampling = admin !== null;
  const sampler = (async () => {
    while (sampling) {
      const r = await admin!.query<{ waiting: number; active: number }>(
        `SELECT count(*) FILTER (WHERE wait_event_type = 'Lock')::int AS waiting, count(*) FILTER (WHERE state = 'active')::int AS active
         FROM pg_stat_activity WHERE datname = current_database() AND pid <> pg_backend_pid()`,
      );
      samples++;
      waiting += r.rows[0].waiting;
      active += r.rows[0].active;
      await new Promise((resolve) => setTimeout(resolve, 25));
    }
  })();
  const acknowledged = await run();
  sampling = false;
  await sampler;
  const seconds = (performance.now() - started) / 1000;
  const machineAfter = machineCpu();
  const driver = process.cpuUsage(driverBefore);
  let pgCpu = 0;
  for (const pid of await backends()) pgCpu += processCpuSeconds(pid) - (pgBefore.get(pid) ?? 0);
  return {
    acknowledged,
    seconds,
    profile: {
      nodeCpu: nodes.map((n, i) => processCpuSeconds(n.child.pid!) - nodeBefore[i]),
      driverCpu: (driver.user + driver.system) / 1e6,
      pgCpu: admin ? pgCpu : null,
      machineBusy: machineAfter.busy - machineBefore.busy,
      machineCores: (machineAfter.total - machineBefore.total) / seconds,
      commits: admin ? await transactions() : null,
      lockWaiting: admin && samples > 0 ? waiting / samples : null,
      active: admin && samples > 0 ? active / samples : null,
    },
  };
}

function describeProfile(p: PhaseProfile, seconds: number, requests: number): string {
  const cores = (cpu: number) => (cpu / seconds).toFixed(2);
  const parts = [
    `CPU in cores: node${p.nodeCpu.length > 1 ? 's' : ''} ${p.nodeCpu.map(cores).join(' + ')}`,
    p.pgCpu === null ? null : `PostgreSQL backends ${cores(p.pgCpu)}`,
    `driver ${cores(p.driverCpu)}`,
    `whole machine ${cores(p.machineBusy)} of ${p.machineCores.toFixed(1)}`,
    p.commits === null ? null : `${Math.round(p.commits / seconds)} write transactions/s (${(requests / Math.max(1, p.commits)).toFixed(1)} requests each)`,
    p.lockWaiting === null ? null : `backends waiting for a lock ${p.lockWaiting.toFixed(2)}, active ${p.active!.toFixed(2)} (mean of samples)`,
  ];
  return parts.filter((x) => x !== null).join('; ');
}

async function ingestScenario(name: string, env: Record<string, string>, nodeCount: number, db: TestDatabase | null): Promise<void> {
  if (!inTime(`ingest ${name}`)) return;
  const nodes: BuiltServer[] = [];
  const admin = db ? await db.admin() : null;
  try {
    for (let i = 0; i < nodeCount; i++) nodes.push(await startBuiltServer(env.SPLITBALLOT_DB ?? '/nonexistent/unused.db', env));
    // --experiments K: K experiments, request n goes to experiment n mod K (1: every client writes to one).
    const paths: string[] = [];
    for (let k = 0; k < EXPERIMENTS; k++) {
      const id = EXPERIMENTS === 1 ? DEFINITION.id : `${DEFINITION.id}-${k}`;
      if ((await post(nodes[0].base, '/v1/experiments', { ...DEFINITION, id, plannedPerCondition: null })) !== 201) throw new Error('experiment not created');
      paths.push(`/v1/experiments/${id}/responses`);
    }
    const path = (n: number) => paths[n % paths.length];
    const singles = await profiled(nodes, admin, 's', () => drive(nodes, 32, SECONDS, async (base, n) => ((await post(base, path(n), answer(n, 's'))) === 201 ? 1 : 0)));
    const batches = await profiled(nodes, admin, 'b', () =>
      drive(nodes, 4, SECONDS, async (base, n) =>
        (await post(base, `${path(n)}/batch`, { responses: Array.from({ length: 500 }, (_, k) => answer(n * 500 + k, 'b')) })) === 201 ? 500 : 0,
      ),
    );
    out(
      `ingest ${name.padEnd(24)} single answers: ${Math.round(singles.acknowledged / SECONDS).toLocaleString('en-US').padStart(6)} req/s   batches of 500: ${Math.round(batches.acknowledged / SECONDS).toLocaleString('en-US').padStart(7)} answers/s`,
    );
    out(`   singles: ${describeProfile(singles.profile, singles.seconds, singles.acknowledged)}`);
    out(`   batches: ${describeProfile(batches.profile, batches.seconds, batches.acknowledged / 500)}`);
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
    weight: null,
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

interface ComparisonEnv {
  engine: string;
  app: ReturnType<typeof buildApp>;
  store: Store;
  headers: Record<string, string>;
  slug: string;
}

/** Load, then cold and after-new-data timings; the app stays open for the warm phase (closeEnv closes it). */
async function comparisonScenario(engine: string, open: () => Promise<Store>, perCondition: number): Promise<ComparisonEnv | null> {
  if (!inTime(`comparisons ${engine} ${perCondition}`)) return null;
  const slug = `bench-${perCondition}`;
  let store = await open();
  const admin = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(admin), scope: 'admin', experimentKey: null, label: 'bench', origin: 'cli', createdAt: NOW });
  await load(store, slug, perCondition);
  await store.close();
  store = await open(); // cold: nothing cached in this process
  const app = buildApp({ port: 0, host: '127.0.0.1', dbPath: '/nonexistent/unused.db', adminKeyHash: null, corsOrigins: [], logLevel: 'silent' }, { store, logStream: { write: () => undefined } });
  await app.ready();
  const env: ComparisonEnv = { engine, app, store, headers: { authorization: `Bearer ${admin}` }, slug };
  let extra = 0;
  try {
    for (const measure of MEASURES) {
      const url = `/v1/experiments/${slug}/comparisons/${measure}`;
      const cold = await timed(env, url);
      const fresh: number[] = [];
      for (let i = 0; i < 5; i++) {
        const p = await app.inject({ method: 'POST', url: `/v1/experiments/${slug}/responses`, headers: env.headers, payload: answer(extra++, 'new') });
        if (p.statusCode !== 201) throw new Error(`post: ${p.statusCode}`);
        fresh.push(await timed(env, url));
      }
      out(
        `compare ${engine.padEnd(10)} ${measure === 'satisfaction' ? 'integer   ' : 'continuous'} ${perCondition.toExponential(0).padStart(5)}/condition: ` +
          `cold ${cold.toFixed(1).padStart(7)} ms   after new data ${median(fresh).toFixed(1).padStart(6)} ms (median of 5)`,
      );
    }
    return env;
  } catch (err) {
    await closeEnv(env);
    throw err;
  }
}

const MEASURES = ['satisfaction', 'fair_price'];

async function timed(env: ComparisonEnv, url: string): Promise<number> {
  const t = performance.now();
  const r = await env.app.inject({ method: 'GET', url, headers: env.headers });
  if (r.statusCode !== 200) throw new Error(`${url}: ${r.statusCode} ${r.body.slice(0, 200)}`);
  return performance.now() - t;
}

async function closeEnv(env: ComparisonEnv): Promise<void> {
  await env.app.close();
  await env.store.close();
}

// Statements sent to PostgreSQL and pool checkouts, counted around one warm request.
let statementsSent = 0;
const clientQuery = pgModule.Client.prototype.query;
pgModule.Client.prototype.query = function countedQuery(this: pgModule.Client, ...args: unknown[]) {
  statementsSent++;
  return (clientQuery as (...a: unknown[]) => unknown).apply(this, args);
} as typeof clientQuery;

/**
 * Warm: the same comparison again (a cache hit validated against the database), the two stores' requests
 * interleaved one by one (`WARM_ROUNDS` each), so both see the same machine load; medians and their ratio. On
 * PostgreSQL the statements and pool checkouts of one warm request are counted too.
 */
async function warmPhase(sqlite: ComparisonEnv, postgres: ComparisonEnv, perCondition: number): Promise<void> {
  const pool = (postgres.store as PostgresStore).database.pool;
  let checkouts = 0;
  const onAcquire = () => checkouts++;
  pool.on('acquire', onAcquire);
  try {
    for (const measure of MEASURES) {
      const url = (env: ComparisonEnv) => `/v1/experiments/${env.slug}/comparisons/${measure}`;
      const runs: [number[], number[]] = [[], []];
      for (let i = 0; i < WARM_ROUNDS; i++) {
        runs[0].push(await timed(sqlite, url(sqlite)));
        runs[1].push(await timed(postgres, url(postgres)));
      }
      const [a, b] = runs.map((r) => [...r].sort((x, y) => x - y));
      const q = (xs: number[], f: number) => xs[Math.floor((xs.length - 1) * f)];
      statementsSent = 0;
      checkouts = 0;
      await timed(postgres, url(postgres));
      const statements = statementsSent;
      const taken = checkouts;
      out(
        `warm    ${measure === 'satisfaction' ? 'integer   ' : 'continuous'} ${perCondition.toExponential(0).padStart(5)}/condition: ` +
          `SQLite ${q(a, 0.5).toFixed(2)} ms (quartiles ${q(a, 0.25).toFixed(2)}–${q(a, 0.75).toFixed(2)})   PostgreSQL ${q(b, 0.5).toFixed(2)} ms ` +
          `(quartiles ${q(b, 0.25).toFixed(2)}–${q(b, 0.75).toFixed(2)})   ratio ${(q(b, 0.5) / q(a, 0.5)).toFixed(2)}   ` +
          `PostgreSQL statements per warm request ${statements}, pool checkouts ${taken}`,
      );
    }
  } finally {
    pool.off('acquire', onAcquire);
  }
}

// ------------------------------------------------------------------------------------------------ run

if (!HAVE_DIST) throw new Error('run `npm run build` first (the ingest part starts dist/server/main.js)');
if (!(await postgresAvailable('the PostgreSQL benchmark'))) process.exit(1);
out(
  `tests/bench/postgres.ts — ${new Date().toISOString()}; --seconds ${SECONDS}, --sizes ${SIZES.join(',')}, --experiments ${EXPERIMENTS}, ` +
    `--rounds ${ROUNDS}, --warm ${WARM_ROUNDS}${ONLY ? `, --only ${ONLY}` : ''}; invented data`,
);
const dir = mkdtempSync(join(tmpdir(), 'sb-bench-pg-'));
const dbs: Awaited<ReturnType<typeof createTestDatabase>>[] = [];
try {
  const base = { SPLITBALLOT_RATE_LIMIT_INGEST: '0', SPLITBALLOT_ADMIN_KEY: ADMIN_SECRET };
  if (!ONLY || ONLY === 'ingest') await ingestScenario('embedded SQLite, 1 node', { ...base, SPLITBALLOT_DB: join(dir, 'ingest.db') }, 1, null);
  // --rounds N repeats the PostgreSQL one-node / two-node pair (each on a fresh database), so the ratio can be
  // taken within each round on a machine whose load changes from minute to minute.
  for (let round = 0; round < (ONLY === 'comparisons' ? 0 : ROUNDS); round++) {
    for (const nodes of [1, 2]) {
      const db = await createTestDatabase();
      dbs.push(db);
      await ingestScenario(`PostgreSQL, ${nodes} node${nodes === 1 ? '' : 's'}`, { ...base, SPLITBALLOT_DATABASE_URL: db.url }, nodes, db);
    }
  }
  const cmpDb = await createTestDatabase();
  dbs.push(cmpDb);
  for (const n of ONLY === 'ingest' ? [] : SIZES) {
    const sqlite = await comparisonScenario('SQLite', async () => openSqliteStore(join(dir, 'compare.db')), n);
    const postgres = sqlite && (await comparisonScenario('PostgreSQL', async () => openPostgresStore(cmpDb.url), n));
    try {
      if (sqlite && postgres) await warmPhase(sqlite, postgres, n);
    } finally {
      for (const env of [sqlite, postgres]) if (env) await closeEnv(env);
    }
  }
} finally {
  for (const db of dbs) await db.drop().catch(() => undefined);
  rmSync(dir, { recursive: true, force: true });
}
