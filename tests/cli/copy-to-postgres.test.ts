/**
 * splitballot copy-to-postgres: an embedded database with exclusions, an erasure, a look, assignments and keys is
 * copied into an empty PostgreSQL database; every comparison (each measure, with and without excluded responses),
 * the look list, the audit trail, the definition and the assignment summary answer the same before (SQLite) and
 * after (PostgreSQL), the old API key still works, check passes, and a second copy into the now non-empty database
 * is refused. Skipped with a notice without a PostgreSQL server (fails with CI=true).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { openPostgresStore } from '../../server/store/postgres/store.js';
import { openSqliteStore } from '../../server/store/sqlite/store.js';
import type { Store } from '../../server/store/types.js';
import { cli, LogCapture, testConfig, waterBillDefinition, WATER_ID } from '../helpers/app.js';
import { Rng } from '../helpers/rng.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';

const available = await postgresAvailable('the copy-to-postgres test');

/** Drop times (keys ending in "At", and "at"), which differ between two runs of the same requests. */
function timeless(v: unknown): unknown {
  if (Array.isArray(v)) return v.map(timeless);
  if (v && typeof v === 'object') {
    return Object.fromEntries(
      Object.entries(v as Record<string, unknown>)
        .filter(([k]) => !k.endsWith('At') && k !== 'at')
        .map(([k, x]) => [k, timeless(x)]),
    );
  }
  return v;
}

const READS = [
  ...['satisfaction', 'trust', 'fair_price'].flatMap((m) => [`/v1/experiments/${WATER_ID}/comparisons/${m}`, `/v1/experiments/${WATER_ID}/comparisons/${m}?includeExcluded=true`]),
  `/v1/experiments/${WATER_ID}/comparisons`,
  `/v1/experiments/${WATER_ID}/looks`,
  `/v1/experiments/${WATER_ID}/audit`,
  `/v1/experiments/${WATER_ID}`,
  `/v1/experiments/${WATER_ID}/assignments/summary`,
  `/v1/experiments/demo-integer-only/comparisons/satisfaction`,
];

async function readAll(app: FastifyInstance, key: string): Promise<Record<string, { status: number; body: unknown }>> {
  const out: Record<string, { status: number; body: unknown }> = {};
  for (const url of READS) {
    const res = await app.inject({ method: 'GET', url, headers: { authorization: `Bearer ${key}` } });
    out[url] = { status: res.statusCode, body: timeless(JSON.parse(res.body)) };
  }
  return out;
}

describe.skipIf(!available)('splitballot copy-to-postgres', () => {
  const dir = mkdtempSync(join(tmpdir(), 'sb-copy-'));
  let test: TestDatabase | undefined;
  afterAll(async () => {
    await test?.drop();
    rmSync(dir, { recursive: true, force: true });
  });

  it('copies everything; every comparison answers the same numbers before and after; check passes', async () => {
    const file = join(dir, 'embedded.db');
    const sqlite = openSqliteStore(file);
    const app = buildApp(testConfig(file), { store: sqlite, logStream: new LogCapture() });
    await app.ready();
    const admin = generateSecret();
    await sqlite.apiKeys.create({ hash: hashSecret(admin), scope: 'admin', experimentKey: null, label: 'copy test', origin: 'cli', createdAt: new Date().toISOString() });
    const send = async (method: 'POST' | 'DELETE', url: string, payload?: object) =>
      (await app.inject({ method, url, headers: { authorization: `Bearer ${admin}` }, ...(payload ? { payload } : {}) })).statusCode;
    expect(await send('POST', '/v1/experiments', waterBillDefinition({ monitoring: { spending: 'obrien-fleming' } }))).toBe(201);
    expect(await send('POST', '/v1/experiments', waterBillDefinition({ id: 'demo-integer-only' }))).toBe(201);
    const rng = new Rng(14);
    const responses = Array.from({ length: 400 }, (_, i) => ({
      responseId: `c-${i}`,
      condition: rng.uniform() < 0.5 ? 'bill-first' : 'service-first',
      respondent: `household-${i % 180}`,
      values: { satisfaction: Math.floor(rng.uniform() * 11), trust: 1 + Math.floor(rng.uniform() * 7), fair_price: Math.round(rng.uniform() * 20000) / 100 },
    }));
    expect(await send('POST', `/v1/experiments/${WATER_ID}/responses/batch`, { responses: responses.slice(0, 300) })).toBe(201);
    for (const r of responses.slice(300, 330)) expect(await send('POST', `/v1/experiments/${WATER_ID}/responses`, r)).toBe(201);
    expect(await send('POST', `/v1/experiments/demo-integer-only/responses/batch`, { responses: responses.slice(330) })).toBe(201);
    for (const i of [2, 19, 57, 101]) expect(await send('POST', `/v1/experiments/${WATER_ID}/responses/c-${i}/exclusion`, { reason: 'straight-lining' })).toBe(200);
    expect(await send('POST', `/v1/experiments/${WATER_ID}/looks`, { measure: 'satisfaction' })).toBe(201);
    expect(await send('DELETE', `/v1/experiments/${WATER_ID}/respondents/household-9`)).toBe(200);
    expect(await send('DELETE', `/v1/experiments/${WATER_ID}/responses/c-19/exclusion`)).toBe(200);
    for (let i = 0; i < 8; i++) expect(await send('POST', `/v1/experiments/${WATER_ID}/assignments`, { respondent: `new-${i}` })).toBe(201);
    const before = await readAll(app, admin);
    for (const [url, r] of Object.entries(before)) expect(r.status, url).toBe(200);
    await app.close();
    await sqlite.close();

    test = await createTestDatabase();
    const run = await cli(['copy-to-postgres', file], { SPLITBALLOT_DATABASE_URL: test.url });
    expect(run.stderr).toContain('copy: responses: 398 of 398 rows'); // 400 stored, 2 erased with household-9
    expect(run.stdout).toMatch(/^copy ok: 2 experiments, 398 responses, .* counts and data versions match; check ok: /);
    expect(run.code).toBe(0);

    const pg: Store = await openPostgresStore(test.url);
    const app2 = buildApp(testConfig(join(dir, 'unused.db')), { store: pg, logStream: new LogCapture() });
    await app2.ready();
    try {
      const after = await readAll(app2, admin); // the copied key (its hash) still authenticates
      for (const url of READS) expect(after[url], url).toEqual(before[url]);
      // Ids continue after the copied ones: a new response and a new assignment are stored.
      expect((await app2.inject({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: { authorization: `Bearer ${admin}` }, payload: { responseId: 'after-copy', condition: 'bill-first', values: { satisfaction: 3, trust: 2, fair_price: 10 } } })).statusCode).toBe(201);
      expect((await app2.inject({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, headers: { authorization: `Bearer ${admin}` }, payload: { respondent: 'after-copy' } })).statusCode).toBe(201);
    } finally {
      await app2.close();
      await pg.close();
    }
    expect((await cli(['check'], { SPLITBALLOT_DATABASE_URL: test.url })).code).toBe(0);
    const again = await cli(['copy-to-postgres', file], { SPLITBALLOT_DATABASE_URL: test.url });
    expect(again.code).toBe(1);
    expect(again.stderr).toMatch(/copy refused: the PostgreSQL database is not empty \(rows in experiments, conditions/);
  });
});
