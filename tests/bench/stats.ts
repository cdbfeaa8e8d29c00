/**
 * Statistics benchmark (issue 3 "Speed", issue 8 benchmarks 4 and 5). A script, not a test.
 *
 *   npx tsx tests/bench/stats.ts [--sizes 1000,10000,100000,1000000] [--skip-references]   (npm run bench:stats)
 *   BENCH_PYTHON / BENCH_RSCRIPT override the interpreters (default /usr/bin/python3 and Rscript).
 *
 * Measures, on invented data from a seeded generator (tests/bench/data.ts):
 *   compare            compare(a, b) on continuous raw answers in arrival order, n = 1e3 … 1e6 per group
 *   compare-sorted     compareSamples(fromSortedValues(a), fromSortedValues(b)) on the same values already
 *                      sorted (what the server does with values read in index order); informational
 *   counts             compareCounts(countsA, countsB) on a 0–100 integer item, n = 1e3 … 1e6 per group;
 *                      the counts are tallied outside the timing (the service keeps them at ingest); the
 *                      tally itself is timed separately and reported as "tally (ingest side)"
 *   compare-integer    compare(a, b) on the same integer answers, raw (what the counts path avoids); informational
 * For each: median of several repetitions (fewer at 1e6) after a warm-up on 1,000 answers, and peak resident
 * memory measured in a fresh child process per path and size (process.resourceUsage().maxRSS, the kernel's
 * high-water mark): after one call (the figure held against the target) and after all repetitions.
 * A least-squares fit of log(time) on log(n) gives the growth exponent per path.
 *
 * References (same numbers, read from the Float64 files; data already in memory when timed):
 *   tests/bench/reference.py  scipy ttest_ind(equal_var=False) + mannwhitneyu(asymptotic) + shapiro on 5,000
 *   tests/bench/reference.R   t.test + wilcox.test(exact = FALSE, correct = TRUE) + shapiro.test on 5,000
 * Each is skipped with a notice and the install command when it is not installed.
 *
 * Output: a table on stdout, progress on stderr, figures in bench-results/stats.json, one summary line last.
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, writeFileSync } from 'node:fs';
import os from 'node:os';
import { join, relative } from 'node:path';
import { fileURLToPath } from 'node:url';
import { compare, compareCounts, compareSamples, fromSortedValues, type Comparison } from '../../stats/index.js';
import { ensureData, MAX_N, readStream, tally, ITEM_MIN } from './data.js';
import { DATA_DIR, fitExponent, logger, median, RESULTS_DIR, ROOT } from './harness.js';

const THIS_FILE = fileURLToPath(import.meta.url);
/** Debian's interpreter with python3-scipy (the `python3` on PATH may be another one); override with BENCH_PYTHON. */
const PYTHON = process.env.BENCH_PYTHON ?? '/usr/bin/python3';
const RSCRIPT = process.env.BENCH_RSCRIPT ?? 'Rscript';

const TARGETS = {
  compareSecondsAt1e6: 1.5,
  compareMbAt1e6: 400,
  countsMs: 5,
  countsSpeedupVsScipyAt1e6: 20,
  compareVsScipyRatioMax: 1,
};

type ServicePath = 'compare' | 'compare-sorted' | 'counts' | 'compare-integer';
const SERVICE_PATHS: ServicePath[] = ['compare', 'compare-sorted', 'counts', 'compare-integer'];
const ITEM_OF: Record<ServicePath, 'continuous' | 'integer'> = {
  compare: 'continuous',
  'compare-sorted': 'continuous',
  counts: 'integer',
  'compare-integer': 'integer',
};
const LABEL: Record<ServicePath, string> = {
  compare: 'compare() continuous',
  'compare-sorted': 'compareSamples(sorted) continuous',
  counts: 'compareCounts() 0–100 item',
  'compare-integer': 'compare() 0–100 item raw',
};

function repsFor(path: ServicePath, n: number): number {
  if (path === 'counts') return 201;
  if (n <= 1e3) return 21;
  if (n <= 1e4) return 11;
  return 5;
}
function referenceRepsFor(n: number): number {
  if (n <= 1e3) return 11;
  if (n <= 1e4) return 7;
  if (n <= 1e5) return 5;
  return 3;
}

const log = logger('stats');

