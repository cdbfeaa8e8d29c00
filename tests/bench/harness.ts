/**
 * Shared pieces of the service benchmarks (ingest-single.ts, ingest-batch.ts, comparisons.ts): start the BUILT
 * server (dist/server/main.js serve) as a child process on a temporary database file, talk to it over HTTP on
 * 127.0.0.1, read its peak memory, and print/write results. A script helper, not a test.
 */
import type autocannon from 'autocannon';
import { spawn, type ChildProcess } from 'node:child_process';
import { randomBytes } from 'node:crypto';
import { existsSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import os from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

import { waterBillDefinition } from '../helpers/water.js';

export const ROOT = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
export const RESULTS_DIR = join(ROOT, 'bench-results');
export const DATA_DIR = join(RESULTS_DIR, 'data');
export const MAIN_JS = join(ROOT, 'dist', 'server', 'main.js');

export const argv = process.argv.slice(2);
export const QUICK = argv.includes('--quick');

/** The number after `name` on the command line, or `fallback` when the flag is absent. */
export function argNum(name: string, fallback: number): number {
  const i = argv.indexOf(name);
  return i >= 0 ? Number(argv[i + 1]) : fallback;
}

export function logger(name: string): (msg: string) => void {
  return (msg) => process.stderr.write(`[bench:${name}] ${msg}\n`);
}

export function median(xs: readonly number[]): number {
  if (xs.length === 0) return NaN;
  const s = [...xs].sort((x, y) => x - y);
  const m = s.length >> 1;
  return s.length % 2 === 1 ? s[m] : (s[m - 1] + s[m]) / 2;
}

export function percentile(xs: readonly number[], p: number): number {
  if (xs.length === 0) return NaN;
  const s = [...xs].sort((x, y) => x - y);
  return s[Math.min(s.length - 1, Math.max(0, Math.ceil((p / 100) * s.length) - 1))];
}

/** Least-squares slope of log(y) on log(x). */
export function fitExponent(points: readonly { n: number; seconds: number }[]): number | null {
  const ps = points.filter((p) => p.seconds > 0 && Number.isFinite(p.seconds));
  if (ps.length < 2) return null;
  const xs = ps.map((p) => Math.log(p.n));
  const ys = ps.map((p) => Math.log(p.seconds));
  const mx = xs.reduce((s, x) => s + x, 0) / xs.length;
  const my = ys.reduce((s, y) => s + y, 0) / ys.length;
  let sxy = 0;
  let sxx = 0;
  for (let i = 0; i < xs.length; i++) {
    sxy += (xs[i] - mx) * (ys[i] - my);
    sxx += (xs[i] - mx) ** 2;
  }
  return sxx > 0 ? sxy / sxx : null;
}

export function table(header: string[], rows: string[][]): string {
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => (r[i] ?? '').length)));
  const line = (cells: string[]) => `| ${cells.map((c, i) => c.padEnd(widths[i])).join(' | ')} |`;
  return [line(header), `|${widths.map((w) => '-'.repeat(w + 2)).join('|')}|`, ...rows.map(line)].join('\n');
}

export const fmt = {
  ms: (x: number | null | undefined): string => (x === null || x === undefined || !Number.isFinite(x) ? '–' : x < 10 ? x.toFixed(2) : x < 100 ? x.toFixed(1) : x.toFixed(0)),
  ratio: (x: number | null | undefined): string => (x === null || x === undefined || !Number.isFinite(x) ? '–' : x < 0.1 ? x.toExponential(1) : x.toFixed(2)),
  int: (x: number): string => Math.round(x).toLocaleString('en'),
};

export function machine(): Record<string, unknown> {
  return {
    cpus: os.cpus().length,
    cpuModel: os.cpus()[0]?.model ?? 'unknown',
    totalMemGiB: os.totalmem() / 2 ** 30,
    node: process.version,
    platform: `${os.platform()} ${os.release()}`,
    loadAverage: os.loadavg(),
  };
}

export function writeResults(name: string, data: Record<string, unknown>): string {
  mkdirSync(RESULTS_DIR, { recursive: true });
  const file = join(RESULTS_DIR, `${name}${QUICK ? '-quick' : ''}.json`);
  writeFileSync(file, JSON.stringify({ note: `Written by tests/bench/${name}.ts on invented data.`, quick: QUICK, ...data }, null, 2) + '\n');
  return file;
}

/** Write bench-results/<name>.json (see writeResults), log where, and print the one-line summary last on stdout. */
export function finish(name: string, log: (msg: string) => void, data: Record<string, unknown> & { summary: string }): void {
  log(`wrote ${writeResults(name, data)}`);
  process.stdout.write(`${data.summary}\n`);
}

