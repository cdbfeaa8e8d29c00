/**
 * POST /v1/experiments/{id}/responses/batch: all or nothing, every problem listed by index, repeats and
 * conflicts, counts aggregated correctly, limits.
 */
import { describe, expect, it } from 'vitest';
import { eachTestApp, WATER_ID, waterResponse, type TestApp } from '../../helpers/app.js';

const URL = `/v1/experiments/${WATER_ID}/responses/batch`;

let t: TestApp;
eachTestApp((app) => (t = app));

/** Deterministic invented answers: item i of a batch. */
function item(i: number, prefix = 'b'): Record<string, unknown> {
  return {
    responseId: `${prefix}-${i}`,
    condition: i % 2 === 0 ? 'bill-first' : 'service-first',
    values: { satisfaction: (i * 7) % 11, trust: 1 + ((i * 3) % 7), fair_price: Math.round(((i * 37) % 2000) * 0.1 * 100) / 100 },
  };
}

/** The data tables, read the same way on either engine (api_keys: last_used_at may be written by the first
 * authenticated request; rejected_value_counts: rejected values are counted even when the batch is refused, tested below). */
async function dataTables(): Promise<Record<string, unknown[]>> {
  const d: Record<string, unknown[]> = {};
  for (const table of ['experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts']) d[table] = await t.sql(`SELECT * FROM ${table} ORDER BY 1, 2`);
  return d;
}

