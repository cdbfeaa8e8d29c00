/**
 * Bounded read cost (issue 12): what hostile or careless reads cost another study's ingest, through the built server
 * (child process, temp DB file, 127.0.0.1). A probe posts single answers to another study one after another during
 * every phase; its latencies are the figure.
 *
 *   npm run build && npx tsx tests/bench/read-cost.ts [--n 50000] [--seconds 20] [--quick] [--cpu-prof DIR] [--stall-ms 50]
 *
 * Phases (data invented: tests/bench/data.ts streams and arithmetic patterns):
 *   idle           the probe alone (a control)
 *   families       GET …/comparisons?pairs=all on 8 conditions × 60 items × 300 answers per condition, one at a
 *                  time, a new confidenceLevel each time (0.800, 0.801, …) — now 422 (over the cap) or 400 (level not
 *                  in the set) at once; then pairs=first with each level of the documented set; then pairs=all
 *                  on 50 conditions × 20 items (1,000 answers) once
 *   old page × 3   three clients behaving as the results page did: on every change (2 answers/s arrive), re-fetch
 *                  the comparison, chart.svg and trajectory.svg of every item, no If-None-Match
 *   new page × 3   three clients behaving as the page does now: at most one refresh every 2 s, If-None-Match on
 *                  every JSON and SVG, no trajectory (folded until opened)
 *   flood          one key asking for comparisons back to back without If-None-Match, a new option each time
 *
 * Printed per phase: the probe's p50 / p99 / max (ms) and failed answers, the server's event-loop delay max and p99
 * (ms; prom-client's nodejs_eventloop_lag_max_seconds and _p99_seconds, read from perf_hooks.monitorEventLoopDelay in
 * the server and reset at each scrape, so one scrape before and one after a phase give that phase's figures), the
 * replies by status (0: the connection failed), the computations the server made in the phase (cache misses of
 * comparisons, charts, omnibus and trajectories, with their mean wall time from the request's start: time spent
 * waiting for a worker counts), and the server's peak rss. A control — a bare Node process that does nothing but
 * measure its own event-loop delay the same way — runs beside the server: its max is what the machine alone does
 * to a loop (a process that is not scheduled cannot run its loop; on a shared 2-core machine with a load average of 7
 * that alone reaches 100 ms and more), so a server delay near the control's is the machine, not the code. --family-requests K (default 40) sets how
 * many pairs=all requests are sent.
 *
 * --cpu-prof DIR runs the server with `node --cpu-prof` (profile written to DIR when it stops) and then prints every
 * stretch of the server's loop busy for at least --stall-ms (default 50) ms, labelled with its phase, with the
 * functions that held it (tests/bench/stall-profile.ts). Profiling slows the server a little: compare figures of runs
 * with the same flags.
 */
import { spawn } from 'node:child_process';
import { mkdirSync, readdirSync, readFileSync } from 'node:fs';
import { createInterface } from 'node:readline';
import { join, resolve } from 'node:path';
import { generateStream } from './data.js';
import { busyStretches, formatStretches, type CpuProfile } from './stall-profile.js';
import { abExperiment, api, argNum, argv, batchJson, expectStatus, fmt, logger, newServiceEnv, percentile, responseJson, rssOf, sendBatches, startService, table, QUICK, type RunningServer } from './harness.js';

const log = logger('read-cost');
const N = argNum('--n', QUICK ? 10_000 : 50_000);
const SECONDS = argNum('--seconds', QUICK ? 8 : 20);
/** pairs=all requests with a new confidenceLevel each (the old code took seconds for each). */
const FAMILY_REQUESTS = argNum('--family-requests', 40);
const POLLED = abExperiment('bench-polled', 'Polled study (invented data)');
const PROFILE_AT = argv.indexOf('--cpu-prof');
const PROFILE_DIR = PROFILE_AT >= 0 ? resolve(argv[PROFILE_AT + 1]) : null;
const STALL_MS = argNum('--stall-ms', 50);

/** The monotonic clock in µs: the clock of the server's CPU profile timestamps (same machine). */
const monotonicMicros = (): number => Number(process.hrtime.bigint() / 1000n);

interface Scrape {
  /** Event-loop delay since the previous scrape, ms. */
  max: number;
  p99: number;
  /** Running totals: computations (cache misses) and their summed duration, s. */
  computed: number;
  computeSeconds: number;
}

