/**
 * splitballot copy-to-postgres with what came after the first copy test: survey weights (responses.weight, the
 * weighted per-value sums, refused weights), a covariate measure, a form key and a bulk clean-up. The weighted and
 * covariate-adjusted comparisons, the definition, the audit trail and the export answer the same before (SQLite) and
 * after (PostgreSQL); the copied form key is still a form key; check passes. Invented water-utility data. Skipped
 * with a notice without a PostgreSQL server (fails with CI=true).
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
import { cli, LogCapture, testConfig } from '../helpers/app.js';
import { Rng } from '../helpers/rng.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';

const available = await postgresAvailable('the copy-to-postgres weights test');
const ID = 'weighted-water';

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
  `/v1/experiments/${ID}/comparisons/satisfaction`,
  `/v1/experiments/${ID}/comparisons/satisfaction?includeExcluded=true`,
  `/v1/experiments/${ID}/comparisons/fair_price`,
  `/v1/experiments/${ID}/comparisons/satisfaction?covariates=prior_trust`,
  `/v1/experiments/${ID}/audit`,
  `/v1/experiments/${ID}`,
];

async function readAll(app: FastifyInstance, key: string): Promise<Record<string, { status: number; body: unknown }>> {
  const out: Record<string, { status: number; body: unknown }> = {};
  for (const url of READS) {
    const res = await app.inject({ method: 'GET', url, headers: { authorization: `Bearer ${key}` } });
    out[url] = { status: res.statusCode, body: timeless(JSON.parse(res.body)) };
  }
  const ndjson = await app.inject({ method: 'GET', url: `/v1/experiments/${ID}/responses.ndjson`, headers: { authorization: `Bearer ${key}` } });
  out.export = { status: ndjson.statusCode, body: ndjson.body.trim().split('\n').map((l) => timeless(JSON.parse(l))) };
  return out;
}

describe.skipIf(!available)('splitballot copy-to-postgres: weights, covariates, form keys, clean-up', () => {
  const dir = mkdtempSync(join(tmpdir(), 'sb-copyw-'));
  let test: TestDatabase | undefined;
  afterAll(async () => {
    await test?.drop();
    rmSync(dir, { recursive: true, force: true });
  });

  it('copies weights, sums, refused weights, roles and form keys; every read answers the same; check passes', async () => {
    const file = join(dir, 'embedded.db');
    const sqlite = openSqliteStore(file);
    const app = buildApp(testConfig(file), { store: sqlite, logStream: new LogCapture() });
    await app.ready();
    const admin = generateSecret();
    await sqlite.apiKeys.create({ hash: hashSecret(admin), scope: 'admin', experimentKey: null, label: 'copy test', origin: 'cli', createdAt: new Date().toISOString() });
    const send = async (method: 'POST' | 'DELETE', url: string, payload?: object) =>
      (await app.inject({ method, url, headers: { authorization: `Bearer ${admin}` }, ...(payload ? { payload } : {}) })).statusCode;
    expect(
      await send('POST', '/v1/experiments', {
        id: ID,
        title: 'Invented water-utility survey with design weights',
        conditions: [{ id: 'bill-first' }, { id: 'service-first' }],
        measures: [
          { id: 'prior_trust', min: 1, max: 7, integer: true, role: 'covariate' },
          { id: 'satisfaction', min: 0, max: 10, integer: true },
          { id: 'fair_price', min: 0, max: 200, required: false },
        ],
        weights: 'optional',
        maxWeight: 1e4,
      }),
    ).toBe(201);
    const form = generateSecret();
    const experimentKey = (await sqlite.experiments.getBySlug(ID))!.key;
    await sqlite.apiKeys.create({ hash: hashSecret(form), scope: 'form', experimentKey, label: 'public page', origin: 'cli', createdAt: new Date().toISOString() });
    const rng = new Rng(2027);
    const responses = Array.from({ length: 120 }, (_, i) => {
      const u = rng.uniform();
      return {
        responseId: `w-${i}`,
        condition: rng.uniform() < 0.5 ? 'bill-first' : 'service-first',
        respondent: `household-${i % 50}`,
        ...(u < 0.1 ? {} : { weight: Math.round(Math.exp(rng.uniform() * 9 - 2) * 1000) / 1000 }),
        values: { prior_trust: 1 + Math.floor(rng.uniform() * 7), satisfaction: Math.floor(rng.uniform() * 11), fair_price: Math.round(rng.uniform() * 20000) / 100 },
      };
    });
    expect(await send('POST', `/v1/experiments/${ID}/responses/batch`, { responses: responses.slice(0, 100) })).toBe(201);
    for (const r of responses.slice(100)) expect(await send('POST', `/v1/experiments/${ID}/responses`, r)).toBe(201);
    expect(await send('POST', `/v1/experiments/${ID}/responses`, { condition: 'bill-first', weight: 0, values: { prior_trust: 1, satisfaction: 1 } })).toBe(422);
    for (const i of [3, 40, 77]) expect(await send('POST', `/v1/experiments/${ID}/responses/w-${i}/exclusion`, { reason: 'straight-lining' })).toBe(200);
    expect(await send('DELETE', `/v1/experiments/${ID}/respondents/household-7`)).toBe(200);
    // A clean-up: the answers sent through the form key (two, posted with it) are excluded in one go.
    for (const i of [0, 1]) {
      const res = await app.inject({ method: 'POST', url: `/v1/experiments/${ID}/responses`, headers: { authorization: `Bearer ${form}` }, payload: { responseId: `form-${i}`, condition: 'service-first', weight: 2, values: { prior_trust: 4, satisfaction: 9 } } });
      expect(res.statusCode, res.body).toBe(201);
    }
    const formKeyId = (await sqlite.apiKeys.list()).find((k) => k.scope === 'form')!.id;
    const cleaned = await app.inject({ method: 'POST', url: `/v1/experiments/${ID}/clean-up`, headers: { authorization: `Bearer ${admin}` }, payload: { action: 'exclude', reason: 'form key shared', apiKey: formKeyId, dryRun: false } });
    expect(cleaned.json()).toMatchObject({ matched: 2, changed: 2 });
    const before = await readAll(app, admin);
    for (const [url, r] of Object.entries(before)) expect(r.status, url).toBe(200);
    expect((before[READS[0]].body as { weighted: unknown }).weighted).not.toBeNull();
    await app.close();
    await sqlite.close();

    test = await createTestDatabase();
    const run = await cli(['copy-to-postgres', file], { SPLITBALLOT_DATABASE_URL: test.url });
    expect(run.stderr).toContain('copy: rejected_weight_counts: 1 of 1 rows');
    expect(run.code, run.stderr).toBe(0);

    const pg: Store = await openPostgresStore(test.url);
    const app2 = buildApp(testConfig(join(dir, 'unused.db')), { store: pg, logStream: new LogCapture() });
    await app2.ready();
    try {
      const after = await readAll(app2, admin);
      for (const url of Object.keys(before)) expect(after[url], url).toEqual(before[url]);
      expect((await pg.apiKeys.findByHash(hashSecret(form)))?.scope).toBe('form');
      expect(await pg.responses.getRejectedWeightCounts(experimentKey)).toEqual([{ reason: 'out_of_range', count: 1 }]);
    } finally {
      await app2.close();
      await pg.close();
    }
    expect((await cli(['check'], { SPLITBALLOT_DATABASE_URL: test.url })).code).toBe(0);
  });
});
