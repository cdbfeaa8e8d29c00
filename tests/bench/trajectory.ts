/**
 * The trajectory route at 2 × 250,000 answers (issue 12): GET /v1/experiments/{id}/comparisons/{measure}/trajectory
 * on a continuous item, through the built server (child process, temp DB file, 127.0.0.1).
 *
 *   npm run build && npx tsx tests/bench/trajectory.ts [--n 250000] [--keep DIR]
 *
 * --keep DIR keeps the database (and its admin key) in DIR and reuses it on the next run, so two builds of the
 * server can be measured on the very same data (load once, then run each build's copy of this script with the
 * same DIR).
 *
 * Data: invented, the seeded streams of tests/bench/data.ts (continuous-a, continuous-b; integer-a, integer-b),
 * answers alternating a, b in batches of 10,000.
 *
 * Printed, client-side time including HTTP:
 *   first        the first request after the server started (read + compute)
 *   repeat       the same request again, median of 5 (a cache, if there is one)
 *   revalidate   the same request with If-None-Match: <its ETag>, median of 5 (304 when supported)
 *   4 at once    one new answer arrives (a new dataVersion), then 4 identical requests at the same time: the
 *                wall time until all four answered, and the slowest single one
 *   event loop   the server's largest event-loop delay while `first` and `4 at once` ran (prom-client's
 *                nodejs_eventloop_lag_max_seconds from GET /metrics, reset at every scrape), and over 3 s with no
 *                request at all (a control: on a busy machine the process alone is sometimes not scheduled)
 *   /healthz     a client asking GET /healthz one request after another during `first` and `4 at once`: the
 *                slowest answer is how long the server could answer nothing else
 *   memory       the server's peak resident memory (VmHWM) after all of it, and its resident memory before the first request
 */
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { randomBytes } from 'node:crypto';
import { generateStream } from './data.js';
import { abExperiment, api, argNum, argv, batchJson, expectStatus, fmt, logger, median, newServiceEnv, responseJson, rssOf, sendBatches, startService, table, type RunningServer } from './harness.js';

const log = logger('trajectory');
const N = argNum('--n', 250_000);
const BATCH = 10_000;
const EXPERIMENT = abExperiment('bench-trajectory', 'Trajectory benchmark (invented data)');
const PATH = `/v1/experiments/${EXPERIMENT.id}/comparisons/amount/trajectory`;

function keepDir(): string | null {
  const i = argv.indexOf('--keep');
  return i >= 0 && argv[i + 1] ? argv[i + 1] : null;
}

async function eventLoopMaxMs(s: RunningServer, key: string): Promise<number | null> {
  const r = await fetch(`${s.url}/metrics`, { headers: { authorization: `Bearer ${key}` } });
  if (!r.ok) return null;
  const m = (await r.text()).match(/^nodejs_eventloop_lag_max_seconds(?:\{[^}]*\})?\s+([0-9.eE+-]+)/m);
  return m ? Number(m[1]) * 1000 : null;
}

/** A client asking GET /healthz one request after another until stopped; the slowest answer (ms) says how long the server could not answer anything. */
function healthProbe(s: RunningServer): { stop(): Promise<{ maxMs: number; requests: number }> } {
  let running = true;
  const ms: number[] = [];
  const loop = (async () => {
    while (running) {
      const t0 = performance.now();
      await fetch(`${s.url}/healthz`).then((r) => r.text());
      ms.push(performance.now() - t0);
    }
  })();
  return {
    async stop() {
      running = false;
      await loop;
      return { maxMs: Math.max(...ms), requests: ms.length };
    },
  };
}

async function load(s: RunningServer, key: string): Promise<void> {
  expectStatus(await api(s.url, 'POST', '/v1/experiments', key, EXPERIMENT), [201], 'create experiment');
  const ca = generateStream('continuous-a', N);
  const cb = generateStream('continuous-b', N);
  const ia = generateStream('integer-a', N);
  const ib = generateStream('integer-b', N);
  const perBatch = BATCH / 2;
  const count = Math.ceil(N / perBatch);
  const body = (i: number): string => {
    const items: string[] = [];
    for (let k = i * perBatch; k < Math.min(N, (i + 1) * perBatch); k++) {
      items.push(responseJson(`a-${k}`, 'a', { score: ia[k], amount: ca[k] }), responseJson(`b-${k}`, 'b', { score: ib[k], amount: cb[k] }));
    }
    return batchJson(items);
  };
  log(`loading 2 × ${fmt.int(N)} answers (${count} batches)`);
  const r = await sendBatches(s.url, EXPERIMENT.id, key, body, count, 2, (d) => {
    if (d % 10 === 0) log(`  ${d}/${count} batches`);
  });
  log(`loaded in ${(r.totalMs / 1000).toFixed(1)} s`);
}

