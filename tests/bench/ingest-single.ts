/**
 * Benchmark 1 (issue 8): single-response ingest over HTTP, next to the stack's ceiling measured in the same run.
 *
 *   npx tsx tests/bench/ingest-single.ts [--quick] [--duration 20] [--connections 32]
 *
 * autocannon (library) at 32 connections for 20 s (5 s with --quick) against
 *   baseline  tests/bench/baseline-server.ts: bare fastify + ONE prepared INSERT per request, same pragmas
 *             (WAL, synchronous = FULL) — every request is one fsync'ed commit;
 *   service   the built server (node dist/server/main.js serve, temp DB file): POST /v1/experiments/{id}/responses
 *             with API-key auth, full validation, idempotency (a distinct client responseId per request, checked
 *             against the stored ones), per-value counts and counters — every request acknowledged only after its
 *             commit.
 * Both servers run as child processes on 127.0.0.1. Bodies are the water-utility demo's three items with varying
 * invented values. Prints requests/s, p50/p99 latency, errors; target: service ≥ 0.7 × baseline requests/s.
 */
import autocannon from 'autocannon';
import { api, argNum, autocannonFigures, expectStatus, finish, fmt, logger, machine, newServiceEnv, QUICK, startBaseline, startService, table, waterExperiment } from './harness.js';

const log = logger('ingest-single');
const DURATION = argNum('--duration', QUICK ? 5 : 20);
const CONNECTIONS = argNum('--connections', 32);
const TARGET_RATIO = 0.7;

const EXPERIMENT = waterExperiment('Water utility survey 2027: bill first or service first? (benchmark)');

type Figures = ReturnType<typeof autocannonFigures>;

function bodyMaker(prefix: string): () => string {
  let i = 0;
  return () => {
    i++;
    const satisfaction = i % 11;
    const trust = 1 + (i % 7);
    const price = Math.round(((i * 7919) % 20000) / 100 * 100) / 100;
    return JSON.stringify({
      condition: i % 2 === 0 ? 'bill-first' : 'service-first',
      responseId: `${prefix}-${i}`,
      values: { satisfaction, trust, fair_price: price },
    });
  };
}

async function hammer(url: string, headers: Record<string, string>, makeBody: () => string): Promise<Figures> {
  const result = await autocannon({
    url,
    method: 'POST',
    connections: CONNECTIONS,
    duration: DURATION,
    headers: { 'content-type': 'application/json', ...headers },
    requests: [
      {
        method: 'POST',
        setupRequest: (req) => ({ ...req, body: makeBody() }),
      },
    ],
  });
  return autocannonFigures(result);
}

async function main(): Promise<void> {
  const started = new Date().toISOString();
  const m0 = machine();
  log(`${CONNECTIONS} connections × ${DURATION} s per contender`);

  const baseEnv = newServiceEnv('baseline');
  const svcEnv = newServiceEnv('single');
  let baseline: Figures;
  let service: Figures;
  try {
    log('baseline: bare fastify + one prepared INSERT (WAL, synchronous = FULL)');
    const b = await startBaseline(baseEnv.dbPath);
    try {
      baseline = await hammer(`${b.url}/items`, {}, bodyMaker('base'));
    } finally {
      await b.stop();
    }
    log(`baseline ${fmt.int(baseline.requestsPerSecond)} req/s`);

    log('service: node dist/server/main.js serve');
    const s = await startService(svcEnv);
    try {
      expectStatus(await api(s.url, 'POST', '/v1/experiments', svcEnv.adminKey, EXPERIMENT), [201], 'create experiment');
      service = await hammer(`${s.url}/v1/experiments/${EXPERIMENT.id}/responses`, { authorization: `Bearer ${svcEnv.adminKey}` }, bodyMaker('svc'));
    } finally {
      await s.stop();
    }
    log(`service ${fmt.int(service.requestsPerSecond)} req/s`);
  } finally {
    baseEnv.cleanup();
    svcEnv.cleanup();
  }

  const ratio = service.requestsPerSecond / baseline.requestsPerSecond;
  const row = (name: string, f: Figures): string[] => [
    name,
    fmt.int(f.requestsPerSecond),
    fmt.int(f.requestsPerSecondMedian),
    fmt.ms(f.latencyP50Ms),
    fmt.ms(f.latencyP99Ms),
    fmt.ms(f.latencyMaxMs),
    fmt.int(f.total),
    `${f.non2xx}/${f.errors}/${f.timeouts}`,
  ];
  process.stdout.write(`\nBenchmark 1 — single-response ingest, ${CONNECTIONS} connections × ${DURATION} s, 127.0.0.1\n\n`);
  process.stdout.write(
    table(
      ['contender', 'req/s (mean)', 'req/s (median)', 'p50 ms', 'p99 ms', 'max ms', 'requests', 'non-2xx/errors/timeouts'],
      [row('baseline: fastify + 1 INSERT', baseline), row('service: validated ingest', service)],
    ) + '\n\n',
  );
  const met = ratio >= TARGET_RATIO && service.non2xx === 0 && service.errors === 0;
  const summary = `ingest-single: service ${fmt.int(service.requestsPerSecond)} req/s = ${ratio.toFixed(2)} × baseline ${fmt.int(baseline.requestsPerSecond)} req/s (target ≥ ${TARGET_RATIO}) — ${met ? 'MET' : 'MISSED'}`;
  finish('ingest-single', log, {
    startedAt: started,
    finishedAt: new Date().toISOString(),
    machine: { ...m0, loadAverageEnd: machine().loadAverage },
    connections: CONNECTIONS,
    durationSeconds: DURATION,
    baseline,
    service,
    ratio,
    target: TARGET_RATIO,
    met,
    summary,
  });
}

await main();
