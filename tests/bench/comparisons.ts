/**
 * Benchmarks 3–7 (issue 8): comparison latency over HTTP, the same data through scipy and R, scaling exponents,
 * responsiveness of ingest while a large comparison runs, and the server's memory.
 *
 *   npx tsx tests/bench/comparisons.ts [--quick] [--sizes 1000,10000,100000,1000000] [--skip-references]
 *
 * Data: invented, from the seeded streams of tests/bench/data.ts (the same numbers reference.py and reference.R
 * read): an integer 0–100 item `score` and a continuous item `amount`, n answers per condition (a, b), loaded
 * through the batch route of the built server (child process, temp DB file, 127.0.0.1) in steps 1e3 → 1e4 → …
 *
 * Per size and item (GET /v1/experiments/bench-compare/comparisons/{item}, client-side time incl. HTTP):
 *   cold            the first request after a restart of the server (nothing in memory: read + compute)
 *   warm            the same request again (median of 3): the result cache
 *   after-new-data  one more answer arrived (POST of one response), then the same request: a new dataVersion
 *                   (median of 3 such rounds)
 * Responsiveness (sizes ≥ 1e5, continuous item): the server is restarted, and while the cold and the after-new-data
 * comparisons run, 4 clients keep posting single responses to ANOTHER experiment (so the comparison's dataVersion
 * stays put); printed: their p50/p99/max latency and the server's event-loop delay (nodejs_eventloop_lag_max_seconds
 * from GET /metrics, prom-client's perf_hooks.monitorEventLoopDelay, reset at every scrape: scraped right before
 * and right after). Target: no stall over 50 ms.
 * Memory: the server's peak resident memory (VmHWM) after the largest size (2 × n continuous values).
 * References (same numbers, data already in memory): reference.py (scipy ttest_ind(equal_var=False),
 * mannwhitneyu(asymptotic), shapiro on 5,000) and reference.R (t.test, wilcox.test, shapiro.test on 5,000).
 * Worker crossover: compare in-thread vs in the worker pool, in-process, by total n (sets the service's workerMinValues).
 */
import { spawnSync } from 'node:child_process';
import { join } from 'node:path';
import { ComparePool, compareSorted } from '../../server/services/comparisons/worker-pool.js';
import type { FlagContext } from '../../stats/flags.js';
import { ensureData, readStream, type StreamName } from './data.js';
import {
  abExperiment,
  api,
  argv,
  batchJson,
  DATA_DIR,
  expectStatus,
  finish,
  fitExponent,
  fmt,
  logger,
  machine,
  median,
  newServiceEnv,
  percentile,
  QUICK,
  responseJson,
  ROOT,
  rssOf,
  sendBatches,
  startService,
  table,
  type RunningServer,
} from './harness.js';

const log = logger('comparisons');
const PYTHON = process.env.BENCH_PYTHON ?? '/usr/bin/python3';
const RSCRIPT = process.env.BENCH_RSCRIPT ?? 'Rscript';
const SKIP_REFERENCES = argv.includes('--skip-references');
const sizesArg = argv.indexOf('--sizes');
const SIZES = sizesArg >= 0 ? argv[sizesArg + 1].split(',').map(Number) : QUICK ? [1e3, 1e4, 1e5] : [1e3, 1e4, 1e5, 1e6];
const MAX = Math.max(...SIZES);
const RESPONSIVE_MIN = 1e5;
const BATCH = 10_000;

const TARGETS = {
  integerWarmMsAt1e6: 10,
  integerAfterNewMsAt1e6: 10,
  integerColdMsAt1e6: 100,
  continuousColdMsAt1e6: 3000,
  continuousAfterNewMsAt1e6: 1500,
  integerSpeedupVsScipyAt1e6: 20,
  continuousVsScipyMax: 1,
  eventLoopStallMs: 50,
  peakRssMb: 500,
};

const EXPERIMENT = abExperiment('bench-compare', 'Comparison benchmark (invented data)');
const PROBE = {
  id: 'bench-probe',
  title: 'Ingest probe (invented data)',
  conditions: [
    { id: 'x', label: 'X' },
    { id: 'y', label: 'Y' },
  ],
  measures: [
    { id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true },
    { id: 'price', label: 'Price', min: 0, max: 200, integer: false, required: true },
  ],
  alpha: 0.05,
};

type Item = 'integer' | 'continuous';
const MEASURE: Record<Item, string> = { integer: 'score', continuous: 'amount' };
const ITEMS: Item[] = ['integer', 'continuous'];