async function main(): Promise<void> {
  const keep = keepDir();
  const env = newServiceEnv('trajectory');
  let reuse = false;
  if (keep) {
    mkdirSync(keep, { recursive: true });
    env.dbPath = join(keep, 'bench.db');
    const keyFile = join(keep, 'admin-key');
    if (existsSync(keyFile) && existsSync(env.dbPath)) {
      env.adminKey = readFileSync(keyFile, 'utf8').trim();
      reuse = true;
    } else {
      env.adminKey = randomBytes(32).toString('hex');
      writeFileSync(keyFile, env.adminKey);
    }
  }
  const key = env.adminKey;
  let s = await startService(env);
  try {
    if (!reuse) {
      await load(s, key);
      await s.stop(); // start afresh: nothing of the load in memory
      s = await startService(env);
    } else log(`reusing ${env.dbPath}`);
    const rssBefore = rssOf(s.pid);
    // Controls: one cheap read route first (so the first trajectory does not also pay for the first use of the
    // routing and schema code), then the event-loop delay over 3 s of doing nothing (what the machine alone costs).
    expectStatus(await api(s.url, 'GET', `/v1/experiments/${EXPERIMENT.id}`, key), [200], 'definition');
    await eventLoopMaxMs(s, key);
    await new Promise((r) => setTimeout(r, 3000));
    const lagIdle = await eventLoopMaxMs(s, key);

    await eventLoopMaxMs(s, key);
    const probeFirst = healthProbe(s);
    const first = await api<{ points: unknown[]; dataVersion: number }>(s.url, 'GET', PATH, key);
    const healthFirst = await probeFirst.stop();
    expectStatus(first, [200], 'first trajectory');
    const lagFirst = await eventLoopMaxMs(s, key);
    const etag = first.headers.get('etag');

    const repeats: number[] = [];
    for (let i = 0; i < 5; i++) {
      const r = await api(s.url, 'GET', PATH, key);
      expectStatus(r, [200], 'repeat');
      repeats.push(r.ms);
    }
    const revalidations: { ms: number; status: number }[] = [];
    for (let i = 0; i < 5; i++) {
      const r = await api(s.url, 'GET', PATH, key, undefined, etag ? { 'if-none-match': etag } : {});
      expectStatus(r, [200, 304], 'revalidate');
      revalidations.push({ ms: r.ms, status: r.status });
    }

    // One new answer: a new dataVersion; then four identical requests at once.
    const extra = `${Date.now()}`;
    expectStatus(
      await api(s.url, 'POST', `/v1/experiments/${EXPERIMENT.id}/responses`, key, { responseId: `extra-${extra}`, condition: 'a', values: { score: 50, amount: 0.1 } }),
      [201],
      'one more answer',
    );
    await eventLoopMaxMs(s, key);
    const probeFour = healthProbe(s);
    const t0 = performance.now();
    const four = await Promise.all([0, 1, 2, 3].map(() => api(s.url, 'GET', PATH, key)));
    const fourWall = performance.now() - t0;
    const healthFour = await probeFour.stop();
    for (const r of four) expectStatus(r, [200], '4 at once');
    const lagFour = await eventLoopMaxMs(s, key);
    const mem = rssOf(s.pid);

    const rows = [
      ['first request', `${fmt.int(first.ms)} ms`, `${first.body.points.length} points, ETag ${etag ? 'yes' : 'no'}`],
      ['repeat (median of 5)', `${median(repeats).toFixed(1)} ms`, `min ${Math.min(...repeats).toFixed(1)} ms`],
      ['revalidate (median of 5)', `${median(revalidations.map((r) => r.ms)).toFixed(1)} ms`, `status ${[...new Set(revalidations.map((r) => r.status))].join('/')}`],
      ['4 at once after new data', `${fmt.int(fourWall)} ms wall`, `slowest ${fmt.int(Math.max(...four.map((r) => r.ms)))} ms`],
      ['event loop, 3 s idle (control)', lagIdle === null ? 'n/a' : `${lagIdle.toFixed(1)} ms max`, 'no request running'],
      ['event loop, first request', lagFirst === null ? 'n/a' : `${lagFirst.toFixed(1)} ms max`, ''],
      ['event loop, 4 at once', lagFour === null ? 'n/a' : `${lagFour.toFixed(1)} ms max`, ''],
      ['GET /healthz during first request', `${fmt.int(healthFirst.maxMs)} ms slowest`, `${healthFirst.requests} requests one after another`],
      ['GET /healthz during 4 at once', `${fmt.int(healthFour.maxMs)} ms slowest`, `${healthFour.requests} requests one after another`],
      ['server memory', mem ? `${fmt.int(mem.peakMb)} MB peak` : 'n/a', rssBefore ? `${fmt.int(rssBefore.currentMb)} MB resident before the first request` : ''],
    ];
    process.stdout.write(`\nTrajectory route, 2 × ${fmt.int(N)} answers (continuous item), ${PATH}\n`);
    process.stdout.write(`${table(['what', 'figure', 'note'], rows)}\n`);
  } finally {
    await s.stop();
    if (!keep) env.cleanup();
  }
}

main().catch((err) => {
  process.stderr.write(`${err instanceof Error ? (err.stack ?? err.message) : String(err)}\n`);
  process.exit(1);
});
