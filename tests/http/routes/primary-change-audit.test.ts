/**
 * GET /v1/experiments/{id}/audit lists a change of the primary outcome made after answers existed (action
 * 'primary-change', fromMeasure → toMeasure), written by the PATCH that made it; a change before any answer is
 * not audited; `splitballot copy-to-postgres` carries the row over unchanged. Runs on both engines (the copy test
 * once, from the SQLite side, when the PostgreSQL test server is there).
 */
import { join } from 'node:path';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { buildApp } from '../../../server/http/app.js';
import { openPostgresStore } from '../../../server/store/postgres/store.js';
import { cli, LogCapture, startTestApp, testConfig, TEST_ENGINE, WATER_ID, type TestApp } from '../../helpers/app.js';
import { createTestDatabase, postgresAvailable } from '../../store/postgres/pg-test-db.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
  expect((await t.createWater()).statusCode).toBe(201);
});
afterEach(async () => {
  await t.close();
});

const base = `/v1/experiments/${WATER_ID}`;

function answers(n: number) {
  return Array.from({ length: n }, (_, i) => ({
    responseId: `r-${i}`,
    condition: i % 2 === 0 ? 'bill-first' : 'service-first',
    values: { satisfaction: (i * 7) % 11, trust: 1 + ((i * 3) % 7), fair_price: 20 + i },
  }));
}

async function changePrimary(measure: string) {
  const res = await t.request({ method: 'PATCH', url: base, payload: { measures: [{ id: measure, primary: true }] } });
  expect(res.statusCode, res.body).toBe(200);
  return res.json();
}

describe('the primary outcome in the audit trail', () => {
  it('a change after answers exist is one audit entry (from, to, who, when, responses stored, dataVersion); before answers none', async () => {
    await changePrimary('satisfaction');
    expect((await t.request({ method: 'GET', url: `${base}/audit` })).json()).toEqual({ entries: [] });
    expect((await t.request({ method: 'POST', url: `${base}/responses/batch`, payload: { responses: answers(6) } })).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: `${base}/responses/r-2/exclusion`, payload: { reason: 'speeder' } })).statusCode).toBe(200);
    const definition = await changePrimary('trust');
    const [change] = definition.primaryChanges;
    expect(change).toMatchObject({ from: 'satisfaction', to: 'trust', dataVersion: 2 });
    const audit = (await t.request({ method: 'GET', url: `${base}/audit` })).json().entries;
    expect(audit).toHaveLength(2);
    expect(audit[0]).toEqual({
      id: audit[1].id + 1,
      action: 'primary-change',
      responseId: null,
      reason: null,
      count: 6,
      apiKeyId: change.apiKeyId,
      at: change.at,
      dataVersion: 2,
      redacted: false,
      fromMeasure: 'satisfaction',
      toMeasure: 'trust',
    });
    expect(typeof change.apiKeyId).toBe('number');
    expect(audit[1]).toMatchObject({ action: 'exclude', responseId: 'r-2', fromMeasure: null, toMeasure: null });
    // No primary outcome any more: recorded as a change to null.
    const none = await t.request({ method: 'PATCH', url: base, payload: { measures: [{ id: 'trust', primary: false }] } });
    expect(none.statusCode, none.body).toBe(200);
    expect((await t.request({ method: 'GET', url: `${base}/audit` })).json().entries[0]).toMatchObject({ action: 'primary-change', fromMeasure: 'trust', toMeasure: null });
    // A refused PATCH (a process measure cannot be primary; here an unknown measure) writes no entry.
    const refused = await t.request({ method: 'PATCH', url: base, payload: { measures: [{ id: 'nothing', primary: true }] } });
    expect(refused.statusCode).toBe(422);
    expect((await t.request({ method: 'GET', url: `${base}/audit` })).json().entries).toHaveLength(3);
  });
});

const pgHere = TEST_ENGINE === 'sqlite' ? await postgresAvailable('the copy of primary-change audit rows to PostgreSQL') : false;

describe.skipIf(!pgHere)('copy-to-postgres', () => {
  it('carries the primary-change entries over unchanged', async () => {
    expect((await t.request({ method: 'POST', url: `${base}/responses/batch`, payload: { responses: answers(4) } })).statusCode).toBe(201);
    await changePrimary('trust');
    await changePrimary('fair_price');
    const before = (await t.request({ method: 'GET', url: `${base}/audit` })).json();
    expect(before.entries.map((e: { fromMeasure: string | null; toMeasure: string | null }) => [e.fromMeasure, e.toMeasure])).toEqual([
      ['trust', 'fair_price'],
      [null, 'trust'],
    ]);
    await t.app.close();
    const test = await createTestDatabase();
    try {
      const run = await cli(['copy-to-postgres', t.dbPath], { SPLITBALLOT_DATABASE_URL: test.url });
      expect(run.code, run.stderr).toBe(0);
      expect(run.stdout).toMatch(/2 audit entries/);
      const pg = await openPostgresStore(test.url, { pool: { poolSize: 2 } });
      const app = buildApp(testConfig(join(t.dir, 'unused.db')), { store: pg, logStream: new LogCapture() });
      await app.ready();
      try {
        const after = await app.inject({ method: 'GET', url: `${base}/audit`, headers: t.auth(t.adminKey) });
        expect(after.json()).toEqual(before);
      } finally {
        await app.close();
        await pg.close();
      }
    } finally {
      await test.drop();
    }
    // Let afterEach's close find an app to close.
    await t.restart();
  });
});