describe('batch ingest', () => {
  it('stores every item in one go and reports new and repeated items', async () => {
    const items = Array.from({ length: 500 }, (_, i) => item(i));
    const res = await t.request({ method: 'POST', url: URL, payload: { responses: items } });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toEqual({ created: 500, repeated: 0, responseIds: items.map((x) => x.responseId) });
    const exp = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json();
    expect(exp.dataVersion).toBe(1); // one transaction, one step
    expect(exp.counts.byCondition).toEqual([
      { condition: 'bill-first', responses: 250, excluded: 0 },
      { condition: 'service-first', responses: 250, excluded: 0 },
    ]);

    // value_counts equals a count over the raw values (aggregated in JS before the upserts).
    const fromCounts = await t.sql(`SELECT measure_id, condition_id, value, count FROM value_counts ORDER BY 1, 2, 3`);
    const fromRows = await t.sql(
      `SELECT v.measure_id, v.condition_id, v.value, count(*) AS count FROM response_values v JOIN measures m ON m.id = v.measure_id
       WHERE m.is_integer GROUP BY 1, 2, 3 ORDER BY 1, 2, 3`,
    );
    expect(fromCounts).toEqual(fromRows);

    // Again, with 100 new items and 400 of the old ones: only the new ones are stored.
    const mixed = [...items.slice(0, 400), ...Array.from({ length: 100 }, (_, i) => item(i, 'c'))];
    const again = await t.request({ method: 'POST', url: URL, payload: { responses: mixed } });
    expect(again.statusCode).toBe(201);
    expect(again.json()).toMatchObject({ created: 100, repeated: 400 });
    // Everything repeated → 200 and no new dataVersion.
    const same = await t.request({ method: 'POST', url: URL, payload: { responses: items.slice(0, 10) } });
    expect(same.statusCode).toBe(200);
    expect(same.json()).toMatchObject({ created: 0, repeated: 10 });
    expect((await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json().dataVersion).toBe(2);
  });

  it('a repeat inside the same batch with the same content counts once', async () => {
    const res = await t.request({ method: 'POST', url: URL, payload: { responses: [item(1), item(2), item(1)] } });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toEqual({ created: 2, repeated: 1, responseIds: ['b-1', 'b-2', 'b-1'] });
  });

  it('one bad item rejects the whole batch: every problem listed by index, the database unchanged', async () => {
    await t.request({ method: 'POST', url: URL, payload: { responses: [item(1000)] } });
    const before = await dataTables();
    const items = Array.from({ length: 50 }, (_, i) => item(i));
    items[3] = { ...item(3), values: { satisfaction: 170, trust: 5, fair_price: 10 } };
    items[17] = { ...item(17), condition: 'nowhere' };
    items[42] = { responseId: 'b-42', values: { satisfaction: 4.5, trust: '2', fair_price: 10 } };
    const res = await t.request({ method: 'POST', url: URL, payload: { responses: items } });
    expect(res.statusCode).toBe(422);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:validation-failed',
      title: 'Validation failed',
      status: 422,
      detail: 'The request body has 5 problems; nothing was stored.',
      errors: [
        { path: 'responses[3].values.satisfaction', message: '170 is outside the scale from 0 to 10', value: 170, limit: { min: 0, max: 10 } },
        { path: 'responses[17].condition', message: 'is not a condition of this experiment (conditions: bill-first, service-first)', value: 'nowhere' },
        { path: 'responses[42].condition', message: 'Invalid input: expected string, received undefined' },
        { path: 'responses[42].values.satisfaction', message: 'must be a whole number (got 4.5)', value: 4.5 },
        { path: 'responses[42].values.trust', message: 'must be a number, not a string', value: '2' },
      ],
    });
    expect(await dataTables()).toEqual(before);
    // The refused values are counted (documented: a rejected batch's bad values count, once per request).
    const rejected = await t.sql(`SELECT m.slug AS measure, r.reason, r.count FROM rejected_value_counts r JOIN measures m ON m.id = r.measure_id ORDER BY 1, 2`);
    expect(rejected).toEqual([
      { measure: 'satisfaction', reason: 'not_integer', count: 1 },
      { measure: 'satisfaction', reason: 'out_of_range', count: 1 },
      { measure: 'trust', reason: 'not_a_number', count: 1 },
    ]);
  });

  it('a conflict with a stored response, or inside the batch, rejects the whole batch with 409', async () => {
    await t.request({ method: 'POST', url: URL, payload: { responses: [item(1)] } });
    const before = await dataTables();
    const changed = { ...item(1), values: { satisfaction: 0, trust: 1, fair_price: 0 } };
    const res = await t.request({ method: 'POST', url: URL, payload: { responses: [item(5), changed, item(6), item(6, 'x'), { ...item(6, 'x'), condition: 'service-first' }] } });
    expect(res.statusCode).toBe(409);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:response-conflict',
      title: 'Response conflict',
      status: 409,
      detail: '2 items repeat a stored responseId (or one earlier in the batch) with different content; nothing was stored.',
      errors: [
        { path: 'responses[1].responseId', message: 'was already stored with different content', value: 'b-1' },
        { path: 'responses[4].responseId', message: 'was already stored with different content', value: 'x-6' },
      ],
    });
    expect(await dataTables()).toEqual(before);
  });

  it('envelope rules: at least one, at most 10,000 items, JSON only, no unknown fields', async () => {
    const empty = await t.request({ method: 'POST', url: URL, payload: { responses: [] } });
    expect(empty.statusCode).toBe(422);
    expect(empty.json().errors).toEqual([{ path: 'responses', message: 'must contain at least one response' }]);
    const missing = await t.request({ method: 'POST', url: URL, payload: { items: [] } });
    expect(missing.json().errors).toEqual([
      { path: 'responses', message: 'Invalid input: expected array, received undefined' },
      { path: 'items', message: 'is not a known field' },
    ]);
    const tooMany = await t.request({ method: 'POST', url: URL, payload: { responses: Array.from({ length: 10_001 }, () => ({})) } });
    expect(tooMany.statusCode).toBe(422);
    expect(tooMany.json().errors).toEqual([{ path: 'responses', message: 'must contain at most 10000 responses' }]);
    const form = await t.request({ method: 'POST', url: URL, payload: 'condition=bill-first', headers: { 'content-type': 'application/x-www-form-urlencoded' } });
    expect(form.statusCode).toBe(415);
    expect(form.json().detail).toBe('A batch must be sent as application/json.');
  });

  it('accepts the full 10,000 items; a body over 16 MiB → 413', async () => {
    const items = Array.from({ length: 10_000 }, (_, i) => item(i));
    const res = await t.request({ method: 'POST', url: URL, payload: { responses: items } });
    expect(res.statusCode).toBe(201);
    expect(res.json().created).toBe(10_000);
    const huge = JSON.stringify({ responses: [waterResponse({ respondent: 'x'.repeat(17 * 1024 * 1024) })] });
    const big = await t.request({ method: 'POST', url: URL, payload: huge, headers: { 'content-type': 'application/json' } });
    expect(big.statusCode).toBe(413);
    expect(big.json().type).toBe('urn:splitballot:problem:payload-too-large');
  });
});