// ───────────────────────────── child: one path, one size ─────────────────────────────

interface ChildSpec {
  path: ServicePath;
  n: number;
  reps: number;
}

interface ChildResult {
  path: ServicePath;
  n: number;
  reps: number;
  /** Milliseconds per repetition, in order (the first is the first call at this size after the warm-up). */
  ms: number[];
  medianMs: number;
  /** Tally of raw integer answers into counts (counts path only): what ingest pays, O(n). */
  tallyMedianMs: number | null;
  rssBeforeMb: number;
  peakRssBeforeMb: number;
  peakRssAfterOneCallMb: number;
  peakRssAfterAllMb: number;
  values: { welchT: number | null; welchP: number | null; u: number | null; mannWhitneyP: number | null; mannWhitneyMethod: string };
}

function maxRssMb(): number {
  return process.resourceUsage().maxRSS / 1024; // maxRSS is in kilobytes
}

function runChild(spec: ChildSpec): void {
  const { path, n, reps } = spec;
  const item = ITEM_OF[path];
  const rawA = readStream(DATA_DIR, `${item}-a`, n);
  const rawB = readStream(DATA_DIR, `${item}-b`, n);
  let call: () => Comparison;
  let warm: () => Comparison;
  let tallyMedianMs: number | null = null;
  switch (path) {
    case 'compare': {
      call = () => compare(rawA, rawB);
      const wa = rawA.slice(0, 1000);
      const wb = rawB.slice(0, 1000);
      warm = () => compare(wa, wb);
      break;
    }
    case 'compare-sorted': {
      const sa = rawA.slice().sort();
      const sb = rawB.slice().sort();
      call = () => compareSamples(fromSortedValues(sa, 'a'), fromSortedValues(sb, 'b'));
      const wa = rawA.slice(0, 1000).sort();
      const wb = rawB.slice(0, 1000).sort();
      warm = () => compareSamples(fromSortedValues(wa, 'a'), fromSortedValues(wb, 'b'));
      break;
    }
    case 'counts': {
      const tallyMs: number[] = [];
      let ca = tally(rawA);
      let cb = tally(rawB);
      for (let r = 0; r < 5; r++) {
        const t0 = performance.now();
        ca = tally(rawA);
        cb = tally(rawB);
        tallyMs.push(performance.now() - t0);
      }
      tallyMedianMs = median(tallyMs);
      call = () => compareCounts(ca, cb, { min: ITEM_MIN });
      const wa = tally(rawA.subarray(0, 1000));
      const wb = tally(rawB.subarray(0, 1000));
      warm = () => compareCounts(wa, wb, { min: ITEM_MIN });
      break;
    }
    case 'compare-integer': {
      call = () => compare(rawA, rawB);
      const wa = rawA.slice(0, 1000);
      const wb = rawB.slice(0, 1000);
      warm = () => compare(wa, wb);
      break;
    }
  }
  for (let r = 0; r < (path === 'counts' ? 50 : 5); r++) warm();

  const rssBeforeMb = process.memoryUsage().rss / 2 ** 20;
  const peakRssBeforeMb = maxRssMb();
  const ms: number[] = [];
  let result: Comparison | null = null;
  let peakRssAfterOneCallMb = 0;
  for (let r = 0; r < reps; r++) {
    const t0 = performance.now();
    result = call();
    const dt = performance.now() - t0;
    ms.push(dt);
    if (r === 0) peakRssAfterOneCallMb = maxRssMb();
    if (path !== 'counts' || r === 0 || r === reps - 1) {
      log(`    ${LABEL[path]} n=${n}: rep ${r + 1}/${reps} ${dt.toFixed(dt < 10 ? 3 : 1)} ms`);
    }
  }
  const c = result as Comparison;
  const out: ChildResult = {
    path,
    n,
    reps,
    ms,
    medianMs: median(ms),
    tallyMedianMs,
    rssBeforeMb,
    peakRssBeforeMb,
    peakRssAfterOneCallMb,
    peakRssAfterAllMb: maxRssMb(),
    values: {
      welchT: c.welch.t,
      welchP: c.welch.p,
      u: c.mannWhitney.u,
      mannWhitneyP: c.mannWhitney.p,
      mannWhitneyMethod: c.mannWhitney.method,
    },
  };
  process.stdout.write(JSON.stringify(out) + '\n');
}

