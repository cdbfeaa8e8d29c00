/**
 * POST /v1/experiments/{id}/responses with JSON: every validation rule with its exact problem+json body,
 * nothing stored on a 422, rejected-value counters, idempotent and conflicting retries, closed experiments.
 */
import { describe, expect, it } from 'vitest';
import { dumpAppTables, eachTestApp, WATER_ID, waterResponse, type TestApp } from '../../helpers/app.js';

const URL = `/v1/experiments/${WATER_ID}/responses`;
const VALIDATION = { type: 'urn:splitballot:problem:validation-failed', title: 'Validation failed', status: 422 };

let t: TestApp;
eachTestApp((app) => (t = app));

async function rejectedCounts(): Promise<{ measure: string; reason: string; count: number }[]> {
  return (await t.sql(
    `SELECT m.slug AS measure, r.reason, r.count FROM rejected_value_counts r JOIN measures m ON m.id = r.measure_id ORDER BY m.slug, r.reason`,
  )) as { measure: string; reason: string; count: number }[];
}

async function storedData() {
  const d = await dumpAppTables(t);
  return { responses: d.responses, response_values: d.response_values, value_counts: d.value_counts, conditions: d.conditions, experiments: d.experiments };
}

async function post(payload: unknown, headers: Record<string, string> = {}) {
  return t.request({ method: 'POST', url: URL, payload: payload as object, headers });
}

async function postRaw(body: string) {
  return t.request({ method: 'POST', url: URL, payload: body, headers: { 'content-type': 'application/json' } });
}

describe('accepted responses', () => {
  it('stores a response and answers 201 with the stored record', async () => {
    const res = await post({ responseId: 'resp-0001', condition: 'bill-first', respondent: 'panel-17', submittedAt: '2027-03-01T12:00:00+01:00', values: { satisfaction: 7, trust: 5, fair_price: 42.5 } });
    expect(res.statusCode).toBe(201);
    expect(res.headers['content-type']).toBe('application/json; charset=utf-8');
    const body = res.json();
    expect(body).toEqual({
      responseId: 'resp-0001',
      condition: 'bill-first',
      respondent: 'panel-17',
      values: { satisfaction: 7, trust: 5, fair_price: 42.5 },
      submittedAt: '2027-03-01T11:00:00.000Z',
      receivedAt: expect.stringMatching(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/),
    });
    const exp = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json();
    expect(exp.dataVersion).toBe(1);
    expect(exp.counts).toEqual({
      responses: 1,
      excluded: 0,
      byCondition: [
        { condition: 'bill-first', responses: 1, excluded: 0 },
        { condition: 'service-first', responses: 0, excluded: 0 },
      ],
    });
    const values = await t.sql(`SELECT m.slug, v.value, v.excluded FROM response_values v JOIN measures m ON m.id = v.measure_id ORDER BY m.position`);
    expect(values).toEqual([
      { slug: 'satisfaction', value: 7, excluded: 0 },
      { slug: 'trust', value: 5, excluded: 0 },
      { slug: 'fair_price', value: 42.5, excluded: 0 },
    ]);
    // Per-value counts exist for the integer measures only.
    const counts = await t.sql(`SELECT m.slug, c.value, c.count FROM value_counts c JOIN measures m ON m.id = c.measure_id ORDER BY m.position`);
    expect(counts).toEqual([
      { slug: 'satisfaction', value: 7, count: 1 },
      { slug: 'trust', value: 5, count: 1 },
    ]);
  });

  it('generates a responseId when none is given, and every such post is a new response', async () => {
    const a = await post(waterResponse());
    const b = await post(waterResponse());
    expect(a.statusCode).toBe(201);
    expect(b.statusCode).toBe(201);
    expect(a.json().responseId).toMatch(/^[0-9a-f-]{36}$/);
    expect(a.json().responseId).not.toBe(b.json().responseId);
    expect((await t.sql('SELECT count(*) AS n FROM responses'))[0]).toEqual({ n: 2 });
  });

  it('accepts the scale limits themselves, -0 (stored as 0), and an optional measure left out or null', async () => {
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'fair_price', required: false }] } });
    expect((await post(waterResponse({ responseId: 'lo' }, { satisfaction: 0, trust: 1, fair_price: 0 }))).statusCode).toBe(201);
    expect((await post(waterResponse({ responseId: 'hi' }, { satisfaction: 10, trust: 7, fair_price: 200 }))).statusCode).toBe(201);
    const neg = await postRaw('{"responseId":"neg","condition":"bill-first","values":{"satisfaction":-0,"trust":3,"fair_price":-0}}');
    expect(neg.statusCode).toBe(201);
    expect(Object.is(neg.json().values.satisfaction, 0)).toBe(true);
    const omitted = await post({ responseId: 'omit', condition: 'service-first', values: { satisfaction: 3, trust: 2 } });
    expect(omitted.statusCode).toBe(201);
    expect(omitted.json().values).toEqual({ satisfaction: 3, trust: 2 });
    expect((await post({ responseId: 'null', condition: 'service-first', values: { satisfaction: 3, trust: 2, fair_price: null } })).statusCode).toBe(201);
    const stored = await t.sql(`SELECT value FROM response_values v JOIN responses r ON r.id = v.response_id WHERE r.response_id = 'neg' ORDER BY v.measure_id`);
    expect(stored).toEqual([{ value: 0 }, { value: 3 }, { value: 0 }]);
  });
});

