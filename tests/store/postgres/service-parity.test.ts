/**
 * The service on either engine answers the same: the same HTTP requests (experiment, batch and single answers,
 * exclusions, a look, assignments, an erasure) go to an app built on the SQLite store and to one built on the
 * PostgreSQL store, and every reply must be identical apart from times (keys ending in "At", and "at"). Comparisons of an
 * integer measure (per-value counts) and of a continuous one (sorted values through the cache) are included.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../../server/http/app.js';
import { generateSecret, hashSecret } from '../../../server/services/keys.js';
import { openSqliteStore } from '../../../server/store/sqlite/store.js';
import type { Store } from '../../../server/store/types.js';
import { openPostgresStore } from '../../../server/store/postgres/store.js';
import { Rng } from '../../helpers/rng.js';
import { LogCapture, testConfig, waterBillDefinition, WATER_ID } from '../../helpers/app.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from './pg-test-db.js';

const available = await postgresAvailable('the SQLite/PostgreSQL service parity test');

interface Engine {
  app: FastifyInstance;
  store: Store;
  admin: string;
}

async function engine(store: Store, dir: string): Promise<Engine> {
  const app = buildApp(testConfig(join(dir, 'unused.db')), { store, logStream: new LogCapture() });
  await app.ready();
  const admin = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(admin), scope: 'admin', experimentKey: null, label: 'parity', origin: 'cli', createdAt: new Date().toISOString() });
  return { app, store, admin };
}

/** Drop times (keys ending in "At", and "at") so replies of two runs can be compared. */
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

describe.skipIf(!available)('the service answers the same on SQLite and PostgreSQL', () => {
  let dir: string;
  let test: TestDatabase;
  let sqlite: Engine;
  let postgres: Engine;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'sb-parity-'));
    test = await createTestDatabase();
    sqlite = await engine(openSqliteStore(join(dir, 'parity.db')), dir);
    postgres = await engine(await openPostgresStore(test.url), dir);
  });

  afterAll(async () => {
    for (const e of [sqlite, postgres]) {
      if (!e) continue;
      await e.app.close();
      await e.store.close();
    }
    await test?.drop();
    rmSync(dir, { recursive: true, force: true });
  });

  /** Send one request to both apps; return both replies after checking they agree. */
  async function both(method: 'GET' | 'POST' | 'DELETE', url: string, payload?: unknown): Promise<{ status: number; body: unknown }> {
    const replies = [];
    for (const e of [sqlite, postgres]) {
      const res = await e.app.inject({ method, url, headers: { authorization: `Bearer ${e.admin}` }, ...(payload === undefined ? {} : { payload: payload as object }) });
      replies.push({ status: res.statusCode, body: res.body === '' ? null : timeless(JSON.parse(res.body)) });
    }
    expect(replies[1], `${method} ${url}`).toEqual(replies[0]);
    return replies[0];
  }

  it('the same requests give the same replies', async () => {
    expect((await both('POST', '/v1/experiments', waterBillDefinition({ monitoring: { spending: 'obrien-fleming' } }))).status).toBe(201);
    const rng = new Rng(2027);
    const responses = Array.from({ length: 300 }, (_, i) => ({
      responseId: `p-${i}`,
      condition: rng.uniform() < 0.5 ? 'bill-first' : 'service-first',
      respondent: `household-${i % 150}`,
      values: {
        satisfaction: Math.floor(rng.uniform() * 11),
        trust: 1 + Math.floor(rng.uniform() * 7),
        fair_price: Math.round(rng.uniform() * 20000) / 100,
      },
    }));
    expect((await both('POST', `/v1/experiments/${WATER_ID}/responses/batch`, { responses: responses.slice(0, 250) })).status).toBe(201);
    for (const r of responses.slice(250)) expect((await both('POST', `/v1/experiments/${WATER_ID}/responses`, r)).status).toBe(201);
    expect((await both('POST', `/v1/experiments/${WATER_ID}/responses`, responses[3])).status).toBe(200);
    expect((await both('POST', `/v1/experiments/${WATER_ID}/responses`, { ...responses[3], values: { ...responses[3].values, trust: 8 } })).status).toBe(422);
    for (const i of [1, 17, 42]) {
      expect((await both('POST', `/v1/experiments/${WATER_ID}/responses/p-${i}/exclusion`, { reason: 'failed attention check' })).status).toBe(200);
    }
    for (const m of ['satisfaction', 'trust', 'fair_price']) {
      expect((await both('GET', `/v1/experiments/${WATER_ID}/comparisons/${m}`)).status).toBe(200);
      expect((await both('GET', `/v1/experiments/${WATER_ID}/comparisons/${m}?includeExcluded=true`)).status).toBe(200);
    }
    expect((await both('POST', `/v1/experiments/${WATER_ID}/looks`, { measure: 'satisfaction' })).status).toBe(201);
    expect((await both('DELETE', `/v1/experiments/${WATER_ID}/respondents/household-7`)).status).toBe(200);
    expect((await both('DELETE', `/v1/experiments/${WATER_ID}/responses/p-17/exclusion`)).status).toBe(200);
    const after = await both('GET', `/v1/experiments/${WATER_ID}/comparisons/fair_price`);
    expect((after.body as { dataVersion?: number }).dataVersion ?? null).not.toBe(0);
    expect((await both('GET', `/v1/experiments/${WATER_ID}/comparisons`)).status).toBe(200);
    expect((await both('GET', `/v1/experiments/${WATER_ID}/audit`)).status).toBe(200);
    expect((await both('GET', `/v1/experiments/${WATER_ID}`)).status).toBe(200);
    expect((await both('GET', `/v1/experiments/${WATER_ID}/looks`)).status).toBe(200);
    // Assignments draw blocks with a cryptographic shuffle: each condition's own replies are not compared.
    for (let i = 0; i < 12; i++) {
      for (const e of [sqlite, postgres]) {
        const res = await e.app.inject({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, headers: { authorization: `Bearer ${e.admin}` }, payload: { respondent: `new-${i}` } });
        expect(res.statusCode).toBe(201);
      }
    }
    // 12 respondents fill three whole blocks of 4, so the per-condition figures agree whatever the shuffle drew.
    const summary = await both('GET', `/v1/experiments/${WATER_ID}/assignments/summary`);
    expect((summary.body as { totals: { assigned: number } }).totals.assigned).toBe(12);
  });
});