interface ComparisonBodyLite {
  dataVersion: number;
  groups: { a: { n: number }; b: { n: number } };
  welch: { t: number | null; p: number | null };
  mannWhitney: { u?: number | null; p: number | null };
}

interface ServiceRow {
  item: Item;
  n: number;
  coldMs: number;
  warmMs: number;
  afterNewMs: number;
  welchT: number | null;
  welchP: number | null;
  nA: number;
}

interface Responsiveness {
  n: number;
  phase: 'cold' | 'after-new-data' | 'ingest only (control)';
  comparisonMs: number;
  probeRequests: number;
  probeP50Ms: number;
  probeP99Ms: number;
  probeMaxMs: number;
  eventLoopMaxMs: number | null;
}

interface ReferenceRun {
  tool: 'scipy' | 'R';
  item: Item;
  n: number;
  medianMs: number;
  welchT: number | null;
}

// ───────────────────────────── data ─────────────────────────────

const streams = {} as Record<StreamName, Float64Array>;
function stream(name: StreamName): Float64Array {
  return (streams[name] ??= readStream(DATA_DIR, name, MAX));
}

/** Answer k of a condition; beyond the streams' end (the extra answers at the largest size) they wrap around. */
function responseOf(group: 'a' | 'b', k: number): string {
  const ia = stream(`integer-${group}`);
  const ca = stream(`continuous-${group}`);
  return responseJson(`${group}-${k}`, group, { score: ia[k % ia.length], amount: ca[k % ca.length] });
}

let loaded = 0;
const loadRates: { from: number; to: number; responsesPerSecond: number }[] = [];
async function loadUpTo(s: RunningServer, key: string, n: number): Promise<void> {
  if (n <= loaded) return;
  const perBatch = BATCH / 2;
  const from = loaded;
  const count = Math.ceil((n - from) / perBatch);
  const body = (i: number): string => {
    const items: string[] = [];
    for (let k = from + i * perBatch; k < Math.min(n, from + (i + 1) * perBatch); k++) items.push(responseOf('a', k), responseOf('b', k));
    return batchJson(items);
  };
  log(`loading answers ${fmt.int(from)} → ${fmt.int(n)} per condition (${count} batches)`);
  const r = await sendBatches(s.url, EXPERIMENT.id, key, body, count, 2, (d) => {
    if (d % 20 === 0) log(`  ${d}/${count} batches`);
  });
  loaded = n;
  loadRates.push({ from, to: n, responsesPerSecond: (2 * (n - from)) / (r.totalMs / 1000) });
}

// ───────────────────────────── HTTP pieces ─────────────────────────────

async function compareOnce(s: RunningServer, key: string, item: Item): Promise<{ ms: number; body: ComparisonBodyLite }> {
  const r = await api<ComparisonBodyLite>(s.url, 'GET', `/v1/experiments/${EXPERIMENT.id}/comparisons/${MEASURE[item]}?a=a&b=b`, key);
  expectStatus(r, [200], `comparison ${item}`);
  return { ms: r.ms, body: r.body };
}

async function eventLoopMaxMs(s: RunningServer, key: string): Promise<number | null> {
  const r = await fetch(`${s.url}/metrics`, { headers: { authorization: `Bearer ${key}` } });
  if (!r.ok) return null;
  const text = await r.text();
  const m = text.match(/^nodejs_eventloop_lag_max_seconds(?:\{[^}]*\})?\s+([0-9.eE+-]+)/m);
  return m ? Number(m[1]) * 1000 : null;
}

/** Clients posting single responses to the probe experiment until stopped; latencies in ms. */
function startProbe(s: RunningServer, key: string, clients = 4): { stop(): Promise<number[]> } {
  let running = true;
  const latencies: number[] = [];
  let i = 0;
  const loop = async (): Promise<void> => {
    while (running) {
      const k = i++;
      const r = await api(s.url, 'POST', `/v1/experiments/${PROBE.id}/responses`, key, {
        condition: k % 2 === 0 ? 'x' : 'y',
        responseId: `probe-${process.pid}-${Date.now()}-${k}`,
        values: { satisfaction: k % 11, price: (k * 37) % 200 },
      });
      if (r.status !== 201) throw new Error(`probe: HTTP ${r.status}`);
      latencies.push(r.ms);
    }
  };
  const all = Promise.all(Array.from({ length: clients }, loop));
  return {
    async stop() {
      running = false;
      await all;
      return latencies;
    },
  };
}

