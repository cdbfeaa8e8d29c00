/**
 * `npm run demo`: the invented water-utility study, end to end over HTTP.
 *
 * Starts the service on a free port of 127.0.0.1 with a temporary database, creates the study
 * `water-bill-2027` (does showing customers their last bill right before the satisfaction question lower the
 * rating?), posts a few hundred simulated answers from a seeded generator at a brisk pace — including impossible
 * values that the service rejects with 422 and a handful of extreme but valid fair-price answers — then prints
 * the comparisons as a terminal table (Welch's t-test and the rank-sum test side by side for every item, the
 * estimates, the equivalence verdicts against each item's margin, the flags in words) and the results page's address
 * with a read key. A second invented study with three versions of a reminder letter shows the omnibus tests (Welch's
 * ANOVA, Kruskal–Wallis) and every pair. Then it keeps serving until Ctrl-C.
 *
 *   npm run demo                  serve until Ctrl-C
 *   npm run demo -- --once        print and exit 0 (used by tests/cli/demo.test.ts)
 *   options: --port N (default: a free port), --seed N (default 2027), --per-condition N (default 250)
 *
 * All data are invented; the output says so.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { buildApp } from '../http/app.js';
import { generateSecret, hashSecret } from '../services/keys.js';
import { openSqliteStore } from '../store/sqlite/store.js';

export const DEMO_ID = 'water-bill-2027';

export const DEMO_DEFINITION = {
  id: DEMO_ID,
  title: 'Water utility customer survey 2027: bill first or service first? (invented data)',
  conditions: [
    { id: 'bill-first', label: 'Last bill shown right before the satisfaction question' },
    { id: 'service-first', label: 'Service questions first, bill afterwards' },
  ],
  measures: [
    // Equivalence margins, chosen before any answer (invented): half a point on 0–10, half a point on 1–7, 5 units of price.
    { id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true, required: true, equivalenceMargin: 0.5 },
    { id: 'trust', label: 'I trust the utility to charge fairly (1–7 agreement)', min: 1, max: 7, integer: true, required: true, equivalenceMargin: 0.5 },
    { id: 'fair_price', label: 'Fair monthly price (EUR)', min: 0, max: 200, integer: false, required: true, equivalenceMargin: 5 },
  ],
  plannedPerCondition: 400,
  alpha: 0.05,
};

/** The second invented study: the same utility's reminder letter in three versions (three conditions). */
export const LETTER_ID = 'water-letter-2027';

export const LETTER_DEFINITION = {
  id: LETTER_ID,
  title: 'Water utility reminder letter 2027: which of three versions? (invented data)',
  conditions: [
    { id: 'plain', label: 'Plain letter' },
    { id: 'bill-chart', label: 'Letter with a chart of the bill' },
    { id: 'neighbours', label: 'Letter comparing use with the neighbours' },
  ],
  measures: [{ id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true, required: true, equivalenceMargin: 0.5 }],
  alpha: 0.05,
};

/** Invented answers of the letter study: the neighbour comparison a little lower, the other two alike. */
export function simulateLetterAnswers(seed: number, perCondition: number): Record<string, unknown>[] {
  const rand = seededRandom(seed + 1);
  const centres = [6.8, 6.9, 6.2];
  return Array.from({ length: 3 * perCondition }, (_, i) => {
    const c = i % 3;
    return {
      responseId: `letter-${String(i + 1).padStart(4, '0')}`,
      condition: LETTER_DEFINITION.conditions[c].id,
      values: { satisfaction: Math.round(clamp(centres[c] + 1.9 * normal(rand), 0, 10)) },
    };
  });
}

/** mulberry32: a small seeded generator (public domain), enough for invented data. */
export function seededRandom(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function normal(rand: () => number): number {
  let u = 0;
  while (u === 0) u = rand();
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * rand());
}

const clamp = (x: number, lo: number, hi: number) => Math.min(hi, Math.max(lo, x));

export interface SimulatedPost {
  body: Record<string, unknown>;
  /** True when the answer is impossible and the service must refuse it (422). */
  invalid: boolean;
}

