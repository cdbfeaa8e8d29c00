/**
 * Large reads leave the request thread free (issue 12, "never blocks the event loop for more than ~50 ms"): on a
 * listening app with a study of 2 × 10,000 answers (a 0–100 integer item read as counts, and a continuous amount)
 * and a study of 8 conditions × 6 integer items × 600 answers per condition, every request below a first computation (a
 * cache miss), four at a time: the box plots of both items and of the 8 conditions (O(n) summaries, thousands of
 * formatted dots), the continuous item's comparisons and the omnibus tests of the 8 conditions (28 Games–Howell
 * p-values each) run in the worker pool (asserted through the service's path counters); the integer item's
 * comparisons (per-value counts: a few ms of CPU whatever n) run in-thread beside them. The request thread's event-loop delay (perf_hooks.monitorEventLoopDelay) stays under 50 ms beyond
 * what the machine itself does to a loop during the same window: a bare Node process measuring its own loop delay
 * (the control) is that allowance, since a process the scheduler does not run cannot run its loop either. On a
 * quiet machine the control's max is a few ms, so the bound is ≈ 50 ms. One retry on other options (fresh cache
 * misses), the bound unchanged. Before the charts and the omnibus moved to the worker pool, a chart of the continuous
 * item held the loop for 50–200 ms on a loaded machine and an 8-condition omnibus 75–83 ms of CPU
 * (tests/bench/read-cost.ts --cpu-prof). Bounded: ≈ 20 s.
 */
import { spawn } from 'node:child_process';
import type { AddressInfo } from 'node:net';
import { monitorEventLoopDelay } from 'node:perf_hooks';
import { createInterface } from 'node:readline';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { warmUp } from '../../server/services/comparisons/service.js';

let t: TestApp;
let origin = '';
let readKey = '';
let attempt = 0;

async function post(path: string, payload: unknown): Promise<void> {
  const res = await t.request({ method: 'POST', url: path, payload: payload as Record<string, unknown> });
  expect(res.statusCode, res.body).toBeLessThan(300);
}

async function batches(id: string, all: unknown[]): Promise<void> {
  for (let i = 0; i < all.length; i += 5000) await post(`/v1/experiments/${id}/responses/batch`, { responses: all.slice(i, i + 5000) });
}

/** A bare Node process measuring its own event-loop delay: `read()` answers its max (ms) since the previous read. */
function controlLoop(): { read(): Promise<number>; stop(): void } {
  const code =
    "const h = require('node:perf_hooks').monitorEventLoopDelay({ resolution: 5 }); h.enable();" +
    "require('node:readline').createInterface({ input: process.stdin }).on('line', () => { process.stdout.write(h.max / 1e6 + '\\n'); h.reset(); });";
  const child = spawn(process.execPath, ['-e', code], { stdio: ['pipe', 'pipe', 'inherit'] });
  const waiting: ((ms: number) => void)[] = [];
  createInterface({ input: child.stdout! }).on('line', (line) => waiting.shift()?.(Number(line)));
  return {
    read: () =>
      new Promise((resolve) => {
        waiting.push(resolve);
        child.stdin!.write('read\n');
      }),
    stop: () => child.kill(),
  };
}

