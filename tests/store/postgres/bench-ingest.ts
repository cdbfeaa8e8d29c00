/**
 * Benchmark script (prints figures; not a test): the same store calls on SQLite and on PostgreSQL.
 *   single  — N single-response ingests, C in flight at once (group commit)
 *   batch   — batches of B responses, one after another
 *   read    — a continuous measure's sorted snapshot: first read (full), after 100 new rows (merge), unchanged (hit)
 * Run: npx tsx tests/store/postgres/bench-ingest.ts [N=4000] [C=64] [B=500]
 * Needs the PostgreSQL test server (see pg-test-db.ts). Invented water-utility data.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { openSqliteStore } from '../../../server/store/sqlite/store.js';
import type { ExperimentRecord, Store, ValidResponse } from '../../../server/store/types.js';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { openPostgresStore } from '../../../server/store/postgres/store.js';
import { Rng } from '../../helpers/rng.js';
import { createTestDatabase, postgresAvailable } from './pg-test-db.js';

const N = Number(process.argv[2] ?? 4000);
const C = Number(process.argv[3] ?? 64);
const B = Number(process.argv[4] ?? 500);
const NOW = '2027-03-01T12:00:00.000Z';

function item(e: ExperimentRecord, id: string, rng: Rng): ValidResponse {
  const cond = rng.uniform() < 0.5 ? 0 : 1;
  const c = e.conditions[cond];
  const sat = Math.floor(rng.uniform() * 11);
  const price = Math.round(rng.uniform() * 20000) / 100;
  return {
    responseId: id,
    generated: false,
    conditionKey: c.key,
    respondent: null,
    submittedAt: NOW,
    values: new Map([
      [e.measures[0].key, sat],
      [e.measures[1].key, price],
    ]),
    weight: null,
    contentHash: contentHash(c.id, null, [
      ['satisfaction', sat],
      ['fair_price', price],
    ]),
  };
}

async function run(name: string, store: Store): Promise<void> {
  const created = await store.experiments.create({
    id: 'bench-water',
    title: 'Invented water-utility survey (benchmark)',
    conditions: [
      { id: 'bill-first', label: 'Bill first' },
      { id: 'service-first', label: 'Service first' },
    ],
    measures: [
      { id: 'satisfaction', label: 'Satisfaction', min: 0, max: 10, integer: true, required: true },
      { id: 'fair_price', label: 'Fair price', min: 0, max: 200, integer: false, required: true },
    ],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (created.kind !== 'created') throw new Error('not created');
  const e = created.experiment;
  const rng = new Rng(7);

  let next = 0;
  let t = performance.now();
  await Promise.all(
    Array.from({ length: C }, async () => {
      while (next < N) {
        const i = next++;
        const out = await store.responses.ingest(e.key, [item(e, `s-${i}`, rng)], NOW, null);
        if (out.kind !== 'stored') throw new Error(out.kind);
      }
    }),
  );
  const single = (performance.now() - t) / 1000;
  const stats = (store.responses as unknown as { groupStats?: { groups: number; requests: number; largest: number } }).groupStats;

  t = performance.now();
  const batches = Math.max(1, Math.round((N * 5) / B));
  for (let b = 0; b < batches; b++) {
    const items = Array.from({ length: B }, (_, i) => item(e, `b-${b}-${i}`, rng));
    const out = await store.responses.ingest(e.key, items, NOW, null);
    if (out.kind !== 'stored') throw new Error(out.kind);
  }
  const batch = (performance.now() - t) / 1000;

  const price = e.measures[1].key;
  const keys = e.conditions.map((c) => c.key);
  const time = async () => {
    const s = performance.now();
    const snap = await store.responses.getSortedValuesSnapshot(price, keys, false);
    return { ms: performance.now() - s, n: snap.groups[0].length + snap.groups[1].length };
  };
  const full = await time();
  await store.responses.ingest(e.key, Array.from({ length: 100 }, (_, i) => item(e, `m-${i}`, rng)), NOW, null);
  const merge = await time();
  const hit = await time();

  console.log(
    `${name.padEnd(10)} single: ${N} in ${single.toFixed(2)} s = ${Math.round(N / single)}/s (${C} in flight; groups ${stats?.groups ?? '?'}, largest ${stats?.largest ?? '?'})` +
      ` | batch: ${batches}×${B} in ${batch.toFixed(2)} s = ${Math.round((batches * B) / batch)} rows/s` +
      ` | sorted snapshot of ${full.n} values: full ${full.ms.toFixed(1)} ms, merge of 100 ${merge.ms.toFixed(1)} ms, hit ${hit.ms.toFixed(1)} ms`,
  );
}

if (!(await postgresAvailable('the ingest benchmark'))) process.exit(1);
const dir = mkdtempSync(join(tmpdir(), 'sb-bench-'));
const sqlite = openSqliteStore(join(dir, 'bench.db'));
try {
  await run('SQLite', sqlite);
} finally {
  await sqlite.close();
  rmSync(dir, { recursive: true, force: true });
}
const test = await createTestDatabase();
try {
  const pgStore = await openPostgresStore(test.url);
  try {
    await run('PostgreSQL', pgStore);
  } finally {
    await pgStore.close();
  }
} finally {
  await test.drop();
}