async function withProbe(s: RunningServer, key: string, n: number, phase: Responsiveness['phase'], item: Item | null, controlMs = 1500): Promise<Responsiveness> {
  await eventLoopMaxMs(s, key); // reset the histogram
  const probe = startProbe(s, key);
  await new Promise((r) => setTimeout(r, 200)); // the probe runs before the comparison starts
  // item null: the control — the same probe for a while with no comparison, to see what ingest alone costs.
  const c = item === null ? await new Promise<{ ms: number }>((r) => setTimeout(() => r({ ms: NaN }), controlMs)) : await compareOnce(s, key, item);
  const lag = await eventLoopMaxMs(s, key);
  const lat = await probe.stop();
  return {
    n,
    phase,
    comparisonMs: c.ms,
    probeRequests: lat.length,
    probeP50Ms: median(lat),
    probeP99Ms: percentile(lat, 99),
    probeMaxMs: Math.max(...lat),
    eventLoopMaxMs: lag,
  };
}

// ───────────────────────────── references ─────────────────────────────

function referenceAvailable(): { scipy: string | null; R: string | null; notices: string[] } {
  const notices: string[] = [];
  if (SKIP_REFERENCES) return { scipy: null, R: null, notices: ['references skipped (--skip-references)'] };
  const py = spawnSync(PYTHON, ['-c', 'import scipy, numpy; print(scipy.__version__)'], { encoding: 'utf8' });
  const scipy = py.status === 0 ? `scipy ${py.stdout.trim()} (${PYTHON})` : null;
  if (!scipy) notices.push(`scipy reference skipped: ${PYTHON} cannot import scipy. Install with: apt-get install python3-scipy`);
  const r = spawnSync(RSCRIPT, ['--vanilla', '-e', 'suppressMessages(library(jsonlite)); cat(R.version.string)'], { encoding: 'utf8' });
  const R = r.status === 0 ? r.stdout.trim() : null;
  if (!R) notices.push(`R reference skipped: ${RSCRIPT} with jsonlite not found. Install with: apt-get install r-base-core r-cran-jsonlite`);
  return { scipy, R, notices };
}

function runReference(tool: 'scipy' | 'R', item: Item, n: number): ReferenceRun {
  const reps = n >= 1e6 ? (tool === 'R' ? 1 : 2) : n >= 1e5 ? 3 : 5;
  const args = ['--dir', DATA_DIR, '--item', item, '--n', String(n), '--reps', String(reps)];
  const r =
    tool === 'scipy'
      ? spawnSync(PYTHON, [join(ROOT, 'tests/bench/reference.py'), ...args], { encoding: 'utf8', maxBuffer: 64 << 20 })
      : spawnSync(RSCRIPT, ['--vanilla', join(ROOT, 'tests/bench/reference.R'), ...args], { encoding: 'utf8', maxBuffer: 64 << 20 });
  if (r.status !== 0) throw new Error(`${tool} ${item} n=${n} failed:\n${r.stderr}`);
  const out = JSON.parse(r.stdout.trim().split('\n').pop()!) as { seconds: { total: number[] }; values: { welchT: number | null } };
  return { tool, item, n, medianMs: median(out.seconds.total) * 1000, welchT: out.values.welchT };
}

// ───────────────────────────── worker crossover ─────────────────────────────

async function workerCrossover(): Promise<{ totalN: number; inThreadMs: number; workerMs: number }[]> {
  const pool = new ComparePool(1);
  const out: { totalN: number; inThreadMs: number; workerMs: number }[] = [];
  const ctx: FlagContext = {
    alpha: 0.05,
    labels: { a: 'A', b: 'B' },
    scale: { min: -50, max: 50, integer: false },
    rejected: {},
    plannedPerCondition: null,
    allocation: { conditions: ['A', 'B'], observed: [0, 0] },
    excludedCount: 0,
  };
  try {
    for (const total of [2_000, 10_000, 40_000, 100_000]) {
      const half = Math.min(total / 2, stream('continuous-a').length, stream('continuous-b').length);
      const shared = (name: StreamName): Float64Array => {
        const sorted = Float64Array.from(stream(name).subarray(0, half)).sort();
        const sab = new Float64Array(new SharedArrayBuffer(sorted.length * 8));
        sab.set(sorted);
        return sab;
      };
      const task = { a: shared('continuous-a'), b: shared('continuous-b'), alternative: 'two-sided' as const, confidenceLevel: 0.95, flagContext: ctx };
      const inThread: number[] = [];
      const inWorker: number[] = [];
      await pool.run({ kind: 'compare', ...task }); // start-up and JIT warm-up
      compareSorted(task);
      for (let r = 0; r < 5; r++) {
        let t = performance.now();
        compareSorted(task);
        inThread.push(performance.now() - t);
        t = performance.now();
        await pool.run({ kind: 'compare', ...task });
        inWorker.push(performance.now() - t);
      }
      out.push({ totalN: 2 * half, inThreadMs: median(inThread), workerMs: median(inWorker) });
    }
  } finally {
    await pool.close();
  }
  return out;
}