// ───────────────────────────── parent ─────────────────────────────

interface ReferenceResult {
  tool: 'scipy' | 'R';
  versions: Record<string, string>;
  item: 'continuous' | 'integer';
  n: number;
  reps: number;
  seconds: Record<string, number[]>;
  values: Record<string, number | null>;
  peakRssKb: number;
  peakRssKbBeforeTiming: number;
}

function spawnJson<T>(cmd: string, args: string[], what: string): T {
  const r = spawnSync(cmd, args, {
    cwd: ROOT,
    stdio: ['ignore', 'pipe', 'inherit'],
    encoding: 'utf8',
    maxBuffer: 64 * 2 ** 20,
    timeout: 30 * 60 * 1000,
  });
  if (r.error) throw new Error(`${what}: ${r.error.message}`);
  if (r.status !== 0) throw new Error(`${what}: exited with status ${String(r.status)} (signal ${String(r.signal)})`);
  const lines = r.stdout.trim().split('\n');
  return JSON.parse(lines[lines.length - 1]) as T;
}

function probe(cmd: string, args: string[]): { ok: boolean; detail: string } {
  const r = spawnSync(cmd, args, { encoding: 'utf8', timeout: 60_000 });
  if (r.error) return { ok: false, detail: r.error.message };
  if (r.status !== 0) return { ok: false, detail: (r.stderr || r.stdout).trim().split('\n').slice(-1)[0] ?? `status ${r.status}` };
  return { ok: true, detail: r.stdout.trim() };
}

function parseSizes(argv: string[]): number[] {
  const i = argv.indexOf('--sizes');
  if (i < 0) return [1e3, 1e4, 1e5, 1e6];
  const sizes = argv[i + 1].split(',').map((s) => Number(s));
  for (const s of sizes) {
    if (!Number.isInteger(s) || s < 10 || s > MAX_N) throw new RangeError(`--sizes: ${s} is not an integer in 10 … ${MAX_N}`);
  }
  return sizes;
}

const fmtN = (n: number): string => {
  const e = Math.log10(n);
  return Number.isInteger(e) ? `1e${e}` : String(n);
};
const fmtMs = (ms: number | null | undefined): string => {
  if (ms === null || ms === undefined) return '—';
  if (ms < 1) return `${ms.toFixed(3)} ms`;
  if (ms < 100) return `${ms.toFixed(2)} ms`;
  if (ms < 10_000) return `${ms.toFixed(0)} ms`;
  return `${(ms / 1000).toFixed(1)} s`;
};
const fmtRatio = (r: number | null): string =>
  r === null ? '—' : r >= 100 ? r.toFixed(0) : r >= 10 ? r.toFixed(1) : r >= 0.01 ? r.toFixed(2) : r.toExponential(1);
const relErr = (x: number | null | undefined, y: number | null | undefined): number | null =>
  x === null || x === undefined || y === null || y === undefined ? null : x === y ? 0 : Math.abs(x - y) / Math.max(Math.abs(x), Math.abs(y));

function table(header: string[], rows: string[][]): string {
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i].length)));
  const line = (cells: string[]): string => cells.map((c, i) => (i === 0 ? c.padEnd(widths[i]) : c.padStart(widths[i]))).join('  ');
  return [line(header), widths.map((w) => '─'.repeat(w)).join('  '), ...rows.map(line)].join('\n');
}