describe('validation: exact problem bodies, nothing stored', () => {
  it('unknown experiment → 404', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/experiments/no-such-study/responses', payload: waterResponse() });
    expect(res.statusCode).toBe(404);
    expect(res.headers['content-type']).toBe('application/problem+json; charset=utf-8');
    expect(res.json()).toEqual({ type: 'urn:splitballot:problem:not-found', title: 'Not found', status: 404, detail: 'There is no experiment "no-such-study".' });
  });

  const cases: { name: string; body: string; errors: unknown[]; rejected: { measure: string; reason: string; count: number }[] }[] = [
    {
      name: 'a value outside the scale',
      body: '{"condition":"bill-first","values":{"satisfaction":170,"trust":5,"fair_price":10}}',
      errors: [{ path: 'values.satisfaction', message: '170 is outside the scale from 0 to 10', value: 170, limit: { min: 0, max: 10 } }],
      rejected: [{ measure: 'satisfaction', reason: 'out_of_range', count: 1 }],
    },
    {
      name: 'a value below the scale on a continuous measure',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"trust":5,"fair_price":-0.01}}',
      errors: [{ path: 'values.fair_price', message: '-0.01 is outside the scale from 0 to 200', value: -0.01, limit: { min: 0, max: 200 } }],
      rejected: [{ measure: 'fair_price', reason: 'out_of_range', count: 1 }],
    },
    {
      name: 'a fraction on an integer measure',
      body: '{"condition":"bill-first","values":{"satisfaction":7.5,"trust":5,"fair_price":10}}',
      errors: [{ path: 'values.satisfaction', message: 'must be a whole number (got 7.5)', value: 7.5 }],
      rejected: [{ measure: 'satisfaction', reason: 'not_integer', count: 1 }],
    },
    {
      name: 'a string in JSON',
      body: '{"condition":"bill-first","values":{"satisfaction":"7","trust":5,"fair_price":10}}',
      errors: [{ path: 'values.satisfaction', message: 'must be a number, not a string', value: '7' }],
      rejected: [{ measure: 'satisfaction', reason: 'not_a_number', count: 1 }],
    },
    {
      name: 'a boolean, an object and an array',
      body: '{"condition":"bill-first","values":{"satisfaction":true,"trust":{"v":5},"fair_price":[10]}}',
      errors: [
        { path: 'values.satisfaction', message: 'must be a number, not a boolean', value: true },
        { path: 'values.trust', message: 'must be a number, not an object', value: '[object]' },
        { path: 'values.fair_price', message: 'must be a number, not an array', value: '[array]' },
      ],
      rejected: [
        { measure: 'fair_price', reason: 'not_a_number', count: 1 },
        { measure: 'satisfaction', reason: 'not_a_number', count: 1 },
        { measure: 'trust', reason: 'not_a_number', count: 1 },
      ],
    },
    {
      name: 'a non-finite number (1e999 parses to Infinity)',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"trust":5,"fair_price":1e999}}',
      errors: [{ path: 'values.fair_price', message: 'is not a finite number', value: 'Infinity' }],
      rejected: [{ measure: 'fair_price', reason: 'not_finite', count: 1 }],
    },
    {
      name: 'an overlong number (41 characters, which JSON.parse would silently round)',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"trust":5,"fair_price":10.000000000000000000000000000000000000001}}',
      errors: [{ path: 'values.fair_price', message: 'is a number with more than 40 characters', value: '10.000000000000000000000000000000000000001' }],
      rejected: [{ measure: 'fair_price', reason: 'too_many_digits', count: 1 }],
    },
    {
      name: 'a missing required measure (not counted as a rejected value)',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"fair_price":10}}',
      errors: [{ path: 'values.trust', message: 'is required' }],
      rejected: [],
    },
    {
      name: 'null for a required measure',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"trust":null,"fair_price":10}}',
      errors: [{ path: 'values.trust', message: 'is required' }],
      rejected: [],
    },
    {
      name: 'an unknown measure',
      body: '{"condition":"bill-first","values":{"satisfaction":1,"trust":5,"fair_price":10,"loyalty":3}}',
      errors: [{ path: 'values.loyalty', message: 'is not a measure of this experiment (measures: satisfaction, trust, fair_price)' }],
      rejected: [],
    },
    {
      name: 'an unknown condition',
      body: '{"condition":"price-first","values":{"satisfaction":1,"trust":5,"fair_price":10}}',
      errors: [{ path: 'condition', message: 'is not a condition of this experiment (conditions: bill-first, service-first)', value: 'price-first' }],
      rejected: [],
    },
    {
      name: 'a missing condition and a bad value together (both listed, the value counted)',
      body: '{"values":{"satisfaction":11,"trust":5,"fair_price":10}}',
      errors: [
        { path: 'condition', message: 'Invalid input: expected string, received undefined' },
        { path: 'values.satisfaction', message: '11 is outside the scale from 0 to 10', value: 11, limit: { min: 0, max: 10 } },
      ],
      rejected: [{ measure: 'satisfaction', reason: 'out_of_range', count: 1 }],
    },
    {
      name: 'an unknown top-level field and a malformed responseId',
      body: '{"responseId":"has space","condition":"bill-first","colour":"red","values":{"satisfaction":1,"trust":5,"fair_price":10}}',
      errors: [
        { path: 'responseId', message: 'must be 1–128 characters: letters, digits, ".", "_", "~", ":" or "-", starting with a letter or digit' },
        { path: 'colour', message: 'is not a known field' },
      ],
      rejected: [],
    },
    {
      name: 'a body that is not an object',
      body: '[1, 2, 3]',
      errors: [{ path: '', message: 'Invalid input: expected object, received array' }],
      rejected: [],
    },
    {
      name: 'a submittedAt without a time zone',
      body: '{"condition":"bill-first","submittedAt":"2027-03-01 12:00","values":{"satisfaction":1,"trust":5,"fair_price":10}}',
      errors: [{ path: 'submittedAt', message: 'must be an ISO 8601 date-time with a time zone, e.g. 2027-03-01T12:00:00Z' }],
      rejected: [],
    },
  ];

  for (const c of cases) {
    it(`${c.name} → 422`, async () => {
      const before = await storedData();
      const res = await postRaw(c.body);
      expect(res.statusCode).toBe(422);
      expect(res.headers['content-type']).toBe('application/problem+json; charset=utf-8');
      const n = c.errors.length;
      expect(res.json()).toEqual({ ...VALIDATION, detail: `The request body has ${n} problem${n === 1 ? '' : 's'}; nothing was stored.`, errors: c.errors });
      expect(await storedData()).toEqual(before);
      expect(await rejectedCounts()).toEqual(c.rejected);
    });
  }

  it('counts every rejected attempt (two posts of the same bad value count twice)', async () => {
    await postRaw('{"condition":"bill-first","values":{"satisfaction":170,"trust":5,"fair_price":10}}');
    await postRaw('{"condition":"bill-first","values":{"satisfaction":-1,"trust":5,"fair_price":10}}');
    expect(await rejectedCounts()).toEqual([{ measure: 'satisfaction', reason: 'out_of_range', count: 2 }]);
    const api = await t.store.responses.getRejectedCounts((await t.store.experiments.getBySlug(WATER_ID))!.key);
    expect(api).toEqual([{ measure: 'satisfaction', reason: 'out_of_range', count: 2 }]);
  });

  it('malformed JSON → 400, empty body → 400, text/plain → 415, all problem+json', async () => {
    const bad = await postRaw('{"condition": "bill-first",');
    expect(bad.statusCode).toBe(400);
    expect(bad.json()).toEqual({ type: 'urn:splitballot:problem:malformed-request', title: 'Malformed request', status: 400, detail: 'The body is not valid JSON.' });
    const empty = await postRaw('');
    expect(empty.statusCode).toBe(400);
    expect(empty.json().type).toBe('urn:splitballot:problem:malformed-request');
    const text = await t.request({ method: 'POST', url: URL, payload: 'satisfaction 7', headers: { 'content-type': 'text/plain' } });
    expect(text.statusCode).toBe(415);
    expect(text.json()).toEqual({
      type: 'urn:splitballot:problem:unsupported-media-type',
      title: 'Unsupported media type',
      status: 415,
      detail: 'Send application/json (or application/x-www-form-urlencoded for a single response from an HTML form).',
    });
  });

  it('__proto__ in the body → 400 and nothing stored', async () => {
    const res = await postRaw('{"condition":"bill-first","values":{"satisfaction":1,"trust":5,"fair_price":10},"__proto__":{"x":1}}');
    expect(res.statusCode).toBe(400);
    expect((await t.sql('SELECT count(*) AS n FROM responses'))[0]).toEqual({ n: 0 });
  });

  it('a body over 1 MiB → 413 problem', async () => {
    const big = JSON.stringify(waterResponse({ respondent: 'x'.repeat(1024 * 1024) }));
    const res = await postRaw(big);
    expect(res.statusCode).toBe(413);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:payload-too-large',
      title: 'Payload too large',
      status: 413,
      detail: 'The request body is larger than this route accepts (1 MiB for one response, 16 MiB for a batch, 2 MiB for a CSV import; larger files go through the import command).',
    });
  });
});