// ───────────────────────────── main ─────────────────────────────

async function main(): Promise<void> {
  const started = new Date().toISOString();
  const m0 = machine();
  ensureData(DATA_DIR, log);
  const refs = referenceAvailable();
  for (const n of refs.notices) log(n);

  const env = newServiceEnv('compare');
  const service: ServiceRow[] = [];
  const responsive: Responsiveness[] = [];
  const references: ReferenceRun[] = [];
  let memory: { peakMb: number; currentMb: number } | null = null;
  let s = await startService(env);
  const key = env.adminKey;
  try {
    expectStatus(await api(s.url, 'POST', '/v1/experiments', key, EXPERIMENT), [201], 'create experiment');
    expectStatus(await api(s.url, 'POST', '/v1/experiments', key, PROBE), [201], 'create probe experiment');
    for (const n of SIZES) {
      await loadUpTo(s, key, n);
      log(`n = ${fmt.int(n)} per condition: restart (cold)`);
      await s.stop();
      s = await startService(env);
      const cold: Record<string, { ms: number; body: ComparisonBodyLite }> = {};
      for (const item of ITEMS) cold[item] = await compareOnce(s, key, item);
      const warm: Record<string, number> = {};
      for (const item of ITEMS) {
        const ms: number[] = [];
        for (let r = 0; r < 3; r++) ms.push((await compareOnce(s, key, item)).ms);
        warm[item] = median(ms);
      }
      // One more answer, then both comparisons; three times (median). The answers are the next ones of streams a
      // and b, so the next load step repeats them with the same content (idempotent) and the data stay a prefix.
      const afterMs: Record<string, number[]> = { integer: [], continuous: [] };
      for (let r = 0; r < 3; r++) {
        const extra = r === 0 ? responseOf('a', n) : r === 1 ? responseOf('b', n) : responseOf('a', n + 1);
        expectStatus(await api(s.url, 'POST', `/v1/experiments/${EXPERIMENT.id}/responses`, key, extra), [200, 201], 'one more answer');
        for (const item of ITEMS) afterMs[item].push((await compareOnce(s, key, item)).ms);
      }
      const after: Record<string, number> = {};
      for (const item of ITEMS) after[item] = median(afterMs[item]);
      for (const item of ITEMS) {
        const b = cold[item].body;
        service.push({ item, n, coldMs: cold[item].ms, warmMs: warm[item], afterNewMs: after[item], welchT: b.welch.t, welchP: b.welch.p, nA: b.groups.a.n });
        log(`  ${item}: cold ${fmt.ms(cold[item].ms)} ms, warm ${fmt.ms(warm[item])} ms, after-new-data ${fmt.ms(after[item])} ms`);
      }
      if (n >= RESPONSIVE_MIN) {
        log(`  responsiveness at n = ${fmt.int(n)}: restart, then the continuous comparison with 4 clients posting`);
        await s.stop();
        s = await startService(env);
        responsive.push(await withProbe(s, key, n, 'cold', 'continuous'));
        responsive.push(await withProbe(s, key, n, 'ingest only (control)', null, responsive[responsive.length - 1].comparisonMs));
        expectStatus(await api(s.url, 'POST', `/v1/experiments/${EXPERIMENT.id}/responses`, key, responseOf('b', n + 1)), [200, 201], 'one more answer');
        responsive.push(await withProbe(s, key, n, 'after-new-data', 'continuous'));
        for (const r of responsive.slice(-3)) {
          log(`  ${r.phase}: comparison ${fmt.ms(r.comparisonMs)} ms; probe p99 ${fmt.ms(r.probeP99Ms)} ms, max ${fmt.ms(r.probeMaxMs)} ms; event loop max ${fmt.ms(r.eventLoopMaxMs)} ms`);
        }
      }
      if (n === MAX) memory = rssOf(s.pid);
      for (const item of ITEMS) {
        for (const tool of ['scipy', 'R'] as const) {
          if (!refs[tool]) continue;
          log(`  ${tool} ${item} n = ${fmt.int(n)}`);
          references.push(runReference(tool, item, n));
        }
      }
    }
  } finally {
    await s.stop();
    env.cleanup();
  }
  log('worker crossover (in-process)');
  const crossover = await workerCrossover();

  // ───── tables ─────
  const out = process.stdout;
  const ref = (tool: 'scipy' | 'R', item: Item, n: number) => references.find((r) => r.tool === tool && r.item === item && r.n === n);
  out.write(`\nBenchmark 3/4 — comparison latency over HTTP (ms, client side) and the same data through scipy and R (ms, data in memory)\n\n`);
  const rows = service.map((r) => {
    const sp = ref('scipy', r.item, r.n);
    const rr = ref('R', r.item, r.n);
    return [
      r.item === 'integer' ? 'integer 0–100' : 'continuous',
      fmt.int(r.n),
      fmt.ms(r.coldMs),
      fmt.ms(r.warmMs),
      fmt.ms(r.afterNewMs),
      fmt.ms(sp?.medianMs),
      fmt.ms(rr?.medianMs),
      fmt.ratio(sp ? r.coldMs / sp.medianMs : null),
      fmt.ratio(sp ? r.afterNewMs / sp.medianMs : null),
      fmt.ratio(rr ? r.coldMs / rr.medianMs : null),
      fmt.ratio(rr ? r.afterNewMs / rr.medianMs : null),
    ];
  });
  out.write(
    table(
      ['item', 'n/condition', 'cold', 'warm', 'after-new-data', 'scipy', 'R', 'cold/scipy', 'new-data/scipy', 'cold/R', 'new-data/R'],
      rows,
    ) + '\n\n',
  );
  const agreement = service
    .map((r) => {
      const sp = ref('scipy', r.item, r.n);
      return sp && sp.welchT !== null && r.welchT !== null ? Math.abs(r.welchT - sp.welchT) / Math.abs(sp.welchT) : null;
    })
    .filter((x): x is number => x !== null);
  if (agreement.length > 0) out.write(`Cross-check: Welch t of the cold reply vs scipy on the same numbers, worst relative difference ${Math.max(...agreement).toExponential(1)}\n\n`);

  out.write('Benchmark 5 — scaling exponent (least-squares slope of log time on log n)\n\n');
  const exp = (pts: { n: number; seconds: number }[]) => {
    const e = fitExponent(pts);
    return e === null ? '–' : e.toFixed(2);
  };
  const expRows: string[][] = [];
  for (const item of ITEMS) {
    const rs = service.filter((r) => r.item === item);
    expRows.push([`service ${item} cold`, exp(rs.map((r) => ({ n: r.n, seconds: r.coldMs })))]);
    expRows.push([`service ${item} after-new-data`, exp(rs.map((r) => ({ n: r.n, seconds: r.afterNewMs })))]);
    for (const tool of ['scipy', 'R'] as const) {
      const pts = references.filter((r) => r.tool === tool && r.item === item).map((r) => ({ n: r.n, seconds: r.medianMs }));
      if (pts.length > 0) expRows.push([`${tool} ${item}`, exp(pts)]);
    }
  }
  out.write(table(['path', 'exponent'], expRows) + '\n(expected: ≈ 0 for the counts path, whose work depends on the 101 possible values; ≈ 1 for reads and sorts; the service figures include a constant HTTP cost, which flattens small sizes)\n\n');

  if (responsive.length > 0) {
    out.write('Benchmark 6 — responsiveness: continuous comparison while 4 clients post single responses (ms)\n\n');
    out.write(
      table(
        ['n/condition', 'phase', 'comparison', 'ingest requests', 'ingest p50', 'ingest p99', 'ingest max', 'event-loop delay max'],
        responsive.map((r) => [fmt.int(r.n), r.phase, fmt.ms(r.comparisonMs), String(r.probeRequests), fmt.ms(r.probeP50Ms), fmt.ms(r.probeP99Ms), fmt.ms(r.probeMaxMs), fmt.ms(r.eventLoopMaxMs)]),
      ) + '\n\n',
    );
  }
  out.write('Worker crossover — stats of a continuous comparison in-thread vs through the worker pool (ms, in-process)\n\n');
  out.write(table(['total n (a + b)', 'in-thread', 'worker (incl. messaging)'], crossover.map((c) => [fmt.int(c.totalN), fmt.ms(c.inThreadMs), fmt.ms(c.workerMs)])) + '\n\n');
  if (memory) out.write(`Benchmark 7 — memory: server peak RSS ${memory.peakMb.toFixed(0)} MB (now ${memory.currentMb.toFixed(0)} MB) holding 2 × ${fmt.int(MAX)} continuous values (target < ${TARGETS.peakRssMb} MB)\n\n`);
  out.write(`Load through the batch route: ${loadRates.map((l) => `${fmt.int(l.to)}/condition at ${fmt.int(l.responsesPerSecond)} responses/s`).join('; ')}\n\n`);

  // ───── verdicts ─────
  const verdicts: string[] = [];
  const at = (item: Item) => service.find((r) => r.item === item && r.n === 1e6);
  const check = (name: string, value: number | null | undefined, ok: (v: number) => boolean, shown: string): void => {
    if (value === null || value === undefined || !Number.isFinite(value)) return;
    verdicts.push(`${ok(value) ? 'MET' : 'MISSED'} ${name}: ${shown}`);
  };
  const i6 = at('integer');
  const c6 = at('continuous');
  check('integer 1e6 warm < 10 ms', i6?.warmMs, (v) => v < TARGETS.integerWarmMsAt1e6, `${fmt.ms(i6?.warmMs)} ms`);
  check('integer 1e6 after-new-data < 10 ms', i6?.afterNewMs, (v) => v < TARGETS.integerAfterNewMsAt1e6, `${fmt.ms(i6?.afterNewMs)} ms`);
  check('integer 1e6 cold < 100 ms', i6?.coldMs, (v) => v < TARGETS.integerColdMsAt1e6, `${fmt.ms(i6?.coldMs)} ms`);
  check('continuous 1e6 cold < 3 s', c6?.coldMs, (v) => v < TARGETS.continuousColdMsAt1e6, `${fmt.ms(c6?.coldMs)} ms`);
  check('continuous 1e6 after-new-data < 1.5 s', c6?.afterNewMs, (v) => v < TARGETS.continuousAfterNewMsAt1e6, `${fmt.ms(c6?.afterNewMs)} ms`);
  const si = ref('scipy', 'integer', 1e6);
  if (i6 && si) check('integer 1e6 ≥ 20× faster than scipy (cold)', si.medianMs / i6.coldMs, (v) => v >= TARGETS.integerSpeedupVsScipyAt1e6, `${(si.medianMs / i6.coldMs).toFixed(0)}×`);
  const sc = ref('scipy', 'continuous', 1e6);
  if (c6 && sc) {
    check('continuous 1e6 cold no slower than scipy', c6.coldMs / sc.medianMs, (v) => v <= 1, `${(c6.coldMs / sc.medianMs).toFixed(2)} × scipy`);
    check('continuous 1e6 after-new-data no slower than scipy', c6.afterNewMs / sc.medianMs, (v) => v <= 1, `${(c6.afterNewMs / sc.medianMs).toFixed(2)} × scipy`);
  }
  const worstLag = Math.max(...responsive.filter((r) => r.phase !== 'ingest only (control)').map((r) => r.eventLoopMaxMs ?? 0));
  if (responsive.length > 0) check('no event-loop stall over 50 ms', worstLag, (v) => v <= TARGETS.eventLoopStallMs, `worst ${fmt.ms(worstLag)} ms`);
  if (memory && MAX >= 1e6) check('peak RSS < 500 MB with 2,000,000 continuous values', memory.peakMb, (v) => v < TARGETS.peakRssMb, `${memory.peakMb.toFixed(0)} MB`);
  for (const v of verdicts) out.write(`${v}\n`);

  const summary = `comparisons: ${verdicts.filter((v) => v.startsWith('MET')).length} of ${verdicts.length} targets met${verdicts.some((v) => v.startsWith('MISSED')) ? ` (missed: ${verdicts.filter((v) => v.startsWith('MISSED')).map((v) => v.slice(7).split(':')[0]).join('; ')})` : ''}`;
  finish('comparisons', log, {
    startedAt: started,
    finishedAt: new Date().toISOString(),
    machine: { ...m0, loadAverageEnd: machine().loadAverage },
    sizes: SIZES,
    references: { scipy: refs.scipy, R: refs.R, notices: refs.notices },
    service,
    referenceRuns: references,
    responsiveness: responsive,
    crossover,
    memory,
    loadRates,
    targets: TARGETS,
    verdicts,
    summary,
  });
}

await main();
