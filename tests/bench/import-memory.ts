/**
 * Benchmark: import a 1,000,000-row CSV with the CLI in a child process and report its peak memory (max RSS)
 * and speed. `npm run bench:import` (builds first, then runs `node dist/server/main.js import …`).
 *
 * The file (invented water-utility answers, about 45 MB) is written to a temporary folder, with a fresh
 * database; both are removed afterwards. Peak RSS comes from the child's own process.resourceUsage() report
 * (maxRSS, KiB), printed by a small wrapper, so it measures exactly the import process.
 *
 *   ROWS=200000 npm run bench:import     fewer rows
 *   IMPORT_CPU_PROF=/tmp/prof ROWS=200000 npx tsx tests/bench/import-memory.ts
 *                                        also write a V8 CPU profile of the import process into that folder and print
 *                                        the functions with the most self time (after npm run build)
 */
import { spawn } from 'node:child_process';
import { createWriteStream, mkdtempSync, readdirSync, readFileSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { once } from 'node:events';

const ROOT = fileURLToPath(new URL('../..', import.meta.url));
const ROWS = Number(process.env.ROWS ?? 1_000_000);

async function writeCsv(path: string, rows: number): Promise<void> {
  const out = createWriteStream(path);
  out.write('responseId,condition,respondent,satisfaction,trust,fair_price\n');
  let chunk = '';
  for (let i = 0; i < rows; i++) {
    const bill = i % 2 === 0;
    chunk += `r-${i},${bill ? 'bill-first' : 'service-first'},,${(i * 7) % 11},${1 + ((i * 3) % 7)},${((i * 37) % 2001) / 10}\n`;
    if (chunk.length > 1 << 20) {
      if (!out.write(chunk)) await once(out, 'drain');
      chunk = '';
    }
  }
  out.end(chunk);
  await once(out, 'finish');
}

function run(args: string[], env: NodeJS.ProcessEnv): Promise<{ code: number; stdout: string; stderr: string }> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, args, { cwd: ROOT, env, stdio: ['ignore', 'pipe', 'pipe'] });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d) => (stdout += d));
    child.stderr.on('data', (d) => {
      stderr += d;
      process.stderr.write(d);
    });
    child.on('error', reject);
    child.on('close', (code) => resolve({ code: code ?? 1, stdout, stderr }));
  });
}

async function main(): Promise<void> {
  const dir = mkdtempSync(join(tmpdir(), 'splitballot-import-bench-'));
  try {
    const csv = join(dir, 'answers.csv');
    const db = join(dir, 'bench.db');
    const env = { ...process.env, SPLITBALLOT_DB: db, LOG_LEVEL: 'silent' };
    process.stderr.write(`writing ${ROWS.toLocaleString('en')} rows to ${csv}…\n`);
    await writeCsv(csv, ROWS);
    const size = statSync(csv).size;

    // Create the experiment with the same code path as the service (in a child, so this process stays small).
    const setup = `
      import { openSqliteStore } from './dist/server/store/sqlite/store.js';
      const s = openSqliteStore(process.env.SPLITBALLOT_DB);
      const r = await s.experiments.create({ id: 'water-bill-2027', title: 'Import benchmark (invented data)',
        conditions: [{ id: 'bill-first', label: 'bill first' }, { id: 'service-first', label: 'service first' }],
        measures: [
          { id: 'satisfaction', label: 'Satisfaction', min: 0, max: 10, integer: true, required: true },
          { id: 'trust', label: 'Trust', min: 1, max: 7, integer: true, required: true },
          { id: 'fair_price', label: 'Fair price', min: 0, max: 200, integer: false, required: true }],
        plannedPerCondition: null, alpha: 0.05, thankYouUrl: null });
      if (r.kind !== 'created') throw new Error('setup failed');
      await s.close();`;
    const made = await run(['--input-type=module', '-e', setup], env);
    if (made.code !== 0) throw new Error(`setup failed: ${made.stderr}`);

    // The import itself; the wrapper prints the child's peak RSS after the CLI returns.
    const wrapper = `
      import { runCli } from './dist/server/cli/run.js';
      const code = await runCli(process.argv.slice(1), { stdout: process.stdout, stderr: process.stderr, env: process.env });
      process.stdout.write('maxRSS_KiB=' + process.resourceUsage().maxRSS + '\\n');
      process.exit(code);`;
    const started = Date.now();
    const profileDir = process.env.IMPORT_CPU_PROF;
    const profiling = profileDir ? ['--cpu-prof', '--cpu-prof-dir', profileDir] : [];
    const r = await run([...profiling, '--input-type=module', '-e', wrapper, 'import', '--experiment', 'water-bill-2027', csv], env);
    const seconds = (Date.now() - started) / 1000;
    if (r.code !== 0) throw new Error(`import failed (${r.code}): ${r.stdout}${r.stderr}`);
    const rss = Number(/maxRSS_KiB=(\d+)/.exec(r.stdout)?.[1] ?? NaN) / 1024;
    const summary = r.stdout.split('\n').find((l) => l.startsWith('imported')) ?? '';
    process.stdout.write(`${summary}\n`);
    process.stdout.write(
      `import benchmark: ${ROWS.toLocaleString('en')} rows (${(size / 1e6).toFixed(1)} MB CSV) in ${seconds.toFixed(1)} s ` +
        `(${Math.round(ROWS / seconds).toLocaleString('en')} rows/s incl. start-up), peak RSS ${rss.toFixed(0)} MiB\n`,
    );
    if (profileDir) process.stdout.write(topSelfTime(profileDir));
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/** The 15 functions with the most self time in the newest .cpuprofile of `folder` (share of all samples). */
function topSelfTime(folder: string): string {
  const newest = readdirSync(folder).filter((f) => f.endsWith('.cpuprofile')).map((f) => join(folder, f)).sort((a, b) => statSync(b).mtimeMs - statSync(a).mtimeMs)[0];
  if (!newest) return 'no CPU profile written\n';
  const profile = JSON.parse(readFileSync(newest, 'utf8')) as { nodes: { id: number; callFrame: { functionName: string; url: string; lineNumber: number } }[]; samples: number[] };
  const byId = new Map(profile.nodes.map((n) => [n.id, n]));
  const self = new Map<string, number>();
  for (const id of profile.samples) {
    const f = byId.get(id)!.callFrame;
    const name = `${f.functionName || '(anonymous)'} ${f.url.replace(/^.*\/(dist|node_modules)\//, '$1/')}:${f.lineNumber + 1}`;
    self.set(name, (self.get(name) ?? 0) + 1);
  }
  const total = profile.samples.length;
  const top = [...self].sort((a, b) => b[1] - a[1]).slice(0, 15);
  return `CPU profile ${newest}: self time of ${total} samples\n${top.map(([name, n]) => `  ${((100 * n) / total).toFixed(1).padStart(5)} %  ${name}`).join('\n')}\n`;
}

main().catch((err: unknown) => {
  process.stderr.write(`bench:import: ${(err as Error).message}\n`);
  process.exit(1);
});