/** The server's event-loop delay (max and p99, ms) since the previous scrape, and its computation counters. */
async function lagMs(s: RunningServer, key: string): Promise<Scrape | null> {
  const r = await fetch(`${s.url}/metrics`, { headers: { authorization: `Bearer ${key}` } });
  if (!r.ok) return null;
  const text = await r.text();
  const value = (name: string, labels = ''): number => {
    const m = text.match(new RegExp(`^${name}${labels ? `\\{${labels}\\}` : '(?:\\{[^}]*\\})?'}\\s+([0-9.eE+-]+)`, 'm'));
    return m ? Number(m[1]) : NaN;
  };
  return {
    max: value('nodejs_eventloop_lag_max_seconds') * 1000,
    p99: value('nodejs_eventloop_lag_p99_seconds') * 1000,
    computed: value('splitballot_comparison_duration_seconds_count'),
    computeSeconds: value('splitballot_comparison_duration_seconds_sum'),
  };
}

/**
 * A bare Node process measuring its own event-loop delay (perf_hooks.monitorEventLoopDelay, as prom-client does in
 * the server): each `scrape()` answers the max and p99 (ms) since the previous one.
 */
function controlLoop(): { scrape(): Promise<{ max: number; p99: number }>; stop(): void } {
  const code =
    "const { monitorEventLoopDelay } = require('node:perf_hooks');" +
    'const h = monitorEventLoopDelay({ resolution: 10 }); h.enable();' +
    "require('node:readline').createInterface({ input: process.stdin }).on('line', () => {" +
    "  process.stdout.write(JSON.stringify({ max: h.max / 1e6, p99: h.percentile(99) / 1e6 }) + '\\n'); h.reset(); });";
  const child = spawn(process.execPath, ['-e', code], { stdio: ['pipe', 'pipe', 'inherit'] });
  const waiting: ((v: { max: number; p99: number }) => void)[] = [];
  createInterface({ input: child.stdout! }).on('line', (line) => waiting.shift()?.(JSON.parse(line) as { max: number; p99: number }));
  return {
    scrape: () =>
      new Promise((resolve) => {
        waiting.push(resolve);
        child.stdin!.write('scrape\n');
      }),
    stop: () => child.kill(),
  };
}
const control = controlLoop();

/** Single answers to the probe study, one after another, until stopped. */
function probe(s: RunningServer, key: string): { stop(): Promise<number[]>; failures(): number } {
  let running = true;
  let failed = 0;
  const ms: number[] = [];
  let i = 0;
  const loop = (async () => {
    while (running) {
      const t0 = performance.now();
      try {
        const r = await fetch(`${s.url}/v1/experiments/bench-probe/responses`, {
          method: 'POST',
          headers: { authorization: `Bearer ${key}`, 'content-type': 'application/json' },
          body: responseJson(`p-${Date.now()}-${i++}`, i % 2 ? 'a' : 'b', { score: i % 101, amount: (i % 17) - 8 }),
        });
        await r.text();
        if (r.status >= 400) failed++;
      } catch {
        failed++; // connection reset or refused: counted, and its time kept
      }
      ms.push(performance.now() - t0);
      await new Promise((resolve) => setTimeout(resolve, 20));
    }
  })();
  return {
    async stop() {
      running = false;
      await loop;
      return ms;
    },
    failures: () => failed,
  };
}

async function createWide(s: RunningServer, key: string, id: string, k: number, m: number, perCondition: number): Promise<void> {
  const conditions = Array.from({ length: k }, (_, i) => ({ id: `c${i}` }));
  const measures = Array.from({ length: m }, (_, j) => ({ id: `q${j}`, min: 0, max: 10, integer: true }));
  expectStatus(await api(s.url, 'POST', '/v1/experiments', key, { id, title: 'Wide study (invented data)', conditions, measures }), [201], `create ${id}`);
  const items: string[] = [];
  for (let c = 0; c < k; c++) {
    for (let r = 0; r < perCondition; r++) {
      items.push(responseJson(`${id}-${c}-${r}`, `c${c}`, Object.fromEntries(measures.map((q, j) => [q.id, (r * 7 + c * 3 + j) % 11]))));
    }
  }
  const per = 5000;
  await sendBatches(s.url, id, key, (i) => batchJson(items.slice(i * per, (i + 1) * per)), Math.ceil(items.length / per), 1);
}

interface PhaseResult {
  name: string;
  probe: number[];
  lag: Scrape | null;
  /** The server's computation totals when the phase began. */
  before: Scrape | null;
  control: { max: number; p99: number };
  /** When the phase ran, µs on the monotonic clock. */
  startMicros: number;
  endMicros: number;
  statuses: Map<number, number>;
  note: string;
}

async function phase(s: RunningServer, key: string, name: string, work: (count: (status: number) => void) => Promise<string>): Promise<PhaseResult> {
  log(`phase: ${name}`);
  const before = await lagMs(s, key);
  await control.scrape();
  const startMicros = monotonicMicros();
  const statuses = new Map<number, number>();
  const p = probe(s, key);
  const note = await work((st) => statuses.set(st, (statuses.get(st) ?? 0) + 1));
  const ms = await p.stop();
  const failed = p.failures();
  const endMicros = monotonicMicros();
  const controlLag = await control.scrape();
  return { name, probe: ms, lag: await lagMs(s, key), before, control: controlLag, startMicros, endMicros, statuses, note: failed > 0 ? `${note} ${failed} probe answers failed`.trim() : note };
}

