/**
 * PostgreSQL stopped in immediate mode and started again (an immediate restart: every backend killed without a
 * checkpoint, crash recovery at start) while clients post single answers to a real process of the built server
 * (dist/server/main.js) on that database:
 *
 *  - nothing acknowledged is lost: every responseId answered 201/200 is stored after the restart, the stored counts
 *    and the dataVersion the node reports equal the database's (the version between 1 and the number of answers:
 *    single answers share group commits), and `splitballot check` passes;
 *  - every request during the outage is answered — 503 application/problem+json with Retry-After and no stack —
 *    within a bound far below the request timeout (never a hang), and no other status appears;
 *  - GET /readyz answers 200, then 503 while the database is down, then 200 again;
 *  - the same node process (never restarted) stores new answers afterwards: it reconnected by itself.
 *
 * The cluster is stopped with `pg_ctlcluster --skip-systemctl-redirect VERSION main stop -m immediate` and started
 * with `… start` (together, what `restart -m immediate` does) so that the outage lasts long enough to be observed
 * (until /readyz and an ingest request have both seen it, at most 5 s), then is always started again and awaited with
 * pg_isready, whatever happened.
 *
 * CAUTION: this breaks the connections of everything else that uses the PostgreSQL server at that moment. It runs
 * only when SPLITBALLOT_TEST_PG_RESTART=1 or CI=true, and in a vitest project of its own ("pg-restart"), which
 * `npm test` runs after every other test file has finished. Elsewhere it is skipped with a notice. Needs
 * pg_ctlcluster and the right to run it (root on the project's machines), dist/ and the test server; with CI=true a
 * missing piece fails the test instead of skipping it.
 *
 * A throwaway server instead of the shared one: SPLITBALLOT_TEST_PG_RESTART_DATA=/path/to/data (a data directory
 * made by initdb, owned by the user postgres, its port in postgresql.conf) with SPLITBALLOT_TEST_PG_ADMIN_URL
 * naming that server; the test then stops and starts it with that version's pg_ctl, run as the user postgres.
 */
import { spawn, spawnSync } from 'node:child_process';
import { readdirSync } from 'node:fs';
import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { WATER_ID } from '../helpers/water.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';
import { answerFor, AUTH, HAVE_DIST, postJson, runBuiltCli, startBuiltServer, warnIfNoDist, waterDefinition, type BuiltServer } from './built-server.js';

const ENABLED = process.env.SPLITBALLOT_TEST_PG_RESTART === '1' || process.env.CI === 'true';
const IN_CI = process.env.CI === 'true';

/** The newest installed PostgreSQL cluster version (the one `.ci/run` starts), or null without pg_ctlcluster. */
function clusterVersion(): string | null {
  if (spawnSync('sh', ['-c', 'command -v pg_ctlcluster'], { encoding: 'utf8' }).status !== 0) return null;
  try {
    const versions = readdirSync('/etc/postgresql').filter((v) => /^\d+$/.test(v));
    return versions.sort((a, b) => Number(a) - Number(b)).pop() ?? null;
  } catch {
    return null;
  }
}

const PRIVATE_DATA = process.env.SPLITBALLOT_TEST_PG_RESTART_DATA || null;
const PORT = (() => {
  const url = process.env.SPLITBALLOT_TEST_PG_ADMIN_URL;
  return url ? new URL(url).port || '5432' : '5432';
})();
const VERSION = ENABLED ? clusterVersion() : null;
if (!ENABLED) {
  process.stderr.write('NOTICE: skipping the PostgreSQL immediate-restart test (set SPLITBALLOT_TEST_PG_RESTART=1; it restarts the shared server)\n');
} else {
  warnIfNoDist('the PostgreSQL immediate-restart test');
  if (VERSION === null) {
    const message = 'pg_ctlcluster or /etc/postgresql is missing: cannot restart PostgreSQL';
    if (IN_CI) throw new Error(`${message}; CI=true requires it for the immediate-restart test`);
    process.stderr.write(`NOTICE: ${message}; skipping the immediate-restart test\n`);
  }
}
const available = ENABLED && VERSION !== null && HAVE_DIST && (await postgresAvailable('the PostgreSQL immediate-restart test'));
if (ENABLED && IN_CI && !HAVE_DIST) throw new Error('dist/server/main.js is missing; CI=true requires it for the immediate-restart test');

