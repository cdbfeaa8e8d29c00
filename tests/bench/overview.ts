/**
 * The team overview (GET /v1/overview) on a study with many stored answers, with and without the index
 * responses_by_received_at (migration 0007) that its "answers today / this week" counts read.
 *
 *   npx tsx tests/bench/overview.ts [--answers 1000000] [--repeats 15] [--engine sqlite|postgres|both]
 *
 * Data (invented): one study with two conditions and one 0–10 item, `--answers` responses arriving evenly over the
 * last 30 days up to now (so "today" holds about 1/30 of them, "this week" up to 7/30), and a second, small study.
 * Rows are written straight into the responses table with the per-condition counters and dataVersion set to match
 * (no values: the overview's comparison family is then cheap and cached, so the figure is the rest of the route —
 * the list, the stamps and the counts). The app is built in this process (fastify inject, no network), the
 * overview asked once to warm the comparison cache, then `--repeats` times WITHOUT If-None-Match (each request
 * recomputes the counts), first with the index dropped ("before"), then with it made again ("after"; PostgreSQL
 * runs ANALYZE after each change). Printed: median and min of the route, the count query alone, and its plan.
 * SQLite uses a temporary file; PostgreSQL a fresh database of the test server (dropped at the end).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { openPostgresStore, type PostgresStore } from '../../server/store/postgres/store.js';
import { openSqliteStore, type SqliteStore } from '../../server/store/sqlite/store.js';
import type { Store } from '../../server/store/types.js';
import { createTestDatabase, postgresAvailable } from '../store/postgres/pg-test-db.js';
import type { Config } from '../../server/config.js';
import { argNum, argv, fmt, logger, median, table } from './harness.js';

const log = logger('overview');
const ANSWERS = argNum('--answers', 1_000_000);
const REPEATS = argNum('--repeats', 15);
const engineArg = argv.includes('--engine') ? argv[argv.indexOf('--engine') + 1] : 'both';
const DAY = 86_400_000;

interface Engine {
  name: string;
  store: Store;
  fill(experimentKey: number, n: number, first: number, last: number): Promise<void>;
  dropIndex(): Promise<void>;
  makeIndex(): Promise<void>;
  countOnce(experimentKey: number, since: string): Promise<number>;
  plan(experimentKey: number, since: string): Promise<string>;
  close(): Promise<void>;
}

async function sqliteEngine(): Promise<Engine> {
  const dir = mkdtempSync(join(tmpdir(), 'sb-bench-overview-'));
  const store: SqliteStore = openSqliteStore(join(dir, 'bench.db'));
  const db = store.db;
  const count = db.prepare(`SELECT count(*) FROM responses WHERE experiment_id = ? AND received_at >= ?`).pluck();
  return {
    name: 'SQLite',
    store,
    async fill(key, n, first, last) {
      const insert = db.prepare(
        `INSERT INTO responses (experiment_id, response_id, condition_id, submitted_at, received_at, content_hash) VALUES (?, ?, ?, ?, ?, randomblob(32))`,
      );
      const conditions = db.prepare(`SELECT id FROM conditions WHERE experiment_id = ? ORDER BY position`).pluck().all(key) as number[];
      const step = (last - first) / n;
      db.transaction(() => {
        for (let i = 0; i < n; i++) {
          const t = new Date(first + i * step).toISOString();
          insert.run(key, `r-${i}`, conditions[i % 2], t, t);
        }
        for (const [i, c] of conditions.entries()) db.prepare(`UPDATE conditions SET response_count = ? WHERE id = ?`).run(Math.ceil((n - i) / 2), c);
        db.prepare(`UPDATE experiments SET data_version = 1 WHERE id = ?`).run(key);
      })();
    },
    async dropIndex() {
      db.exec(`DROP INDEX responses_by_received_at`);
    },
    async makeIndex() {
      db.exec(`CREATE INDEX responses_by_received_at ON responses (experiment_id, received_at)`);
    },
    async countOnce(key, since) {
      return count.get(key, since) as number;
    },
    async plan(key, since) {
      return (db.prepare(`EXPLAIN QUERY PLAN SELECT count(*) FROM responses WHERE experiment_id = ? AND received_at >= ?`).all(key, since) as { detail: string }[])
        .map((r) => r.detail)
        .join('; ');
    },
    async close() {
      await store.close();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

async function postgresEngine(): Promise<Engine> {
  const test = await createTestDatabase();
  const store: PostgresStore = await openPostgresStore(test.url, { pool: { poolSize: 4 } });
  // Writing a million rows and building an index take longer than the store's statement timeout: a plain client.
  const q = await test.admin();
  const COUNT = `SELECT count(*) AS n FROM responses WHERE experiment_id = $1 AND received_at >= $2 COLLATE "C"`;
  return {
    name: 'PostgreSQL',
    store,
    async fill(key, n, first, last) {
      await q.query(
        `INSERT INTO responses (experiment_id, response_id, condition_id, submitted_at, received_at, content_hash)
         SELECT $1, 'r-' || i, c.ids[1 + i % 2], t, t, sha256(('r-' || i)::bytea)
         FROM (SELECT array_agg(id ORDER BY position) AS ids FROM conditions WHERE experiment_id = $1) c,
              generate_series(0, $2::integer - 1) AS i,
              LATERAL (SELECT to_char(to_timestamp(($3::double precision + i * ($4::double precision - $3::double precision) / $2::double precision) / 1000.0) AT TIME ZONE 'UTC', 'YYYY-MM-DD"T"HH24:MI:SS.MS"Z"') AS t) x`,
        [key, n, first, last],
      );
      await q.query(
        `UPDATE conditions SET response_count = (SELECT count(*) FROM responses r WHERE r.condition_id = conditions.id) WHERE experiment_id = $1`,
        [key],
      );
      await q.query(`UPDATE experiments SET data_version = 1 WHERE id = $1`, [key]);
      await q.query(`VACUUM ANALYZE responses`);
    },
    async dropIndex() {
      await q.query(`DROP INDEX responses_by_received_at`);
      await q.query(`ANALYZE responses`);
    },
    async makeIndex() {
      await q.query(`CREATE INDEX responses_by_received_at ON responses (experiment_id, received_at COLLATE "C")`);
      await q.query(`VACUUM ANALYZE responses`);
    },
    async countOnce(key, since) {
      return Number((await q.query<{ n: number }>(COUNT, [key, since])).rows[0].n);
    },
    async plan(key, since) {
      const r = await q.query<{ 'QUERY PLAN': string }>(`EXPLAIN ${COUNT}`, [key, since]);
      return r.rows
        .map((x) => x['QUERY PLAN'].trim())
        .filter((l) => /Scan/.test(l))
        .map((l) => l.replace(/\s+\(cost=.*$/, '').replace(/^->\s*/, ''))
        .join('; ');
    },
    async close() {
      await store.close();
      await test.drop();
    },
  };
}

