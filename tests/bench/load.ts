/**
 * Load test (issue 6, test 5): `npm run bench:load` — not part of npm test.
 *
 *   npx tsx tests/bench/load.ts [--quick] [--duration 30] [--connections 10] [--poll-share 0.2]
 *
 * Starts the BUILT server (node dist/server/main.js serve) on 127.0.0.1 with a temporary database (WAL,
 * synchronous = FULL, the ingest rate limit off), seeds the water-utility demo with 2,000 invented responses,
 * then runs autocannon for 30 s (5 s with --quick) with a mix of single-response posts (each with its own
 * responseId, so every one is a new committed transaction) and comparison polls
 * (GET …/comparisons/satisfaction and …/comparisons/fair_price, which recompute whenever dataVersion moved).
 *
 * Prints requests/s, p50/p99 latency, errors and non-2xx answers; progress on stderr and a one-line summary on
 * stdout; writes bench-results/load.json. Target from the issue: zero errors and p99 under 50 ms at the rate the
 * machine sustains.
 */
import autocannon from 'autocannon';
import { api, argNum, autocannonFigures, expectStatus, fmt, logger, machine, newServiceEnv, QUICK, rssOf, startService, table, waterExperiment, writeResults } from './harness.js';

const log = logger('load');
const DURATION = argNum('--duration', QUICK ? 5 : 30);
const CONNECTIONS = argNum('--connections', 10);
const POLL_SHARE = argNum('--poll-share', 0.2);
const TARGET_P99_MS = 50;
const EXP = 'water-bill-2027';

const EXPERIMENT = waterExperiment('Water utility survey 2027: bill first or service first? (load test)');

function answer(i: number): string {
  const condition = i % 2 === 0 ? 'bill-first' : 'service-first';
  return `{"responseId":"load-${i}","condition":"${condition}","values":{"satisfaction":${i % 11},"trust":${1 + (i % 7)},"fair_price":${(i * 37) % 2000 / 10}}}`;
}

async function main(): Promise<void> {
  const env = newServiceEnv('load');
  log(`starting the built server on ${env.dbPath}`);
  const server = await startService(env);
  try {
    expectStatus(await api(server.url, 'POST', '/v1/experiments', env.adminKey, EXPERIMENT), [201], 'create experiment');
    const seed = Array.from({ length: 2000 }, (_, i) => answer(1_000_000 + i));
    expectStatus(await api(server.url, 'POST', `/v1/experiments/${EXP}/responses/batch`, env.adminKey, `{"responses":[${seed.join(',')}]}`), [201], 'seed');
    log(`seeded 2,000 responses; running autocannon: ${CONNECTIONS} connections for ${DURATION} s, ${Math.round(POLL_SHARE * 100)}% comparison polls`);

    let next = 0;
    const posts = Math.max(1, Math.round((1 - POLL_SHARE) / Math.max(POLL_SHARE, 0.01)));
    const auth = { authorization: `Bearer ${env.adminKey}` };
    const post = {
      method: 'POST' as const,
      path: `/v1/experiments/${EXP}/responses`,
      headers: { ...auth, 'content-type': 'application/json' },
      setupRequest: (req: Record<string, unknown>) => ({ ...req, body: answer(next++) }),
    };
    const requests = [
      ...Array.from({ length: posts }, () => post),
      { method: 'GET' as const, path: `/v1/experiments/${EXP}/comparisons/satisfaction`, headers: auth },
      ...Array.from({ length: posts }, () => post),
      { method: 'GET' as const, path: `/v1/experiments/${EXP}/comparisons/fair_price`, headers: auth },
    ];
    let finish!: (r: autocannon.Result) => void;
    let fail!: (e: unknown) => void;
    const done = new Promise<autocannon.Result>((resolve, reject) => {
      finish = resolve;
      fail = reject;
    });
    const instance = autocannon({ url: server.url, connections: CONNECTIONS, duration: DURATION, requests: requests as autocannon.Request[] }, (err, r) =>
      err ? fail(err) : finish(r),
    );
    let seconds = 0;
    let sinceLast = 0;
    instance.on('response', () => sinceLast++);
    instance.on('tick', () => {
      seconds++;
      if (seconds % 5 === 0) {
        log(`${seconds} s: ${fmt.int(sinceLast / 5)} req/s over the last 5 s`);
        sinceLast = 0;
      }
    });
    const result = await done;
    const memory = rssOf(server.pid);
    const check = await api<{ dataVersion: number; counts: { responses: number } }>(server.url, 'GET', `/v1/experiments/${EXP}`, env.adminKey);
    const statusCodes = (result as unknown as { statusCodeStats?: Record<string, { count: number }> }).statusCodeStats ?? {};
    const figures = {
      durationSeconds: DURATION,
      connections: CONNECTIONS,
      pollShare: 2 / requests.length,
      ...autocannonFigures(result),
      statusCodes: Object.fromEntries(Object.entries(statusCodes).map(([k, v]) => [k, v.count])),
      storedResponses: check.body.counts.responses,
      serverPeakRssMb: memory?.peakMb ?? null,
    };
    process.stdout.write(
      `${table(
        ['requests/s (mean)', 'requests/s (median)', 'p50 ms', 'p99 ms', 'max ms', 'requests', 'errors', 'timeouts', 'non-2xx'],
        [
          [
            fmt.int(figures.requestsPerSecond),
            fmt.int(figures.requestsPerSecondMedian),
            fmt.ms(figures.latencyP50Ms),
            fmt.ms(figures.latencyP99Ms),
            fmt.ms(figures.latencyMaxMs),
            fmt.int(figures.total),
            String(figures.errors),
            String(figures.timeouts),
            String(figures.non2xx),
          ],
        ],
      )}\n`,
    );
    const file = writeResults('load', { machine: machine(), figures });
    const ok = figures.errors === 0 && figures.timeouts === 0 && figures.non2xx === 0 && figures.latencyP99Ms < TARGET_P99_MS;
    process.stdout.write(
      `load: ${fmt.int(figures.requestsPerSecond)} req/s, p50 ${fmt.ms(figures.latencyP50Ms)} ms, p99 ${fmt.ms(figures.latencyP99Ms)} ms, ` +
        `${figures.errors + figures.timeouts} errors, ${figures.non2xx} non-2xx over ${DURATION} s × ${CONNECTIONS} connections ` +
        `(${ok ? 'meets' : 'MISSES'} the target: no errors, p99 < ${TARGET_P99_MS} ms); ${file}\n`,
    );
    process.exitCode = ok ? 0 : 1;
  } finally {
    await server.stop();
    env.cleanup();
  }
}

main().catch((err: unknown) => {
  process.stderr.write(`[bench:load] failed: ${err instanceof Error ? (err.stack ?? err.message) : String(err)}\n`);
  process.exitCode = 1;
});
