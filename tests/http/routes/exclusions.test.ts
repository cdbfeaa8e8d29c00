/**
 * Exclusions and restorations: one transaction each (flags, values, per-value counts, counters, dataVersion, audit
 * row), idempotent, and the repository invariants of DEVELOPERS.md recomputed from the raw rows after every change.
 * Data invented for the test.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
  await t.createWater();
});
afterEach(async () => {
  await t.close();
});
const base = `/v1/experiments/${WATER_ID}`;

/** The invariants of DEVELOPERS.md, recomputed from raw rows (SQL both engines read alike, see TestApp.sql). */
async function checkInvariants(t: TestApp): Promise<void> {
  const stored = await t.sql(`SELECT measure_id, condition_id, excluded, value, count FROM value_counts ORDER BY 1, 2, 3, 4`);
  const recomputed = await t.sql(
    `SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*) AS count FROM response_values v JOIN measures m ON m.id = v.measure_id
     WHERE m.is_integer GROUP BY 1, 2, 3, 4 ORDER BY 1, 2, 3, 4`,
  );
  expect(stored, 'value_counts = GROUP BY over response_values').toEqual(recomputed);
  const counters = (await t.sql(
    `SELECT c.id, c.response_count, c.excluded_count,
            (SELECT count(*) FROM responses r WHERE r.condition_id = c.id) AS responses,
            (SELECT coalesce(sum(r.excluded), 0) FROM responses r WHERE r.condition_id = c.id) AS excluded
     FROM conditions c`,
  )) as { response_count: number; excluded_count: number; responses: number; excluded: number }[];
  for (const c of counters) {
    expect(c.response_count, 'conditions.response_count').toBe(c.responses);
    expect(c.excluded_count, 'conditions.excluded_count').toBe(c.excluded);
  }
  const [{ n: mismatched }] = await t.sql(
    `SELECT count(*) AS n FROM response_values v JOIN responses r ON r.id = v.response_id WHERE v.condition_id != r.condition_id OR v.excluded != r.excluded`,
  );
  expect(mismatched, 'response_values.condition_id and .excluded equal their response').toBe(0);
}

async function seed(): Promise<void> {
  const responses = [];
  for (let i = 0; i < 30; i++) {
    responses.push({
      responseId: `r-${i}`,
      respondent: `person-${i % 5}`,
      condition: i % 2 ? 'service-first' : 'bill-first',
      values: { satisfaction: i % 11, trust: 1 + (i % 7), fair_price: 10 + i },
    });
  }
  const res = await t.request({ method: 'POST', url: `${base}/responses/batch`, payload: { responses } });
  expect(res.statusCode).toBe(201);
}

const dataVersion = async () => (await t.request({ method: 'GET', url: base })).json().dataVersion as number;