/** A page-like client: `old` re-fetches everything on every change; `new` revalidates at most every 2 s. */
async function pageClient(s: RunningServer, key: string, style: 'old' | 'new', until: number, count: (status: number) => void): Promise<void> {
  const etags = new Map<string, string>();
  let lastVersion = -1;
  while (performance.now() < until) {
    const def = await api<{ dataVersion: number }>(s.url, 'GET', `/v1/experiments/${POLLED.id}`, key);
    count(def.status);
    const changed = def.body.dataVersion !== lastVersion;
    lastVersion = def.body.dataVersion;
    if (style === 'old' && !changed) {
      await new Promise((resolve) => setTimeout(resolve, 400));
      continue;
    }
    const urls: string[] = [];
    for (const m of ['score', 'amount']) {
      const base = `/v1/experiments/${POLLED.id}/comparisons/${m}`;
      urls.push(base, `${base}/chart.svg`);
      if (style === 'old') urls.push(`${base}/trajectory.svg`);
    }
    await Promise.all(
      urls.map(async (u) => {
        const tag = style === 'new' ? etags.get(u) : undefined;
        const r = await fetch(`${s.url}${u}`, { headers: { authorization: `Bearer ${key}`, ...(tag ? { 'if-none-match': tag } : {}) } });
        await r.arrayBuffer();
        count(r.status);
        const e = r.headers.get('etag');
        if (e) etags.set(u, e);
      }),
    );
    await new Promise((resolve) => setTimeout(resolve, style === 'old' ? 400 : 2000));
  }
}

/** 2 answers a second to the polled study until `until`. */
async function trickle(s: RunningServer, key: string, until: number): Promise<void> {
  let i = 0;
  while (performance.now() < until) {
    await api(s.url, 'POST', `/v1/experiments/${POLLED.id}/responses`, key, responseJson(`live-${Date.now()}-${i++}`, i % 2 ? 'a' : 'b', { score: i % 101, amount: (i % 13) - 6 }));
    await new Promise((resolve) => setTimeout(resolve, 500));
  }
}