beforeAll(async () => {
  t = await startTestApp({ config: { logLevel: 'warn' } });
  const large = [
    { id: 'score', min: 0, max: 100, integer: true },
    { id: 'amount', min: -50, max: 50, integer: false },
  ];
  await post('/v1/experiments', { id: 'large', title: 'Invented large study', conditions: [{ id: 'a' }, { id: 'b' }], measures: large });
  const answers = [];
  for (let r = 0; r < 10_000; r++) {
    for (const c of ['a', 'b']) answers.push({ responseId: `${c}-${r}`, condition: c, values: { score: (r * 37 + (c === 'a' ? 3 : 0)) % 101, amount: ((r * 7.31) % 99) - 49.5 + (c === 'b' ? 0.25 : 0) } });
  }
  await batches('large', answers);
  await post('/v1/experiments/large/responses/a-7/exclusion', { reason: 'invented exclusion' });
  const conditions = Array.from({ length: 8 }, (_, i) => ({ id: `c${i}` }));
  const items = Array.from({ length: 6 }, (_, j) => ({ id: `q${j}`, min: 0, max: 10, integer: true }));
  await post('/v1/experiments', { id: 'eight', title: 'Invented eight-condition study', conditions, measures: items });
  const wide = [];
  for (let c = 0; c < 8; c++) for (let r = 0; r < 600; r++) wide.push({ condition: `c${c}`, values: Object.fromEntries(items.map((q, j) => [q.id, (r * 7 + c + j) % 11])) });
  await batches('eight', wide);
  readKey = await t.key('read');
  // As a served process does after listening (cli/serve.ts): warm the stats code and a worker, and compile each route's
  // reply path once, so that one-off compilation on first use is not counted as a stall below.
  warmUp();
  for (const url of ['/v1/experiments/large/comparisons/score?confidenceLevel=0.5', '/v1/experiments/large/comparisons/score/chart.svg?a=b&b=a', '/v1/experiments/eight/comparisons/q5/omnibus', '/v1/experiments/eight/comparisons/q5/omnibus/chart.svg']) {
    const res = await t.request({ method: 'GET', url });
    expect(res.statusCode, `${url}: ${res.body}`).toBe(200);
  }
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  origin = `http://127.0.0.1:${(t.app.server.address() as AddressInfo).port}`;
}, 120_000);

afterAll(async () => {
  await t.close();
});

describe('large reads off the request thread', () => {
  it('large charts, comparisons and 8-condition omnibus tests run in the worker pool: loop delay < 50 ms beyond the control', { timeout: 60_000, retry: 1 }, async () => {
    attempt++;
    const service = t.app.comparisons;
    const before = { charts: service.paths.workerCharts, computes: service.paths.workerComputes };
    // Cache misses only: the retry asks with other options.
    const excluded = attempt === 1 ? 'false' : 'true';
    const levels = attempt === 1 ? [0.8, 0.9, 0.95, 0.99] : [0.98, 0.995, 0.999, 0.9];
    const comparisons = (m: string) => levels.flatMap((level) => ['two-sided', 'less'].map((alt) => `/v1/experiments/large/comparisons/${m}?confidenceLevel=${level}&alternative=${alt}&includeExcluded=${excluded}`));
    const charts = (m: string) => ['', '&range=data'].map((range) => `/v1/experiments/large/comparisons/${m}/chart.svg?includeExcluded=${excluded}${range}`);
    // In the worker pool: every chart; the continuous item's comparisons and the omnibus tests.
    const workerCharts = [...charts('amount'), ...charts('score'), ...Array.from({ length: 5 }, (_, j) => `/v1/experiments/eight/comparisons/q${j}/omnibus/chart.svg?includeExcluded=${excluded}`)];
    const workerComputes = [...comparisons('amount'), ...Array.from({ length: 5 }, (_, j) => `/v1/experiments/eight/comparisons/q${j}/omnibus?includeExcluded=${excluded}`)];
    // In-thread beside them: the integer item's comparisons.
    const inThread = comparisons('score');
    const all = [...workerCharts, ...workerComputes, ...inThread];
    const queue = all.slice().sort((x, y) => x.length - y.length);
    const statuses: number[] = [];
    const control = controlLoop();
    await control.read(); // started; its delay so far is dropped
    const histogram = monitorEventLoopDelay({ resolution: 5 });
    let controlMax = 0;
    histogram.enable();
    try {
      await Promise.all(
        [1, 2, 3, 4].map(async () => {
          for (let url = queue.shift(); url !== undefined; url = queue.shift()) {
            const res = await fetch(origin + url, { headers: { authorization: `Bearer ${readKey}` } });
            await res.arrayBuffer();
            statuses.push(res.status);
          }
        }),
      );
    } finally {
      histogram.disable();
      controlMax = await control.read();
      control.stop();
    }
    const maxMs = histogram.max / 1e6;
    const summary = JSON.stringify({ attempt, requests: statuses.length, maxMs, p99Ms: histogram.percentile(99) / 1e6, controlMax, paths: service.paths });
    expect(statuses.length, summary).toBe(all.length);
    expect(statuses.every((st) => st === 200), summary).toBe(true);
    // Each of them was a first computation, and the large ones ran in the worker pool.
    expect(service.paths.workerCharts - before.charts, summary).toBe(workerCharts.length);
    expect(service.paths.workerComputes - before.computes, summary).toBe(workerComputes.length);
    expect(maxMs, summary).toBeLessThan(50 + controlMax);
  });
});