function main(): void {
  const argv = process.argv.slice(2);
  const sizes = parseSizes(argv);
  const skipReferences = argv.includes('--skip-references');
  const started = new Date();
  const load0 = os.loadavg();
  log(`machine: ${os.cpus().length} × ${os.cpus()[0]?.model ?? 'unknown CPU'}, ${(os.totalmem() / 2 ** 30).toFixed(1)} GiB, node ${process.version}; load average ${load0.map((l) => l.toFixed(2)).join(' ')}`);
  log('data: invented, from a seeded generator (tests/bench/data.ts)');
  if (ensureData(DATA_DIR, log)) log(`wrote ${relative(ROOT, DATA_DIR)}/*.f64`);
  else log(`reusing ${relative(ROOT, DATA_DIR)}/*.f64 (manifest matches)`);

  // Which references are available?
  const refs: Record<'scipy' | 'R', { available: boolean; notice: string }> = {
    scipy: { available: false, notice: '' },
    R: { available: false, notice: '' },
  };
  if (skipReferences) {
    refs.scipy.notice = refs.R.notice = 'skipped (--skip-references)';
  } else {
    const py = probe(PYTHON, ['-c', 'import numpy, scipy.stats; print(scipy.__version__)']);
    refs.scipy = py.ok
      ? { available: true, notice: `scipy ${py.detail} at ${PYTHON}` }
      : { available: false, notice: `scipy reference skipped: ${py.detail}. Install with: apt-get install python3-scipy` };
    const r = probe(RSCRIPT, ['-e', 'cat(R.version$major, R.version$minor, as.character(packageVersion("jsonlite")))']);
    refs.R = r.ok
      ? { available: true, notice: `R ${r.detail.split(' ').slice(0, 2).join('.')} (jsonlite ${r.detail.split(' ')[2]})` }
      : { available: false, notice: `R reference skipped: ${r.detail}. Install with: apt-get install r-base-core r-cran-jsonlite` };
  }
  for (const k of ['scipy', 'R'] as const) log(refs[k].notice);

  // Plan: for each size, every service path, then the references for both items (interleaved, so that
  // drifting load on the shared machine hits every contender alike).
  type Step = { kind: 'service'; path: ServicePath; n: number } | { kind: 'ref'; tool: 'scipy' | 'R'; item: 'continuous' | 'integer'; n: number };
  const steps: Step[] = [];
  for (const n of sizes) {
    for (const path of SERVICE_PATHS) steps.push({ kind: 'service', path, n });
    for (const tool of ['scipy', 'R'] as const) {
      if (!refs[tool].available) continue;
      for (const item of ['continuous', 'integer'] as const) steps.push({ kind: 'ref', tool, item, n });
    }
  }

  const service: ChildResult[] = [];
  const references: ReferenceResult[] = [];
  const failures: string[] = [];
  steps.forEach((step, i) => {
    const tag = `(${i + 1}/${steps.length})`;
    try {
      if (step.kind === 'service') {
        const reps = repsFor(step.path, step.n);
        log(`${tag} ${LABEL[step.path]}, n = ${fmtN(step.n)} per group, ${reps} reps, fresh child process`);
        const spec: ChildSpec = { path: step.path, n: step.n, reps };
        const res = spawnJson<ChildResult>(process.execPath, [...process.execArgv, THIS_FILE, '--child', JSON.stringify(spec)], `child ${step.path} n=${step.n}`);
        log(`${tag}   median ${fmtMs(res.medianMs)}, peak RSS ${res.peakRssAfterOneCallMb.toFixed(0)} MB after one call`);
        service.push(res);
      } else {
        const reps = referenceRepsFor(step.n);
        log(`${tag} ${step.tool} ${step.item}, n = ${fmtN(step.n)} per group, ${reps} reps`);
        const args = ['--dir', DATA_DIR, '--item', step.item, '--n', String(step.n), '--reps', String(reps)];
        const res =
          step.tool === 'scipy'
            ? spawnJson<ReferenceResult>(PYTHON, [join(ROOT, 'tests/bench/reference.py'), ...args], `scipy ${step.item} n=${step.n}`)
            : spawnJson<ReferenceResult>(RSCRIPT, ['--vanilla', join(ROOT, 'tests/bench/reference.R'), ...args], `R ${step.item} n=${step.n}`);
        log(`${tag}   median ${fmtMs(median(res.seconds.total) * 1000)}`);
        references.push(res);
      }
    } catch (e) {
      const msg = e instanceof Error ? e.message : String(e);
      failures.push(msg);
      log(`${tag} FAILED: ${msg}`);
    }
  });

  // ── Figures ──
  const svc = (path: ServicePath, n: number): ChildResult | undefined => service.find((s) => s.path === path && s.n === n);
  const ref = (tool: 'scipy' | 'R', item: 'continuous' | 'integer', n: number): ReferenceResult | undefined =>
    references.find((r) => r.tool === tool && r.item === item && r.n === n);
  const refMs = (tool: 'scipy' | 'R', item: 'continuous' | 'integer', n: number): number | null => {
    const r = ref(tool, item, n);
    return r ? median(r.seconds.total) * 1000 : null;
  };

  const rows: string[][] = [];
  const ratioRecords: Record<string, unknown>[] = [];
  for (const path of SERVICE_PATHS) {
    for (const n of sizes) {
      const s = svc(path, n);
      if (!s) continue;
      const item = ITEM_OF[path];
      const sp = refMs('scipy', item, n);
      const rr = refMs('R', item, n);
      const vsScipy = sp === null ? null : s.medianMs / sp;
      const vsR = rr === null ? null : s.medianMs / rr;
      ratioRecords.push({ path, n, serviceMs: s.medianMs, scipyMs: sp, rMs: rr, serviceOverScipy: vsScipy, serviceOverR: vsR });
      rows.push([
        LABEL[path],
        fmtN(n),
        String(s.reps),
        fmtMs(s.medianMs),
        fmtMs(Math.min(...s.ms)),
        fmtMs(s.ms[0]),
        `${s.peakRssAfterOneCallMb.toFixed(0)} MB`,
        `${s.peakRssBeforeMb.toFixed(0)} MB`,
        fmtMs(sp),
        fmtRatio(vsScipy),
        fmtMs(rr),
        fmtRatio(vsR),
      ]);
    }
  }

  // Step breakdown of the references (both scripts time the same three steps in the same order).
  const refRows: string[][] = [];
  for (const r of references) {
    const stepKeys = Object.keys(r.seconds).filter((k) => k !== 'total');
    refRows.push([
      `${r.tool} ${r.item}`,
      fmtN(r.n),
      String(r.reps),
      ...stepKeys.map((k) => fmtMs(median(r.seconds[k]) * 1000)),
      fmtMs(median(r.seconds.total) * 1000),
      `${(r.peakRssKb / 1024).toFixed(0)} MB`,
    ]);
  }

  // Exponents.
  const exponents: Record<string, number | null> = {};
  for (const path of SERVICE_PATHS) {
    exponents[path] = fitExponent(service.filter((s) => s.path === path).map((s) => ({ n: s.n, seconds: s.medianMs / 1000 })));
  }
  exponents['tally (ingest side)'] = fitExponent(
    service.filter((s) => s.path === 'counts' && s.tallyMedianMs !== null).map((s) => ({ n: s.n, seconds: (s.tallyMedianMs as number) / 1000 })),
  );
  for (const tool of ['scipy', 'R'] as const) {
    for (const item of ['continuous', 'integer'] as const) {
      const pts = references.filter((r) => r.tool === tool && r.item === item).map((r) => ({ n: r.n, seconds: median(r.seconds.total) }));
      if (pts.length > 0) exponents[`${tool} ${item}`] = fitExponent(pts);
    }
  }
  const expected: Record<string, string> = {
    compare: '≈ 1 (n log n sort)',
    'compare-sorted': '≈ 1',
    counts: '≈ 0 (O(K), K = 101)',
    'compare-integer': '≤ 1 (n log n sort; the rest is O(K), K = 101)',
    'tally (ingest side)': '≈ 1',
  };

  // Cross-check: the same numbers went in, so the statistics must agree.
  const agreement: Record<string, unknown>[] = [];
  let worstAgreement = 0;
  for (const r of references) {
    const s = svc(r.item === 'continuous' ? 'compare' : 'counts', r.n);
    if (!s) continue;
    const e = {
      tool: r.tool,
      item: r.item,
      n: r.n,
      welchT: relErr(s.values.welchT, r.values.welchT),
      welchP: relErr(s.values.welchP, r.values.welchP),
      u: relErr(s.values.u, r.values.u),
      mannWhitneyP: relErr(s.values.mannWhitneyP, r.values.mannWhitneyP),
    };
    for (const v of [e.welchT, e.welchP, e.u, e.mannWhitneyP]) if (v !== null) worstAgreement = Math.max(worstAgreement, v);
    agreement.push(e);
  }

  // Targets.
  const nTop = 1e6;
  const c6 = svc('compare', nTop);
  const k6 = svc('counts', nTop);
  const kMax = Math.max(0, ...service.filter((s) => s.path === 'counts').map((s) => s.medianMs));
  const sp6c = refMs('scipy', 'continuous', nTop);
  const sp6i = refMs('scipy', 'integer', nTop);
  type Verdict = { name: string; target: string; measured: string; met: boolean | null };
  const verdicts: Verdict[] = [
    {
      name: 'compare() time at 1e6 per group',
      target: `< ${TARGETS.compareSecondsAt1e6} s`,
      measured: c6 ? fmtMs(c6.medianMs) : 'not run',
      met: c6 ? c6.medianMs / 1000 < TARGETS.compareSecondsAt1e6 : null,
    },
    {
      name: 'compare() peak memory at 1e6 per group',
      target: `< ${TARGETS.compareMbAt1e6} MB`,
      measured: c6 ? `${c6.peakRssAfterOneCallMb.toFixed(0)} MB (whole process; ${c6.peakRssAfterAllMb.toFixed(0)} MB after ${c6.reps} calls)` : 'not run',
      met: c6 ? c6.peakRssAfterOneCallMb < TARGETS.compareMbAt1e6 : null,
    },
    {
      name: 'compareCounts() time (worst size)',
      target: `< ${TARGETS.countsMs} ms`,
      measured: service.some((s) => s.path === 'counts') ? fmtMs(kMax) : 'not run',
      met: service.some((s) => s.path === 'counts') ? kMax < TARGETS.countsMs : null,
    },
    {
      name: 'counts path vs scipy at 1e6 (speed-up)',
      target: `≥ ${TARGETS.countsSpeedupVsScipyAt1e6}×`,
      measured: k6 && sp6i !== null ? `${fmtRatio(sp6i / k6.medianMs)}×` : 'not run',
      met: k6 && sp6i !== null ? sp6i / k6.medianMs >= TARGETS.countsSpeedupVsScipyAt1e6 : null,
    },
    {
      name: 'compare() vs scipy at 1e6 (service/scipy)',
      target: `≤ ${TARGETS.compareVsScipyRatioMax}`,
      measured: c6 && sp6c !== null ? fmtRatio(c6.medianMs / sp6c) : 'not run',
      met: c6 && sp6c !== null ? c6.medianMs / sp6c <= TARGETS.compareVsScipyRatioMax : null,
    },
  ];
  if (c6 && sp6c !== null) {
    // "no slower than scipy" at every size, not only 1e6
    for (const n of sizes.filter((x) => x !== nTop)) {
      const s = svc('compare', n);
      const p = refMs('scipy', 'continuous', n);
      if (s && p !== null) {
        verdicts.push({
          name: `compare() vs scipy at ${fmtN(n)} (service/scipy)`,
          target: `≤ ${TARGETS.compareVsScipyRatioMax}`,
          measured: fmtRatio(s.medianMs / p),
          met: s.medianMs / p <= TARGETS.compareVsScipyRatioMax,
        });
      }
    }
  }

  const load1 = os.loadavg();
  const out = process.stdout;
  out.write('\nStatistics benchmark — invented data from a seeded generator; medians of the repetitions shown.\n');
  out.write(`Machine: ${os.cpus().length} × ${os.cpus()[0]?.model ?? 'unknown'}, node ${process.version}; load average ${load0[0].toFixed(2)} at start, ${load1[0].toFixed(2)} at end (shared: ratios from the same run matter more than absolute times).\n`);
  out.write('Times: median, minimum and first call (after a warm-up on 1,000 answers) of the repetitions.\n');
  out.write('Memory: peak RSS of a fresh child process per row (whole process: node + tsx + data); "before" is the peak before the first timed call.\n\n');
  out.write(
    table(['path', 'n/group', 'reps', 'median', 'min', 'first', 'peak RSS', 'before', 'scipy', 'svc/scipy', 'R', 'svc/R'], rows) + '\n\n',
  );
  const tallyRows = service
    .filter((s) => s.path === 'counts' && s.tallyMedianMs !== null)
    .map((s) => [fmtN(s.n), fmtMs(s.tallyMedianMs), fmtMs(s.medianMs)]);
  if (tallyRows.length > 0) {
    out.write('Counts path: tallying raw answers into counts (paid once at ingest, not per comparison):\n');
    out.write(table(['n/group', 'tally a+b', 'compareCounts'], tallyRows) + '\n\n');
  }
  if (refRows.length > 0) {
    out.write('References, step by step (data already in memory; Shapiro–Wilk on the first 5,000 of each group):\n');
    out.write(table(['reference', 'n/group', 'reps', 't-test', 'rank-sum', 'Shapiro ×2', 'total', 'peak RSS'], refRows) + '\n\n');
  }
  out.write('Growth exponent (least squares of log time on log n):\n');
  out.write(
    table(
      ['path', 'exponent', 'expected'],
      Object.entries(exponents).map(([k, v]) => [k, v === null ? '—' : v.toFixed(2), expected[k] ?? '≈ 1']),
    ) + '\n\n',
  );
  if (agreement.length > 0) {
    out.write(`Cross-check on the same numbers (relative difference, service vs reference; worst ${worstAgreement.toExponential(1)}):\n`);
    const e = (v: unknown): string => (typeof v === 'number' ? v.toExponential(1) : '—');
    out.write(
      table(
        ['reference', 'n/group', 'welch t', 'welch p', 'U', 'rank-sum p'],
        agreement.map((a) => [`${String(a.tool)} ${String(a.item)}`, fmtN(a.n as number), e(a.welchT), e(a.welchP), e(a.u), e(a.mannWhitneyP)]),
      ) + '\n\n',
    );
  }
  out.write('Targets:\n');
  out.write(
    table(
      ['target', 'goal', 'measured', 'verdict'],
      verdicts.map((v) => [v.name, v.target, v.measured, v.met === null ? 'not run' : v.met ? 'met' : 'MISSED']),
    ) + '\n',
  );
  for (const k of ['scipy', 'R'] as const) if (!refs[k].available) out.write(`Notice: ${refs[k].notice}\n`);
  for (const f of failures) out.write(`Failure: ${f}\n`);

  mkdirSync(RESULTS_DIR, { recursive: true });
  // Only the full default run writes stats.json; a partial run (--sizes, --skip-references) must not clobber it.
  const partial = argv.includes('--sizes') || skipReferences;
  const jsonPath = join(RESULTS_DIR, partial ? 'stats-partial.json' : 'stats.json');
  const missed = verdicts.filter((v) => v.met === false);
  const summary =
    `stats bench: compare() 1e6 ${c6 ? fmtMs(c6.medianMs) : '—'} / ${c6 ? c6.peakRssAfterOneCallMb.toFixed(0) : '—'} MB, ` +
    `compareCounts() ≤ ${fmtMs(kMax)}, ` +
    `counts vs scipy ${k6 && sp6i !== null ? fmtRatio(sp6i / k6.medianMs) + '×' : '—'}, ` +
    `compare/scipy ${c6 && sp6c !== null ? fmtRatio(c6.medianMs / sp6c) : '—'}; ` +
    `${verdicts.filter((v) => v.met === true).length}/${verdicts.filter((v) => v.met !== null).length} targets met` +
    (missed.length > 0 ? ` (missed: ${missed.map((v) => v.name).join('; ')})` : '') +
    (failures.length > 0 ? `; ${failures.length} step(s) failed` : '') +
    ` → ${relative(ROOT, jsonPath)}`;
  writeFileSync(
    jsonPath,
    JSON.stringify(
      {
        note: 'Written by tests/bench/stats.ts on invented data from a seeded generator (tests/bench/data.ts). Times in milliseconds, memory in MB (peak RSS of a fresh child process per path and size).',
        startedAt: started.toISOString(),
        finishedAt: new Date().toISOString(),
        machine: {
          cpus: os.cpus().length,
          cpuModel: os.cpus()[0]?.model ?? null,
          totalMemGiB: os.totalmem() / 2 ** 30,
          node: process.version,
          platform: `${os.platform()} ${os.release()}`,
          loadAverageStart: load0,
          loadAverageEnd: load1,
        },
        sizes,
        targets: TARGETS,
        references: { scipy: refs.scipy, R: refs.R },
        service,
        referenceRuns: references,
        ratios: ratioRecords,
        exponents,
        agreement,
        verdicts,
        failures,
        summary,
      },
      null,
      2,
    ) + '\n',
  );
  out.write(`\n${summary}\n`);
  if (failures.length > 0) process.exitCode = 1;
}

const childIdx = process.argv.indexOf('--child');
if (childIdx >= 0) {
  runChild(JSON.parse(process.argv[childIdx + 1]) as ChildSpec);
} else {
  main();
}