async function main(): Promise<void> {
  const env = newServiceEnv('read-cost');
  env.extraEnv = { SPLITBALLOT_RATE_LIMIT_READ: '6000' };
  if (PROFILE_DIR) {
    mkdirSync(PROFILE_DIR, { recursive: true });
    env.nodeArgs = ['--cpu-prof', '--cpu-prof-dir', PROFILE_DIR, '--cpu-prof-interval', '1000'];
  }
  const profilesBefore = new Set(PROFILE_DIR ? readdirSync(PROFILE_DIR) : []);
  const key = env.adminKey;
  const s = await startService(env);
  const results: PhaseResult[] = [];
  try {
    expectStatus(await api(s.url, 'POST', '/v1/experiments', key, abExperiment('bench-probe', 'Probe study (invented data)')), [201], 'probe study');
    expectStatus(await api(s.url, 'POST', '/v1/experiments', key, POLLED), [201], 'polled study');
    log(`loading 2 × ${fmt.int(N)} answers into the polled study`);
    const ia = generateStream('integer-a', N);
    const ib = generateStream('integer-b', N);
    const ca = generateStream('continuous-a', N);
    const cb = generateStream('continuous-b', N);
    const per = 5000;
    await sendBatches(s.url, POLLED.id, key, (i) => {
      const items: string[] = [];
      for (let k = i * per; k < Math.min(N, (i + 1) * per); k++) items.push(responseJson(`a-${k}`, 'a', { score: ia[k], amount: ca[k] }), responseJson(`b-${k}`, 'b', { score: ib[k], amount: cb[k] }));
      return batchJson(items);
    }, Math.ceil(N / per), 2);
    log('loading the wide studies');
    await createWide(s, key, 'bench-wide', 8, 60, 300);
    await createWide(s, key, 'bench-huge', 50, 20, 20);

    results.push(await phase(s, key, 'idle', async () => {
      await new Promise((resolve) => setTimeout(resolve, 3000));
      return '';
    }));

    results.push(await phase(s, key, 'families', async (count) => {
      let bodyBytes = 0;
      for (let i = 0; i < FAMILY_REQUESTS; i++) {
        const r = await fetch(`${s.url}/v1/experiments/bench-wide/comparisons?pairs=all&confidenceLevel=${(0.8 + i / 1000).toFixed(3)}`, { headers: { authorization: `Bearer ${key}` } }).catch(() => null);
        if (r) await r.arrayBuffer();
        count(r ? r.status : 0);
      }
      for (const level of [0.5, 0.8, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999]) {
        const r = await api(s.url, 'GET', `/v1/experiments/bench-wide/comparisons?pairs=first&confidenceLevel=${level}`, key);
        count(r.status);
      }
      const t0 = performance.now();
      const huge = await fetch(`${s.url}/v1/experiments/bench-huge/comparisons?pairs=all`, { headers: { authorization: `Bearer ${key}` } }).catch(() => null);
      bodyBytes = huge ? (await huge.arrayBuffer()).byteLength : 0;
      count(huge ? huge.status : 0);
      return `50 × 20 pairs=all: HTTP ${huge ? huge.status : 'failed'}, ${fmt.int(bodyBytes)} bytes in ${fmt.int(performance.now() - t0)} ms`;
    }));

    for (const style of ['old', 'new'] as const) {
      results.push(await phase(s, key, `${style} page × 3`, async (count) => {
        const until = performance.now() + SECONDS * 1000;
        await Promise.all([trickle(s, key, until), pageClient(s, key, style, until, count), pageClient(s, key, style, until, count), pageClient(s, key, style, until, count)]);
        return '';
      }));
    }

    results.push(await phase(s, key, 'flood', async (count) => {
      const until = performance.now() + SECONDS * 1000;
      const alternatives = ['two-sided', 'less', 'greater'];
      const levels = [0.5, 0.8, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999];
      let i = 0;
      const one = async () => {
        while (performance.now() < until) {
          const r = await fetch(`${s.url}/v1/experiments/${POLLED.id}/comparisons/${i % 2 ? 'amount' : 'score'}?confidenceLevel=${levels[i % 8]}&alternative=${alternatives[i % 3]}&includeExcluded=${i % 5 ? 'false' : 'true'}`, {
            headers: { authorization: `Bearer ${key}` },
          });
          i++;
          await r.arrayBuffer();
          count(r.status);
        }
      };
      await Promise.all([one(), one(), one(), one()]);
      return `${fmt.int(i)} requests from 4 loops`;
    }));

    const rss = rssOf(s.pid);
    const rows = results.map((r) => [
      r.name,
      String(r.probe.length),
      percentile(r.probe, 50).toFixed(1),
      percentile(r.probe, 99).toFixed(1),
      Math.max(...r.probe).toFixed(1),
      r.lag === null ? '–' : r.lag.max.toFixed(0),
      r.lag === null ? '–' : r.lag.p99.toFixed(0),
      `${r.control.max.toFixed(0)} / ${r.control.p99.toFixed(0)}`,
      r.lag === null || r.before === null
        ? '–'
        : `${r.lag.computed - r.before.computed} (${r.lag.computed > r.before.computed ? fmt.int((1000 * (r.lag.computeSeconds - r.before.computeSeconds)) / (r.lag.computed - r.before.computed)) : 0} ms)`,
      [...r.statuses].sort((a, b) => a[0] - b[0]).map(([st, c]) => `${st}×${c}`).join(' '),
      r.note,
    ]);
    const summary =
      `read cost, polled study 2 × ${fmt.int(N)}, ${SECONDS} s per page phase; peak rss ${rss ? rss.peakMb.toFixed(0) : '?'} MB\n` +
      table(['phase', 'probes', 'ingest p50 ms', 'p99 ms', 'max ms', 'loop delay max ms', 'loop delay p99 ms', 'control max / p99 ms', 'computed (mean)', 'replies', 'note'], rows);
    process.stdout.write(`${summary}\n`);
  } finally {
    control.stop();
    await s.stop();
    env.cleanup();
  }
  if (PROFILE_DIR) {
    const written = readdirSync(PROFILE_DIR).filter((f) => f.endsWith('.cpuprofile') && !profilesBefore.has(f));
    if (written.length === 0) throw new Error(`the server wrote no CPU profile to ${PROFILE_DIR}`);
    const file = join(PROFILE_DIR, written[0]);
    const profile = JSON.parse(readFileSync(file, 'utf8')) as CpuProfile;
    const label = (at: number): string => results.find((r) => at >= r.startMicros && at <= r.endMicros)?.name ?? 'set-up';
    const stretches = busyStretches(profile, STALL_MS).filter((x) => label(x.startMicros) !== 'set-up');
    const counts = results.map((r) => `${r.name}: ${stretches.filter((x) => label(x.startMicros) === r.name).length}`).join(', ');
    process.stdout.write(`\nserver loop busy ≥ ${STALL_MS} ms during the phases (${file}): ${counts}\n${formatStretches(stretches, label)}\n`);
  }
}

main().catch((err) => {
  console.error(err);
  process.exit(1);
});