/** The figures every autocannon run reports (ingest-single.ts, load.ts). */
export function autocannonFigures(result: autocannon.Result) {
  return {
    requestsPerSecond: result.requests.average,
    requestsPerSecondMedian: result.requests.p50,
    latencyP50Ms: result.latency.p50,
    latencyP99Ms: result.latency.p99,
    latencyMaxMs: result.latency.max,
    total: result.requests.total,
    non2xx: result.non2xx,
    errors: result.errors,
    timeouts: result.timeouts,
  };
}

// ───────────────────────────── experiment definitions ─────────────────────────────

type Measure = { id: string; label: string; min: number; max: number; integer: boolean; required: boolean };

/** The water-utility demo study (tests/helpers/water.ts) under a title naming the benchmark, with no planned size. */
export function waterExperiment(title: string) {
  return waterBillDefinition({ title, plannedPerCondition: undefined });
}

/** Conditions a and b with a 0–100 integer score and a continuous amount, then `extra` (ingest-batch.ts, comparisons.ts). */
export function abExperiment(id: string, title: string, extra: Measure[] = []) {
  return {
    id,
    title,
    conditions: [
      { id: 'a', label: 'Condition A' },
      { id: 'b', label: 'Condition B' },
    ],
    measures: [
      { id: 'score', label: 'Score 0–100', min: 0, max: 100, integer: true, required: true },
      { id: 'amount', label: 'Amount (continuous)', min: -50, max: 50, integer: false, required: true },
      ...extra,
    ],
    alpha: 0.05,
  };
}

export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.once('error', reject);
    s.listen(0, '127.0.0.1', () => {
      const port = (s.address() as { port: number }).port;
      s.close(() => resolve(port));
    });
  });
}

/** Peak and current resident memory of a process, MB (Linux /proc). */
export function rssOf(pid: number): { peakMb: number; currentMb: number } | null {
  try {
    const status = readFileSync(`/proc/${pid}/status`, 'utf8');
    const kb = (k: string): number => Number(status.match(new RegExp(`^${k}:\\s+(\\d+)`, 'm'))?.[1] ?? NaN);
    return { peakMb: kb('VmHWM') / 1024, currentMb: kb('VmRSS') / 1024 };
  } catch {
    return null;
  }
}

export interface RunningServer {
  url: string;
  port: number;
  pid: number;
  child: ChildProcess;
  stop(): Promise<void>;
}

async function waitFor(url: string, child: ChildProcess, what: string, stderr: () => string): Promise<void> {
  const deadline = Date.now() + 30_000;
  while (Date.now() < deadline) {
    if (child.exitCode !== null) throw new Error(`${what} exited with code ${child.exitCode}:\n${stderr()}`);
    try {
      const r = await fetch(url);
      if (r.ok) return;
    } catch {
      /* not yet */
    }
    await new Promise((r) => setTimeout(r, 50));
  }
  throw new Error(`${what} did not answer ${url} within 30 s:\n${stderr()}`);
}

function track(child: ChildProcess): () => string {
  let err = '';
  child.stderr?.on('data', (d: Buffer) => {
    err = (err + d.toString()).slice(-4000);
  });
  child.stdout?.on('data', () => {});
  return () => err;
}

function stopper(child: ChildProcess): () => Promise<void> {
  return () =>
    new Promise<void>((resolve) => {
      if (child.exitCode !== null || child.signalCode !== null) return resolve();
      const timer = setTimeout(() => child.kill('SIGKILL'), 20_000);
      child.once('exit', () => {
        clearTimeout(timer);
        resolve();
      });
      child.kill('SIGTERM');
    });
}

export interface ServiceEnv {
  dbPath: string;
  adminKey: string;
  extraEnv?: Record<string, string>;
  /** Extra node flags for the service process (e.g. --cpu-prof for profiling). */
  nodeArgs?: string[];
}

/** A temporary folder and an admin secret for one service database. */
export function newServiceEnv(prefix: string): ServiceEnv & { dir: string; cleanup(): void } {
  const dir = mkdtempSync(join(os.tmpdir(), `splitballot-bench-${prefix}-`));
  return {
    dir,
    dbPath: join(dir, 'bench.db'),
    adminKey: randomBytes(32).toString('hex'),
    cleanup: () => rmSync(dir, { recursive: true, force: true }),
  };
}