describe('retries', () => {
  it('the same responseId with the same content → 200 with the stored record; no new row, dataVersion unchanged', async () => {
    const first = await post(waterResponse({ responseId: 'retry-1', submittedAt: '2027-03-01T10:00:00Z' }));
    expect(first.statusCode).toBe(201);
    const before = await storedData();
    // A retry with a fresh client timestamp and the keys in another order is still the same response.
    const again = await post({ submittedAt: '2027-03-01T10:00:05Z', values: { fair_price: 42.5, trust: 5, satisfaction: 7 }, condition: 'bill-first', responseId: 'retry-1' });
    expect(again.statusCode).toBe(200);
    expect(again.json()).toEqual(first.json());
    expect(await storedData()).toEqual(before);
  });

  it('the same responseId with different content → 409 and the stored response is untouched', async () => {
    expect((await post(waterResponse({ responseId: 'retry-2' }))).statusCode).toBe(201);
    const before = await storedData();
    const res = await post(waterResponse({ responseId: 'retry-2' }, { satisfaction: 8 }));
    expect(res.statusCode).toBe(409);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:response-conflict',
      title: 'Response conflict',
      status: 409,
      detail: 'Response retry-2 was already stored with different content; nothing was changed.',
      errors: [{ path: 'responseId', message: 'was already stored with different content', value: 'retry-2' }],
    });
    expect(await storedData()).toEqual(before);
    // A different condition or respondent is different content too.
    expect((await post(waterResponse({ responseId: 'retry-2', condition: 'service-first' }))).statusCode).toBe(409);
    expect((await post(waterResponse({ responseId: 'retry-2', respondent: 'someone' }))).statusCode).toBe(409);
  });

  it('responseIds are per experiment', async () => {
    expect((await t.createWater({ id: 'water-bill-2028' })).statusCode).toBe(201);
    expect((await post(waterResponse({ responseId: 'shared' }))).statusCode).toBe(201);
    const other = await t.request({ method: 'POST', url: '/v1/experiments/water-bill-2028/responses', payload: waterResponse({ responseId: 'shared' }, { satisfaction: 1 }) });
    expect(other.statusCode).toBe(201);
  });
});

describe('closed experiment', () => {
  it('refuses ingest with 409 and counts nothing; reopening accepts again', async () => {
    const patch = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { status: 'closed' } });
    expect(patch.statusCode).toBe(200);
    const res = await post(waterResponse({}, { satisfaction: 99 }));
    expect(res.statusCode).toBe(409);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:experiment-closed',
      title: 'Experiment closed',
      status: 409,
      detail: 'Experiment water-bill-2027 is closed and accepts no new responses.',
    });
    expect(await rejectedCounts()).toEqual([]);
    const batch = await t.request({ method: 'POST', url: `${URL}/batch`, payload: { responses: [waterResponse()] } });
    expect(batch.statusCode).toBe(409);
    expect((await t.sql('SELECT count(*) AS n FROM responses'))[0]).toEqual({ n: 0 });
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { status: 'open' } });
    expect((await post(waterResponse())).statusCode).toBe(201);
  });
});