describe('POST/DELETE …/responses/{responseId}/exclusion', () => {
  it('excludes in one transaction: flag, reason, values, counts moved, counter, dataVersion + 1, audit row (who, when, why)', async () => {
    await seed();
    const adminKeyId = (await t.store.apiKeys.list()).find((k) => k.label === 'test admin')!.id;
    const res = await t.request({ method: 'POST', url: `${base}/responses/r-4/exclusion`, payload: { reason: 'failed attention check' } });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual({ responseId: 'r-4', condition: 'bill-first', excluded: true, reason: 'failed attention check', changed: true, dataVersion: 2 });
    await checkInvariants(t);
    const stored = await t.store.responses.getStored((await t.store.experiments.getBySlug(WATER_ID))!.key, 'r-4');
    expect(stored).toMatchObject({ excluded: true, excludedReason: 'failed attention check' });
    // r-4 answered satisfaction 4 and trust 5: those counts moved to excluded = 1.
    const moved = await t.sql(`SELECT m.slug, v.value, v.count FROM value_counts v JOIN measures m ON m.id = v.measure_id WHERE v.excluded = 1 ORDER BY m.position`);
    expect(moved).toEqual([
      { slug: 'satisfaction', value: 4, count: 1 },
      { slug: 'trust', value: 5, count: 1 },
    ]);
    const view = (await t.request({ method: 'GET', url: base })).json();
    expect(view.counts.byCondition[0]).toEqual({ condition: 'bill-first', responses: 15, excluded: 1 });
    const audit = (await t.request({ method: 'GET', url: `${base}/audit` })).json().entries;
    expect(audit).toEqual([
      {
        id: 1,
        action: 'exclude',
        responseId: 'r-4',
        reason: 'failed attention check',
        count: 1,
        apiKeyId: adminKeyId,
        at: expect.stringMatching(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/),
        dataVersion: 2,
        redacted: false,
        fromMeasure: null,
        toMeasure: null,
      },
    ]);
  });

  it('is idempotent: excluding again → 200, changed false, first reason kept, nothing written; restore, restore again', async () => {
    await seed();
    await t.request({ method: 'POST', url: `${base}/responses/r-4/exclusion`, payload: { reason: 'speeder' } });
    const again = await t.request({ method: 'POST', url: `${base}/responses/r-4/exclusion`, payload: { reason: 'another reason' } });
    expect(again.statusCode).toBe(200);
    expect(again.json()).toEqual({ responseId: 'r-4', condition: 'bill-first', excluded: true, reason: 'speeder', changed: false, dataVersion: 2 });
    expect(await dataVersion()).toBe(2);
    const restore = await t.request({ method: 'DELETE', url: `${base}/responses/r-4/exclusion` });
    expect(restore.json()).toEqual({ responseId: 'r-4', condition: 'bill-first', excluded: false, reason: null, changed: true, dataVersion: 3 });
    await checkInvariants(t);
    expect(await t.sql(`SELECT count(*) AS n FROM value_counts WHERE excluded = 1`)).toEqual([{ n: 0 }]);
    const twice = await t.request({ method: 'DELETE', url: `${base}/responses/r-4/exclusion` });
    expect(twice.json()).toMatchObject({ excluded: false, changed: false, dataVersion: 3 });
    const audit = (await t.request({ method: 'GET', url: `${base}/audit` })).json().entries;
    // Newest first; the restoration records the reason the response had been excluded for.
    expect(audit.map((e: { action: string; reason: string; dataVersion: number }) => [e.action, e.reason, e.dataVersion])).toEqual([
      ['restore', 'speeder', 3],
      ['exclude', 'speeder', 2],
    ]);
  });

  it('many exclusions and restorations keep every invariant', async () => {
    await seed();
    for (const id of ['r-1', 'r-2', 'r-3', 'r-10', 'r-11', 'r-29']) {
      expect((await t.request({ method: 'POST', url: `${base}/responses/${id}/exclusion`, payload: { reason: 'check' } })).statusCode).toBe(200);
      await checkInvariants(t);
    }
    for (const id of ['r-2', 'r-29']) {
      expect((await t.request({ method: 'DELETE', url: `${base}/responses/${id}/exclusion` })).statusCode).toBe(200);
      await checkInvariants(t);
    }
    expect(await dataVersion()).toBe(1 + 6 + 2);
    const view = (await t.request({ method: 'GET', url: base })).json();
    expect(view.counts.excluded).toBe(4);
  });

  it('works on a closed experiment (cleaning goes on after collection)', async () => {
    await seed();
    await t.request({ method: 'PATCH', url: base, payload: { status: 'closed' } });
    expect((await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: { reason: 'late check' } })).statusCode).toBe(200);
  });

  it('4xx as problem+json: unknown response or experiment 404, bad reason 422, bad id 400, read/ingest keys 403, no key 401', async () => {
    await seed();
    const notFound = await t.request({ method: 'POST', url: `${base}/responses/nope/exclusion`, payload: { reason: 'x' } });
    expect(notFound.statusCode).toBe(404);
    expect(notFound.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect(notFound.json()).toEqual({ type: 'urn:splitballot:problem:not-found', title: 'Not found', status: 404, detail: 'Experiment water-bill-2027 has no response "nope".' });
    expect((await t.request({ method: 'DELETE', url: `${base}/responses/nope/exclusion` })).statusCode).toBe(404);
    const noExperiment = await t.request({ method: 'POST', url: '/v1/experiments/nope/responses/r-1/exclusion', payload: { reason: 'x' } });
    expect(noExperiment.json()).toMatchObject({ status: 404, detail: 'There is no experiment "nope".' });
    const empty = await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: { reason: '   ' } });
    expect(empty.statusCode).toBe(422);
    expect(empty.json().errors).toEqual([{ path: 'reason', message: 'must say why the response is excluded' }]);
    const missing = await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: {} });
    expect(missing.statusCode).toBe(422);
    expect(missing.json().errors[0].path).toBe('reason');
    const extra = await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: { reason: 'x', by: 'me' } });
    expect(extra.json().errors).toEqual([{ path: 'by', message: 'is not a known field' }]);
    const badId = await t.request({ method: 'POST', url: `${base}/responses/%20bad/exclusion`, payload: { reason: 'x' } });
    expect(badId.statusCode).toBe(400);
    expect(badId.json().type).toBe('urn:splitballot:problem:invalid-parameters');
    for (const scope of ['read', 'ingest'] as const) {
      const key = await t.key(scope);
      const res = await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: { reason: 'x' }, key });
      expect(res.statusCode).toBe(403);
      expect((await t.request({ method: 'GET', url: `${base}/audit`, key })).statusCode).toBe(403);
    }
    expect((await t.request({ method: 'DELETE', url: `${base}/responses/r-1/exclusion`, key: null })).statusCode).toBe(401);
    // Nothing above changed the data.
    expect(await dataVersion()).toBe(1);
    await checkInvariants(t);
  });
});