/** Start `node dist/server/main.js serve` on a free port; resolves once /healthz answers. */
export async function startService(env: ServiceEnv): Promise<RunningServer> {
  if (!existsSync(MAIN_JS)) throw new Error(`${MAIN_JS} is missing: run "npm run build" first (npm run bench does)`);
  const port = await freePort();
  const child = spawn(process.execPath, [...(env.nodeArgs ?? []), MAIN_JS, 'serve'], {
    cwd: ROOT,
    env: {
      ...process.env,
      PORT: String(port),
      HOST: '127.0.0.1',
      SPLITBALLOT_DB: env.dbPath,
      SPLITBALLOT_ADMIN_KEY: env.adminKey,
      SPLITBALLOT_RATE_LIMIT_INGEST: '0',
      SPLITBALLOT_RATE_LIMIT_READ: '0',
      LOG_LEVEL: 'warn',
      ...(env.extraEnv ?? {}),
    },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  const url = `http://127.0.0.1:${port}`;
  const err = track(child);
  await waitFor(`${url}/healthz`, child, 'the service', err);
  return { url, port, pid: child.pid!, child, stop: stopper(child) };
}

/** Start the bare baseline server (tests/bench/baseline-server.ts) on a free port. */
export async function startBaseline(dbPath: string): Promise<RunningServer> {
  const port = await freePort();
  const script = join(ROOT, 'tests', 'bench', 'baseline-server.ts');
  const child = spawn(process.execPath, ['--import', 'tsx', script], {
    cwd: ROOT,
    env: { ...process.env, PORT: String(port), BASELINE_DB: dbPath },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  const url = `http://127.0.0.1:${port}`;
  const err = track(child);
  await waitFor(`${url}/healthz`, child, 'the baseline server', err);
  return { url, port, pid: child.pid!, child, stop: stopper(child) };
}

export async function api<T = unknown>(
  base: string,
  method: string,
  path: string,
  key: string,
  body?: unknown,
  headers: Record<string, string> = {},
): Promise<{ status: number; body: T; headers: Headers; ms: number }> {
  const t0 = performance.now();
  const r = await fetch(`${base}${path}`, {
    method,
    headers: { authorization: `Bearer ${key}`, ...(body === undefined ? {} : { 'content-type': 'application/json' }), ...headers },
    body: body === undefined ? undefined : typeof body === 'string' ? body : JSON.stringify(body),
  });
  const text = await r.text();
  const ms = performance.now() - t0;
  let parsed: unknown = text;
  try {
    parsed = text ? JSON.parse(text) : null;
  } catch {
    /* keep text */
  }
  return { status: r.status, body: parsed as T, headers: r.headers, ms };
}

export function expectStatus(r: { status: number; body: unknown }, ok: number[], what: string): void {
  if (!ok.includes(r.status)) throw new Error(`${what}: HTTP ${r.status} ${JSON.stringify(r.body).slice(0, 800)}`);
}

// ───────────────────────────── batch bodies and sending ─────────────────────────────

/** One response as the batch body's JSON text (numbers by String(), which is JSON's own shortest form). */
export function responseJson(responseId: string, condition: string, values: Record<string, number>): string {
  let v = '';
  for (const k in values) v += `${v === '' ? '' : ','}"${k}":${String(values[k])}`;
  return `{"responseId":"${responseId}","condition":"${condition}","values":{${v}}}`;
}

export function batchJson(items: string[]): string {
  return `{"responses":[${items.join(',')}]}`;
}

/**
 * POST batch bodies with `concurrency` requests in flight; returns per-batch latencies (ms) and the total time.
 * Throws on the first non-2xx answer.
 */
export async function sendBatches(
  base: string,
  experimentId: string,
  key: string,
  bodies: string[] | ((i: number) => string),
  count: number,
  concurrency = 2,
  onProgress?: (done: number) => void,
): Promise<{ ms: number[]; totalMs: number }> {
  const ms: number[] = new Array(count);
  let next = 0;
  let done = 0;
  const t0 = performance.now();
  const worker = async (): Promise<void> => {
    while (next < count) {
      const i = next++;
      const body = typeof bodies === 'function' ? bodies(i) : bodies[i];
      const r = await api(base, 'POST', `/v1/experiments/${experimentId}/responses/batch`, key, body);
      if (r.status !== 201 && r.status !== 200) throw new Error(`batch ${i}: HTTP ${r.status} ${JSON.stringify(r.body).slice(0, 600)}`);
      ms[i] = r.ms;
      done++;
      onProgress?.(done);
    }
  };
  await Promise.all(Array.from({ length: Math.min(concurrency, count) }, worker));
  return { ms, totalMs: performance.now() - t0 };
}