/** Run pg_ctlcluster ACTION on the main cluster (waits until it returns; `start` waits for the server to accept). */
async function cluster(action: 'stop' | 'start', ...args: string[]): Promise<{ code: number | null; output: string }> {
  const child = PRIVATE_DATA
    ? spawn('runuser', ['-u', 'postgres', '--', `/usr/lib/postgresql/${VERSION}/bin/pg_ctl`, '-D', PRIVATE_DATA, '-w', '-l', `${PRIVATE_DATA}/../restart-test.log`, action, ...args], {
        stdio: ['ignore', 'pipe', 'pipe'],
      })
    : spawn('pg_ctlcluster', ['--skip-systemctl-redirect', VERSION!, 'main', action, ...args], { stdio: ['ignore', 'pipe', 'pipe'] });
  let output = '';
  child.stdout.on('data', (d) => (output += d));
  child.stderr.on('data', (d) => (output += d));
  const code = await new Promise<number | null>((resolve) => child.on('exit', (c) => resolve(c)));
  return { code, output };
}

function isReady(): boolean {
  return spawnSync('pg_isready', ['-q', '-h', '127.0.0.1', '-p', PORT], { timeout: 5000 }).status === 0;
}

/** Wait (at most `ms`) until pg_isready says the server accepts connections. */
async function awaitReady(ms: number): Promise<boolean> {
  const deadline = Date.now() + ms;
  while (Date.now() < deadline) {
    if (isReady()) return true;
    await new Promise((r) => setTimeout(r, 200));
  }
  return isReady();
}

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

interface Reply {
  id: string;
  status: number;
  ms: number;
  contentType: string | null;
  retryAfter: string | null;
  body: string;
}