/** The simulated answers, in posting order (conditions alternate; a few impossible and a few extreme answers mixed in). */
export function simulateAnswers(seed: number, perCondition: number): SimulatedPost[] {
  const rand = seededRandom(seed);
  const posts: SimulatedPost[] = [];
  for (let i = 0; i < 2 * perCondition; i++) {
    const billFirst = i % 2 === 0;
    const latent = normal(rand);
    const satisfaction = Math.round(clamp((billFirst ? 6.4 : 6.9) + 1.9 * latent, 0, 10));
    const trust = Math.round(clamp((billFirst ? 4.3 : 4.5) + 0.9 * latent + 0.8 * normal(rand), 1, 7));
    const fairPrice = Math.round(clamp(Math.exp(Math.log(38) + 0.35 * normal(rand)) - (billFirst ? 2 : 0), 0, 200) * 100) / 100;
    posts.push({
      body: { responseId: `demo-${String(i + 1).padStart(4, '0')}`, condition: billFirst ? 'bill-first' : 'service-first', values: { satisfaction, trust, fair_price: fairPrice } },
      invalid: false,
    });
  }
  // A handful of extreme but valid fair prices (people who answered with a yearly amount, perhaps).
  for (const [k, price] of [[37, 185], [111, 200], [230, 176.5], [402, 199], [515, 190]] as const) {
    if (k < posts.length) (posts[k].body.values as Record<string, number>).fair_price = price;
  }
  // Impossible answers: the service must refuse every one of them.
  const impossible: Record<string, unknown>[] = [
    { satisfaction: 11, trust: 5, fair_price: 40 },
    { satisfaction: -1, trust: 5, fair_price: 40 },
    { satisfaction: 7.5, trust: 5, fair_price: 40 },
    { satisfaction: 7, trust: 0, fair_price: 40 },
    { satisfaction: 7, trust: 8, fair_price: 40 },
    { satisfaction: 7, trust: 5, fair_price: -12 },
    { satisfaction: 7, trust: 5, fair_price: 250 },
    { satisfaction: 7, trust: 5, fair_price: '40 euros' },
    { satisfaction: 'ten', trust: 5, fair_price: 40 },
    { satisfaction: 9, trust: 4 },
  ];
  impossible.forEach((values, j) => {
    const at = Math.floor(((j + 1) * posts.length) / (impossible.length + 1));
    posts.splice(at, 0, { body: { responseId: `demo-bad-${j + 1}`, condition: j % 2 === 0 ? 'bill-first' : 'service-first', values }, invalid: true });
  });
  return posts;
}

// ---------------------------------------------------------------------------------------------------------
// Terminal formatting
// ---------------------------------------------------------------------------------------------------------

function num(x: unknown, digits = 3): string {
  if (typeof x !== 'number' || !Number.isFinite(x)) return '—';
  if (x === 0) return '0';
  const ax = Math.abs(x);
  if (ax >= 1e6 || ax < 1e-4) return x.toExponential(digits - 1);
  if (Number.isInteger(x)) return x.toLocaleString('en');
  const decimals = Math.min(6, Math.max(0, digits - 1 - Math.floor(Math.log10(ax))));
  const [int, frac] = x.toFixed(decimals).split('.');
  return int.replace(/\B(?=(\d{3})+(?!\d))/g, ',') + (frac === undefined ? '' : `.${frac}`);
}

function pval(p: unknown): string {
  if (typeof p !== 'number' || !Number.isFinite(p)) return '—';
  return p < 0.001 ? '< 0.001' : p >= 0.9995 ? '1.00' : num(p);
}

function ci(c: { lower?: number | null; upper?: number | null } | undefined): string {
  if (!c) return '—';
  return `[${c.lower === null || c.lower === undefined ? '−∞' : num(c.lower)}, ${c.upper === null || c.upper === undefined ? '∞' : num(c.upper)}]`;
}

function table(rows: string[][]): string {
  const widths = rows[0].map((_, i) => Math.max(...rows.map((r) => [...(r[i] ?? '')].length)));
  return rows.map((r) => `  ${r.map((c, i) => c + ' '.repeat(widths[i] - [...c].length)).join('   ')}`.trimEnd()).join('\n');
}

// Loosely typed view of the family JSON (the schema lives in server/schemas/comparisons.ts).
// eslint-disable-next-line @typescript-eslint/no-explicit-any
type Json = any;

