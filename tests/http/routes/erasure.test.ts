/**
 * Erasure of one respondent (a data-protection request): every response and value deleted in one transaction,
 * counts and counters decremented, dataVersion + 1, an audit row with only the count and time (no respondent id),
 * earlier audit rows of the erased responses redacted. Invariants recomputed from raw rows. Data invented.
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

async function checkInvariants(t: TestApp): Promise<void> {
  const stored = await t.sql(`SELECT measure_id, condition_id, excluded, value, count FROM value_counts ORDER BY 1, 2, 3, 4`);
  const recomputed = await t.sql(
    `SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*) AS count FROM response_values v JOIN measures m ON m.id = v.measure_id
     WHERE m.is_integer GROUP BY 1, 2, 3, 4 ORDER BY 1, 2, 3, 4`,
  );
  expect(stored, 'value_counts = GROUP BY over response_values').toEqual(recomputed);
  const [{ n: bad }] = await t.sql(
    `SELECT count(*) AS n FROM conditions c WHERE c.response_count != (SELECT count(*) FROM responses r WHERE r.condition_id = c.id)
       OR c.excluded_count != (SELECT coalesce(sum(r.excluded), 0) FROM responses r WHERE r.condition_id = c.id)`,
  );
  expect(bad, 'per-condition counters').toBe(0);
  expect(await t.sql(`SELECT count(*) AS n FROM response_values v LEFT JOIN responses r ON r.id = v.response_id WHERE r.id IS NULL`)).toEqual([{ n: 0 }]);
}

async function seed(): Promise<void> {
  const responses = [];
  for (let i = 0; i < 24; i++) {
    responses.push({
      responseId: `r-${i}`,
      respondent: i < 3 ? 'anna@example.org' : `person-${i}`,
      condition: i % 2 ? 'service-first' : 'bill-first',
      values: { satisfaction: i % 11, trust: 1 + (i % 7), fair_price: 10 + i },
    });
  }
  expect((await t.request({ method: 'POST', url: `${base}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
}

describe('DELETE /v1/experiments/{id}/respondents/{respondent}', () => {
  it('erases every response of the respondent (one of them excluded) and keeps every invariant; the audit row holds only count and time', async () => {
    await seed();
    await t.request({ method: 'POST', url: `${base}/responses/r-1/exclusion`, payload: { reason: 'speeder' } });
    const before = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` })).json();
    const res = await t.request({ method: 'DELETE', url: `${base}/respondents/${encodeURIComponent('anna@example.org')}` });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual({ erased: 3, dataVersion: 3 });
    await checkInvariants(t);
    expect(await t.sql(`SELECT count(*) AS n FROM responses WHERE respondent = ?`, 'anna@example.org')).toEqual([{ n: 0 }]);
    for (const id of ['r-0', 'r-1', 'r-2']) expect((await t.request({ method: 'GET', url: `${base}/responses/${id}/exclusion` })).statusCode).toBe(404);
    const view = (await t.request({ method: 'GET', url: base })).json();
    expect(view.counts).toEqual({
      responses: 21,
      excluded: 0,
      byCondition: [
        { condition: 'bill-first', responses: 10, excluded: 0 },
        { condition: 'service-first', responses: 11, excluded: 0 },
      ],
    });
    // Comparisons see the erasure at once (r-0 and r-2 were in bill-first; r-1 was excluded already).
    const after = (await t.request({ method: 'GET', url: `${base}/comparisons/fair_price` })).json();
    expect([before.groups.a.n, after.groups.a.n]).toEqual([12, 10]);
    const audit = (await t.request({ method: 'GET', url: `${base}/audit` })).json().entries;
    expect(audit[0]).toEqual({
      id: 2,
      action: 'erase',
      responseId: null,
      reason: null,
      count: 3,
      apiKeyId: expect.any(Number),
      at: expect.stringMatching(/Z$/),
      dataVersion: 3,
      redacted: false,
      fromMeasure: null,
      toMeasure: null,
    });
    // The earlier exclusion of r-1 lost its link to the erased response.
    expect(audit[1]).toMatchObject({ action: 'exclude', responseId: null, redacted: true, reason: 'speeder' });
    // Nothing in the audit table names the respondent or the erased responses.
    const dump = JSON.stringify(await t.sql(`SELECT * FROM audit_log`));
    expect(dump).not.toContain('anna');
    expect(dump).not.toMatch(/"r-[012]"/);
  });

  it('a respondent without responses: 200 with erased 0, dataVersion unchanged, the request still audited', async () => {
    await seed();
    const res = await t.request({ method: 'DELETE', url: `${base}/respondents/nobody` });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual({ erased: 0, dataVersion: 1 });
    const audit = (await t.request({ method: 'GET', url: `${base}/audit` })).json().entries;
    expect(audit).toEqual([expect.objectContaining({ action: 'erase', count: 0, dataVersion: 1, responseId: null })]);
    // Erasing twice is safe.
    await t.request({ method: 'DELETE', url: `${base}/respondents/person-5` });
    expect((await t.request({ method: 'DELETE', url: `${base}/respondents/person-5` })).json()).toEqual({ erased: 0, dataVersion: 2 });
    await checkInvariants(t);
  });

  it('4xx as problem+json: unknown experiment 404, read and ingest keys 403, no key 401', async () => {
    await seed();
    const res = await t.request({ method: 'DELETE', url: '/v1/experiments/nope/respondents/anna' });
    expect(res.statusCode).toBe(404);
    expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
    for (const scope of ['read', 'ingest'] as const) {
      const key = await t.key(scope);
      expect((await t.request({ method: 'DELETE', url: `${base}/respondents/person-4`, key })).statusCode).toBe(403);
    }
    expect((await t.request({ method: 'DELETE', url: `${base}/respondents/person-4`, key: null })).statusCode).toBe(401);
    expect((await t.request({ method: 'GET', url: base })).json().dataVersion).toBe(1);
  });

  it('a control character in a path id (a respondent, an experiment) is a 400 problem naming it, never a database error; nothing changes', async () => {
    await seed();
    for (const url of [`${base}/respondents/a%00b`, `${base}/respondents/%1B`, '/v1/experiments/wat%00er/respondents/anna']) {
      const res = await t.request({ method: 'DELETE', url });
      expect(res.statusCode, url).toBe(400);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      expect(res.json().errors[0].message, url).toBe('must not contain control characters');
    }
    expect((await t.request({ method: 'GET', url: base })).json().dataVersion).toBe(1);
    await checkInvariants(t);
  });
});
