/**
 * `npm run bench` (after tsc): every service benchmark of issue 8, in order, each in its own process so that one
 * cannot warm or pollute the next. Each prints its table on stdout, progress on stderr, writes
 * bench-results/<name>.json and ends with a one-line summary; the summaries are repeated at the end.
 *
 *   npm run bench                 full sizes (≈ 15–20 min on a 2-core machine)
 *   npm run bench -- --quick      smaller sizes (≈ 3–5 min): 5 s autocannon, 200,000 batch responses, n ≤ 1e5
 *   npm run bench -- --only ingest-single,comparisons
 * Options after --quick/--only are passed through to every script (e.g. --skip-references).
 *
 *   1  ingest-single.ts   single-response ingest vs a bare fastify + INSERT baseline (autocannon)
 *   2  ingest-batch.ts    batch ingest of 1,000,000 responses, and a profile of the batch path
 *   3–7 comparisons.ts    comparison latency cold/warm/after-new-data, scipy and R on the same data, scaling
 *                         exponents, event-loop delay and ingest latency during large comparisons, peak RSS
 * The statistics engine alone against scipy and R is `npm run bench:stats` (tests/bench/stats.ts).
 */
import { spawnSync } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const HERE = dirname(fileURLToPath(import.meta.url));
const ALL = ['ingest-single', 'ingest-batch', 'comparisons'];
const args = process.argv.slice(2);
const onlyAt = args.indexOf('--only');
const only = onlyAt >= 0 ? args[onlyAt + 1].split(',') : ALL;
const passThrough = args.filter((a, i) => a !== '--only' && (onlyAt < 0 || i !== onlyAt + 1));

const summaries: string[] = [];
let failed = 0;
const t0 = Date.now();
for (const name of ALL.filter((n) => only.includes(n))) {
  process.stderr.write(`\n[bench] ── ${name} ──\n`);
  const r = spawnSync(process.execPath, ['--import', 'tsx', join(HERE, `${name}.ts`), ...passThrough], {
    stdio: ['ignore', 'pipe', 'inherit'],
    encoding: 'utf8',
    maxBuffer: 64 << 20,
  });
  process.stdout.write(r.stdout ?? '');
  const last = (r.stdout ?? '').trim().split('\n').pop() ?? '';
  if (r.status === 0) summaries.push(last);
  else {
    failed++;
    summaries.push(`${name}: FAILED (exit ${r.status ?? r.signal})`);
  }
}
process.stdout.write(`\nSummary (${((Date.now() - t0) / 60000).toFixed(1)} min):\n${summaries.map((s) => `  ${s}`).join('\n')}\n`);
process.exitCode = failed > 0 ? 1 : 0;