export function renderComparisons(family: Json, definition: typeof DEMO_DEFINITION): string {
  const out: string[] = [];
  for (const c of family.comparisons as Json[]) {
    const m = definition.measures.find((x) => x.id === c.measure);
    out.push(`\n${m?.label ?? c.measure}  [${c.measure}; scale ${m?.min}–${m?.max}${m?.integer ? ', whole numbers' : ''}]   a = ${c.a}, b = ${c.b}`);
    const g = c.groups;
    out.push(
      table([
        ['', 'n', 'mean (SD)', 'median (IQR)'],
        [c.a, num(g.a.n), `${num(g.a.mean)} (${num(g.a.sd)})`, `${num(g.a.median)} (${num(g.a.iqr)})`],
        [c.b, num(g.b.n), `${num(g.b.mean)} (${num(g.b.sd)})`, `${num(g.b.median)} (${num(g.b.iqr)})`],
      ]),
    );
    const level = typeof c.welch?.ci?.level === 'number' ? `${Math.round(c.welch.ci.level * 100)}% CI` : 'CI';
    out.push('');
    out.push(
      table([
        ['test', 'statistic', 'p', `p (${c.adjusted?.method ?? 'adj.'})`, `estimate of a − b [${level}]`],
        [
          "Welch's t-test",
          `t = ${num(c.welch.t)}, df = ${num(c.welch.df)}`,
          pval(c.welch.p),
          pval(c.adjusted?.welchP),
          `mean difference ${num(c.welch.meanDifference)} ${ci(c.welch.ci)}`,
        ],
        [
          'Rank-sum (Mann–Whitney)',
          `U = ${num(c.mannWhitney.u)} (${c.mannWhitney.method})`,
          pval(c.mannWhitney.p),
          pval(c.adjusted?.mannWhitneyP),
          `Hodges–Lehmann shift ${num(c.hodgesLehmann.estimate)} ${ci(c.hodgesLehmann.ci)}`,
        ],
      ]),
    );
    out.push(
      `  effect sizes: Hedges' g ${num(c.effectSizes.hedgesG)} ${ci(c.effectSizes.hedgesGCi)}, rank-biserial ${num(c.effectSizes.rankBiserial)}, ` +
        `P(a > b) + ½P(a = b) ${num(c.effectSizes.probabilityOfSuperiority)}`,
    );
    if (c.equivalence) {
      const eq = c.equivalence;
      out.push(
        `  equivalence within ±${eq.margin} (${Math.round((1 - 2 * eq.alpha) * 100)}% CI): means ${ci(eq.welch.ci)} TOST p ${pval(eq.welch.p)}; ` +
          `ranks ${ci(eq.rank.ci)} TOST p ${pval(eq.rank.p)}`,
      );
      if (eq.welch.verdict) out.push(`  → ${eq.welch.verdict.words}`);
    }
    const flags = (c.flags ?? []) as { code: string; severity: string; message: string }[];
    if (flags.length === 0) out.push('  flags: none');
    for (const f of flags) out.push(`  ${f.severity === 'warning' ? '⚠' : 'ℹ'} ${f.message} [${f.code}]`);
  }
  return out.join('\n');
}

/** The omnibus reply of one item as a terminal block: the omnibus tests, the flags, then every pair. */
export function renderOmnibus(o: Json): string {
  const label = (id: string) => id;
  const out: string[] = [];
  out.push(
    table([
      ['test', 'statistic', 'p', 'effect size'],
      ["Welch's ANOVA", `F = ${num(o.welchAnova.f)}, df = ${num(o.welchAnova.df1)} and ${num(o.welchAnova.df2)}`, pval(o.welchAnova.p), `est. ω² ${num(o.welchAnova.omegaSquared)}`],
      ['Kruskal–Wallis', `H = ${num(o.kruskalWallis.h)}, df = ${num(o.kruskalWallis.df)}`, pval(o.kruskalWallis.p), `ε² ${num(o.kruskalWallis.epsilonSquared)}`],
      ['classic ANOVA (reference)', `F = ${num(o.classicAnova.f)}, df = ${num(o.classicAnova.df1)} and ${num(o.classicAnova.df2)}`, pval(o.classicAnova.p), `η² ${num(o.classicAnova.etaSquared)}`],
    ]),
  );
  const flags = (o.flags ?? []) as { code: string; severity: string; message: string }[];
  if (flags.length === 0) out.push('  flags: none');
  for (const f of flags) out.push(`  ${f.severity === 'warning' ? '⚠' : 'ℹ'} ${f.message} [${f.code}]`);
  out.push('');
  out.push(
    table([
      ['pair (a − b)', 'mean difference', 'Games–Howell p', 'Dunn z', 'Dunn p (Holm, two-sided)', `equivalence ±${o.margin ?? '—'}`],
      ...(o.pairs as Json[]).map((p) => [
        `${label(p.a)} − ${label(p.b)}`,
        num(p.gamesHowell.meanDifference),
        pval(p.gamesHowell.p),
        num(p.dunn.z),
        pval(p.dunn.pHolm),
        p.equivalence?.welch?.verdict?.code ?? '—',
      ]),
    ]),
  );
  return out.join('\n');
}