describe.skipIf(!available)('PostgreSQL restarted in immediate mode under ingest', () => {
  let test: TestDatabase | undefined;
  let node: BuiltServer | undefined;
  let stopped = false;

  afterAll(async () => {
    // Whatever happened above, the shared server runs again before anything else is done.
    if (stopped || !isReady()) {
      if (!isReady()) await cluster('start');
      stopped = false;
    }
    expect(await awaitReady(30_000)).toBe(true);
    if (node && node.child.exitCode === null && node.child.signalCode === null) node.child.kill('SIGKILL');
    await node?.exited;
    await test?.drop();
  }, 45_000);

  it('503 problem+json with Retry-After while down, readyz 200 → 503 → 200, the node reconnects, nothing acknowledged is lost', async () => {
    const started = Date.now();
    expect(await awaitReady(10_000)).toBe(true);
    test = await createTestDatabase();
    const env = { SPLITBALLOT_DATABASE_URL: test.url, SPLITBALLOT_DATABASE_POOL_SIZE: '4' };
    node = await startBuiltServer('/nonexistent/unused.db', env);
    const base = node.base;
    expect((await postJson(`${base}/v1/experiments`, waterDefinition())).status).toBe(201);

    // Clients: 6 posting single answers one after another, each request bounded by an abort after 20 s (a hang).
    const replies: Reply[] = [];
    const failures: string[] = [];
    let running = true;
    let next = 0;
    const post = async (i: number) => {
      const id = `restart-${i}`;
      const t0 = Date.now();
      try {
        const r = await fetch(`${base}/v1/experiments/${WATER_ID}/responses`, {
          method: 'POST',
          headers: { ...AUTH, 'content-type': 'application/json' },
          body: JSON.stringify({ responseId: id, ...answerFor(i) }),
          signal: AbortSignal.timeout(20_000),
        });
        const body = await r.text();
        replies.push({ id, status: r.status, ms: Date.now() - t0, contentType: r.headers.get('content-type'), retryAfter: r.headers.get('retry-after'), body });
      } catch (err) {
        failures.push(`${id}: ${(err as Error).message}`);
        await sleep(100); // the node is gone or the request hung: do not spin
      }
    };
    const clients = Array.from({ length: 6 }, async () => {
      while (running) {
        await post(next++);
        // After a refusal wait a little, as a client honouring Retry-After would (shortened: the test is bounded).
        if (replies.at(-1)?.status === 503) await sleep(100);
      }
    });

    // /readyz every 50 ms.
    const readyz: { at: number; status: number }[] = [];
    let polling = true;
    const poller = (async () => {
      while (polling) {
        try {
          const r = await fetch(`${base}/readyz`, { signal: AbortSignal.timeout(10_000) });
          await r.text();
          readyz.push({ at: Date.now(), status: r.status });
        } catch {
          readyz.push({ at: Date.now(), status: 0 });
        }
        await sleep(50);
      }
    })();

    const acknowledged = () => replies.filter((r) => r.status === 200 || r.status === 201).length;
    /** What the clients and /readyz saw, and the node's log, for a failure message. */
    const diagnosis = () => {
      const byStatus = new Map<number, number>();
      for (const r of replies) byStatus.set(r.status, (byStatus.get(r.status) ?? 0) + 1);
      const t0 = readyz[0]?.at ?? 0;
      return [
        `replies by status: ${[...byStatus].map(([k, v]) => `${k}×${v}`).join(' ')}; failures: ${failures.length} ${failures.slice(0, 3).join(' | ')}`,
        `readyz (ms since the first poll: status): ${readyz.map((x) => `${x.at - t0}:${x.status}`).join(' ').slice(-1500)}`,
        `last 503 bodies: ${replies.filter((r) => r.status === 503).slice(-2).map((r) => r.body).join(' | ')}`,
        `node stderr: ${node!.errors().slice(-3000)}`,
      ].join('\n');
    };
    const nodeExited = () => node!.child.exitCode !== null || node!.child.signalCode !== null;
    const until = async (cond: () => boolean, ms: number) => {
      const deadline = Date.now() + ms;
      while (!cond() && !nodeExited() && Date.now() < deadline) await sleep(25);
      return cond();
    };
    try {
      expect(await until(() => acknowledged() >= 200, 15_000)).toBe(true);
      const before = replies.length;
      const readyBefore = readyz.length;

      const stop = await cluster('stop', '-m', 'immediate');
      stopped = true;
      expect(stop.code, stop.output).toBe(0);
      const downAt = Date.now();
      // Down until both /readyz and an ingest request have seen it (at most 5 s).
      await until(() => readyz.slice(readyBefore).some((x) => x.status === 503) && replies.slice(before).some((r) => r.status === 503), 5000);
      const startRun = await cluster('start');
      expect(startRun.code, startRun.output).toBe(0);
      stopped = false;
      const upAt = Date.now();
      expect(await awaitReady(20_000)).toBe(true);
      // The node process must have lived through the outage (an unhandled error of a database client ends it).
      await sleep(200);
      expect(nodeExited(), diagnosis()).toBe(false);

      // Ready again, and answers stored again by the same process, without any help.
      const readyAfterStart = await until(() => readyz.some((x) => x.at > upAt && x.status === 200), 20_000);
      expect(readyAfterStart, diagnosis()).toBe(true);
      const ackedAtUp = acknowledged();
      expect(await until(() => acknowledged() >= ackedAtUp + 100, 15_000)).toBe(true);
      running = false;
      await Promise.all(clients);
      polling = false;
      await poller;

      // Every request was answered (no connection failure, no abort after 20 s), fast: a refusal within the 5 s
      // connect timeout plus a little, never at the 30 s request timeout.
      expect(failures).toEqual([]);
      const statuses = new Set(replies.map((r) => r.status));
      expect([...statuses].filter((s) => s !== 200 && s !== 201 && s !== 503)).toEqual([]);
      const refused = replies.filter((r) => r.status === 503);
      expect(refused.length).toBeGreaterThan(0);
      for (const r of refused) {
        expect(r.contentType, r.body).toMatch(/^application\/problem\+json/);
        expect(r.retryAfter, r.body).toMatch(/^\d+$/);
        expect(JSON.parse(r.body)).toMatchObject({ type: 'urn:splitballot:problem:unavailable', status: 503 });
        expect(r.body).not.toMatch(/\bat \S+ \(|ECONNREFUSED|Error:|\.ts:\d|\.js:\d/);
      }
      expect(Math.max(...replies.map((r) => r.ms))).toBeLessThan(12_000);

      // /readyz: 200 before, 503 while down, 200 after (any connection failure to the node itself is a failure).
      expect(readyz.some((x) => x.status === 0)).toBe(false);
      const firstDown = readyz.findIndex((x) => x.at >= downAt && x.status === 503);
      expect(readyz.slice(0, readyBefore).some((x) => x.status === 200)).toBe(true);
      expect(firstDown).toBeGreaterThanOrEqual(0);
      expect(readyz.slice(firstDown).some((x) => x.status === 200)).toBe(true);
      expect(readyz.at(-1)!.status).toBe(200);

      // The node never exited: it reconnected by itself.
      expect(node.child.exitCode).toBeNull();
      expect(node.child.signalCode).toBeNull();

      // Nothing acknowledged is lost; the counts equal the rows; no acknowledgement names a later dataVersion.
      const client = new pg.Client({ connectionString: test.url });
      await client.connect();
      let stored: Set<string>;
      let rows: number;
      let dataVersion: number;
      try {
        const r = await client.query<{ response_id: string }>(
          `SELECT r.response_id FROM responses r JOIN experiments e ON e.id = r.experiment_id WHERE e.slug = $1`,
          [WATER_ID],
        );
        stored = new Set(r.rows.map((x) => x.response_id));
        rows = r.rows.length;
        dataVersion = Number((await client.query<{ v: string }>(`SELECT data_version AS v FROM experiments WHERE slug = $1`, [WATER_ID])).rows[0].v);
      } finally {
        await client.end();
      }
      const acked = replies.filter((r) => r.status === 200 || r.status === 201);
      const lost = acked.filter((r) => !stored.has(r.id)).map((r) => r.id);
      expect(lost).toEqual([]);
      expect(stored.size).toBe(rows);
      // Every acknowledgement was one committed transaction at least: the version moved at least once per batch of
      // acknowledged answers and never by more than the answers stored (single answers share group commits).
      expect(dataVersion).toBeGreaterThan(0);
      expect(dataVersion).toBeLessThanOrEqual(rows);
      const definition = await fetch(`${base}/v1/experiments/${WATER_ID}`, { headers: AUTH });
      const view = (await definition.json()) as { dataVersion: number; counts: { responses: number } };
      expect(view.counts.responses).toBe(rows);
      expect(view.dataVersion).toBe(dataVersion);
      // A refused answer sent again is stored now (201), or was stored before its connection broke (200); never twice.
      const retry = refused[0];
      const again = await postJson(`${base}/v1/experiments/${WATER_ID}/responses`, { responseId: retry.id, ...answerFor(Number(retry.id.split('-')[1])) });
      expect([200, 201]).toContain(again.status);
      const check = await runBuiltCli(['check'], env);
      expect(check.stdout, check.stderr).toMatch(/^check ok: /);
      expect(check.code).toBe(0);
      expect(Date.now() - started).toBeLessThan(60_000);
    } finally {
      running = false;
      polling = false;
      if (stopped) {
        await cluster('start');
        stopped = false;
      }
      await awaitReady(30_000);
    }
  }, 60_000);
});