async function timed<T>(fn: () => Promise<T>): Promise<number> {
  const t0 = performance.now();
  await fn();
  return performance.now() - t0;
}

async function run(engine: Engine): Promise<string[][]> {
  const store = engine.store;
  const secret = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(secret), scope: 'admin', experimentKey: null, label: 'bench', origin: 'cli', createdAt: new Date().toISOString() });
  const keys: number[] = [];
  for (const [slug, n] of [
    ['bench-overview-large', ANSWERS],
    ['bench-overview-small', 2_000],
  ] as const) {
    const r = await store.experiments.create({
      id: slug,
      title: 'Invented water-utility survey (overview benchmark)',
      conditions: [
        { id: 'a', label: 'A' },
        { id: 'b', label: 'B' },
      ],
      measures: [{ id: 'score', label: 'Score 0–10', min: 0, max: 10, integer: true, required: true }],
      plannedPerCondition: ANSWERS,
      alpha: 0.05,
      thankYouUrl: null,
    });
    if (r.kind !== 'created') throw new Error('not created');
    keys.push(r.experiment.key);
    const now = Date.now();
    const t0 = performance.now();
    await engine.fill(r.experiment.key, n, now - 30 * DAY, now - 1000);
    log(`${engine.name}: ${slug}: ${n.toLocaleString('en-US')} responses written in ${fmt.ms(performance.now() - t0)} ms`);
  }
  const config: Config = { port: 0, host: '127.0.0.1', dbPath: join(tmpdir(), 'sb-bench-overview-unused.db'), adminKeyHash: null, corsOrigins: [], logLevel: 'warn' };
  const app = buildApp(config, { store, logStream: { write: () => undefined } });
  await app.ready();
  const rows: string[][] = [];
  try {
    const overview = async () => {
      const res = await app.inject({ method: 'GET', url: '/v1/overview', headers: { authorization: `Bearer ${secret}` } });
      if (res.statusCode !== 200) throw new Error(`overview answered ${res.statusCode}: ${res.body}`);
      return res.json() as { studies: { id: string; answersToday: number; answersThisWeek: number }[] };
    };
    const today = new Date();
    const dayStart = new Date(Date.UTC(today.getUTCFullYear(), today.getUTCMonth(), today.getUTCDate())).toISOString();
    for (const phase of ['before', 'after'] as const) {
      if (phase === 'before') await engine.dropIndex();
      else await engine.makeIndex();
      const first = await overview(); // warms the comparison cache (its key does not depend on the index)
      const large = first.studies.find((s) => s.id === 'bench-overview-large')!;
      const route: number[] = [];
      for (let i = 0; i < REPEATS; i++) route.push(await timed(overview));
      const count: number[] = [];
      for (let i = 0; i < REPEATS; i++) count.push(await timed(() => engine.countOnce(keys[0], dayStart)));
      const plan = await engine.plan(keys[0], dayStart);
      log(`${engine.name} ${phase}: overview median ${fmt.ms(median(route))} ms; plan: ${plan}`);
      rows.push([
        engine.name,
        phase === 'before' ? 'without the index' : 'with responses_by_received_at',
        ANSWERS.toLocaleString('en-US'),
        `${large.answersToday.toLocaleString('en-US')} / ${large.answersThisWeek.toLocaleString('en-US')}`,
        `${fmt.ms(median(route))} ms (min ${fmt.ms(Math.min(...route))} ms)`,
        `${fmt.ms(median(count))} ms (min ${fmt.ms(Math.min(...count))} ms)`,
        plan,
      ]);
    }
  } finally {
    await app.close();
  }
  return rows;
}

const rows: string[][] = [];
if (engineArg === 'sqlite' || engineArg === 'both') {
  const e = await sqliteEngine();
  try {
    rows.push(...(await run(e)));
  } finally {
    await e.close();
  }
}
if (engineArg === 'postgres' || engineArg === 'both') {
  if (await postgresAvailable('the overview benchmark on PostgreSQL')) {
    const e = await postgresEngine();
    try {
      rows.push(...(await run(e)));
    } finally {
      await e.close();
    }
  }
}
process.stdout.write(
  `GET /v1/overview, ${REPEATS} requests without If-None-Match after one warm-up (median, min), and the "today" count alone\n` +
    table(['engine', 'index', 'answers', 'today / this week', 'overview', 'count today', 'plan of the count'], rows) +
    '\n',
);