// ---------------------------------------------------------------------------------------------------------
// Run
// ---------------------------------------------------------------------------------------------------------

export interface DemoIo {
  stdout: { write(s: string): unknown };
  stderr: { write(s: string): unknown };
}

export async function runDemo(argv: string[], io: DemoIo, stop?: Promise<unknown>): Promise<number> {
  const { values } = parseArgs({
    args: argv,
    options: {
      once: { type: 'boolean' },
      port: { type: 'string' },
      seed: { type: 'string' },
      'per-condition': { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
    strict: true,
  });
  if (values.help) {
    io.stdout.write('Usage: npm run demo -- [--once] [--port N] [--seed N] [--per-condition N]\n');
    return 0;
  }
  const port = values.port === undefined ? 0 : Number(values.port);
  const seed = values.seed === undefined ? 2027 : Number(values.seed);
  const perCondition = values['per-condition'] === undefined ? 250 : Number(values['per-condition']);
  if (!Number.isInteger(port) || port < 0 || port > 65535 || !Number.isInteger(seed) || !Number.isInteger(perCondition) || perCondition < 5 || perCondition > 5000) {
    io.stderr.write('demo: --port must be 0–65535, --seed a whole number, --per-condition 5–5000\n');
    return 2;
  }

  const dir = mkdtempSync(join(tmpdir(), 'splitballot-demo-'));
  const dbPath = join(dir, 'demo.db');
  const store = openSqliteStore(dbPath);
  const app = buildApp({ port, host: '127.0.0.1', dbPath, adminKeyHash: null, corsOrigins: [], logLevel: 'warn' }, { store });
  const cleanup = async () => {
    await app.close().catch(() => undefined);
    await store.close().catch(() => undefined);
    rmSync(dir, { recursive: true, force: true });
  };
  try {
    io.stdout.write('Splitballot demo — a water utility\'s customer survey. ALL DATA BELOW ARE INVENTED (simulated answers).\n');
    await app.listen({ port, host: '127.0.0.1' });
    const address = app.server.address();
    const base = `http://127.0.0.1:${typeof address === 'object' && address ? address.port : port}`;
    const now = new Date().toISOString();
    const adminKey = generateSecret();
    await store.apiKeys.create({ hash: hashSecret(adminKey), scope: 'admin', experimentKey: null, label: 'demo admin', origin: 'cli', createdAt: now });

    const call = async (method: string, path: string, body?: unknown, key = adminKey) => {
      const res = await fetch(base + path, {
        method,
        headers: { authorization: `Bearer ${key}`, ...(body === undefined ? {} : { 'content-type': 'application/json' }) },
        body: body === undefined ? undefined : JSON.stringify(body),
      });
      return { status: res.status, body: (await res.json()) as Json };
    };

    const created = await call('POST', '/v1/experiments', DEMO_DEFINITION);
    if (created.status !== 201) throw new Error(`creating the study failed: ${created.status} ${JSON.stringify(created.body)}`);
    const experimentKey = (await store.experiments.getBySlug(DEMO_ID))!.key;
    const readKey = generateSecret();
    await store.apiKeys.create({ hash: hashSecret(readKey), scope: 'read', experimentKey, label: 'demo read key', origin: 'cli', createdAt: now });
    const ingestKey = generateSecret();
    await store.apiKeys.create({ hash: hashSecret(ingestKey), scope: 'ingest', experimentKey, label: 'demo ingest key', origin: 'cli', createdAt: now });
    io.stdout.write(`Service on ${base} (temporary database ${dbPath}). Study ${DEMO_ID}: conditions bill-first and service-first; items satisfaction (0–10), trust (1–7), fair_price (0–200).\n`);

    // Post the answers, 8 at a time.
    const posts = simulateAnswers(seed, perCondition);
    const started = Date.now();
    let next = 0;
    let stored = 0;
    let refused = 0;
    let unexpected = 0;
    let lastProgress = 0;
    const worker = async () => {
      while (next < posts.length) {
        const p = posts[next++];
        const r = await call('POST', `/v1/experiments/${DEMO_ID}/responses`, p.body, ingestKey);
        if (r.status === 201) stored++;
        else if (r.status === 422) refused++;
        if ((r.status === 422) !== p.invalid || (r.status !== 201 && r.status !== 422)) unexpected++;
        const done = stored + refused;
        if (done - lastProgress >= 100 || done === posts.length) {
          lastProgress = done;
          io.stderr.write(`posting answers: ${done}/${posts.length} (${refused} refused as impossible)\n`);
        }
      }
    };
    await Promise.all(Array.from({ length: 8 }, worker));
    const seconds = (Date.now() - started) / 1000;
    if (unexpected > 0) throw new Error(`${unexpected} answers were not treated as expected`);
    io.stdout.write(
      `Posted ${posts.length} answers in ${seconds.toFixed(1)} s (${Math.round(posts.length / seconds)}/s): ${stored} stored, ${refused} refused with 422 ` +
        '(impossible values such as 11 on the 0–10 scale, a fractional rating, a negative price, text). ' +
        'Five valid but extreme fair prices (176.5–200) are among the stored answers.\n',
    );

    const family = await call('GET', `/v1/experiments/${DEMO_ID}/comparisons?pairs=first&adjust=holm`);
    if (family.status !== 200) throw new Error(`reading the comparisons failed: ${family.status} ${JSON.stringify(family.body)}`);
    io.stdout.write(`\nComparisons (differences are a − b; p adjusted by Holm across the three items):\n`);
    io.stdout.write(`${renderComparisons(family.body, DEMO_DEFINITION)}\n\n`);

    // The second invented study: three versions of a letter, so the omnibus tests come first, then the pairs.
    const letter = await call('POST', '/v1/experiments', LETTER_DEFINITION);
    if (letter.status !== 201) throw new Error(`creating the letter study failed: ${letter.status} ${JSON.stringify(letter.body)}`);
    const letterAnswers = simulateLetterAnswers(seed, perCondition);
    const letterPosted = await call('POST', `/v1/experiments/${LETTER_ID}/responses/batch`, { responses: letterAnswers });
    if (letterPosted.status !== 201) throw new Error(`posting the letter answers failed: ${letterPosted.status} ${JSON.stringify(letterPosted.body)}`);
    const omnibus = await call('GET', `/v1/experiments/${LETTER_ID}/comparisons/satisfaction/omnibus`);
    if (omnibus.status !== 200) throw new Error(`reading the omnibus failed: ${omnibus.status} ${JSON.stringify(omnibus.body)}`);
    io.stdout.write(
      `Second study ${LETTER_ID}: ${letterAnswers.length} invented answers, three versions of a reminder letter (plain, bill-chart, neighbours).\n` +
        'With three conditions the omnibus tests come first (do the versions differ at all?), then every pair with adjusted p-values:\n\n',
    );
    io.stdout.write(`Overall satisfaction (0–10), all three letters:\n${renderOmnibus(omnibus.body)}\n`);
    const letterReadKey = generateSecret();
    const letterKey = (await store.experiments.getBySlug(LETTER_ID))!.key;
    await store.apiKeys.create({ hash: hashSecret(letterReadKey), scope: 'read', experimentKey: letterKey, label: 'demo letter read key', origin: 'cli', createdAt: now });
    io.stdout.write(`Its results page: ${base}/experiments/${LETTER_ID}   read key: ${letterReadKey}\n\n`);
    io.stdout.write(`Results page: ${base}/experiments/${DEMO_ID}\nRead key (paste it into the page): ${readKey}\n`);
    io.stdout.write(`Live updates: curl -N -H "Authorization: Bearer ${readKey}" ${base}/v1/experiments/${DEMO_ID}/events\n`);
    io.stdout.write(`Admin key for this demo: ${adminKey}\n`);
    io.stdout.write('Reminder: these are invented answers; results are statistical evidence, not decisions.\n');
    if (values.once) {
      io.stdout.write(`demo: ${stored} answers stored, ${refused} refused, ${family.body.comparisons.length} comparisons printed; exiting (--once).\n`);
      return 0;
    }
    io.stdout.write('\nServing until Ctrl-C (the temporary database is removed on exit).\n');
    await (stop ??
      new Promise((resolveStop) => {
        process.once('SIGINT', resolveStop);
        process.once('SIGTERM', resolveStop);
      }));
    io.stdout.write('demo: stopped.\n');
    return 0;
  } finally {
    await cleanup();
  }
}

if (process.argv[1] && resolve(process.argv[1]) === fileURLToPath(import.meta.url)) {
  runDemo(process.argv.slice(2), process).then(
    (code) => process.exit(code),
    (err: unknown) => {
      process.stderr.write(`demo: ${(err as Error).message}\n`);
      process.exit(1);
    },
  );
}
