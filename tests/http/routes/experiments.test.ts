/** Experiments: create, list, read with counts, change; every validation rule with its problem body. */
import { describe, expect, it } from 'vitest';
import { eachTestApp, WATER_ID, waterBillDefinition, waterResponse, type TestApp } from '../../helpers/app.js';

let t: TestApp;
eachTestApp((app) => (t = app), { water: false });

const ISO = expect.stringMatching(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/);

describe('POST /v1/experiments', () => {
  it('creates the water-utility experiment → 201 with the stored definition and a Location', async () => {
    const res = await t.createWater();
    expect(res.statusCode).toBe(201);
    expect(res.headers.location).toBe('/v1/experiments/water-bill-2027');
    expect(res.json()).toEqual({
      id: 'water-bill-2027',
      title: 'Water utility survey 2027: bill first or service first?',
      status: 'open',
      conditions: [
        { id: 'bill-first', label: 'The bill questions come first' },
        { id: 'service-first', label: 'The service questions come first' },
      ],
      measures: [
        { id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true, required: true, equivalenceMargin: null, role: 'outcome', primary: false },
        { id: 'trust', label: 'Trust in the utility (1–7)', min: 1, max: 7, integer: true, required: true, equivalenceMargin: null, role: 'outcome', primary: false },
        { id: 'fair_price', label: 'Fair monthly price in euros', min: 0, max: 200, integer: false, required: true, equivalenceMargin: null, role: 'outcome', primary: false },
      ],
      primaryChanges: [],
      plannedPerCondition: 400,
      alpha: 0.05,
      thankYouUrl: null,
      flagThresholds: null,
      monitoring: null,
      allocation: null,
      weights: 'none',
      maxWeight: null,
      dataVersion: 0,
      createdAt: ISO,
      updatedAt: ISO,
      counts: {
        responses: 0,
        excluded: 0,
        byCondition: [
          { condition: 'bill-first', responses: 0, excluded: 0 },
          { condition: 'service-first', responses: 0, excluded: 0 },
        ],
      },
    });
  });

  it('fills defaults: labels = ids, integer false, required true, alpha 0.05, no planned size', async () => {
    const res = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: { id: 'minimal', title: 'Minimal', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 'score', min: 0, max: 1 }] },
    });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toMatchObject({
      conditions: [{ id: 'a', label: 'a' }, { id: 'b', label: 'b' }],
      measures: [{ id: 'score', label: 'score', min: 0, max: 1, integer: false, required: true }],
      plannedPerCondition: null,
      alpha: 0.05,
    });
  });

  it('duplicate id → 409', async () => {
    await t.createWater();
    const res = await t.createWater();
    expect(res.statusCode).toBe(409);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:already-exists',
      title: 'Already exists',
      status: 409,
      detail: 'An experiment with id water-bill-2027 already exists.',
    });
  });

  const SLUG_MESSAGE = 'must be a lowercase slug: a–z, 0–9, "_" or "-", starting with a letter or digit, at most 64 characters';
  const invalid: [string, Record<string, unknown>, unknown[]][] = [
    ['an id that is not a slug', { id: 'Water Bill' }, [{ path: 'id', message: SLUG_MESSAGE }]],
    ['an id starting with "-"', { id: '-water' }, [{ path: 'id', message: SLUG_MESSAGE }]],
    ['an id of 65 characters', { id: 'a'.repeat(65) }, [{ path: 'id', message: SLUG_MESSAGE }]],
    ['one condition', { conditions: [{ id: 'only' }] }, [{ path: 'conditions', message: 'needs at least two conditions' }]],
    [
      'a repeated condition id',
      { conditions: [{ id: 'a' }, { id: 'a' }] },
      [{ path: 'conditions[1].id', message: 'repeats the condition id "a"' }],
    ],
    ['no measures', { measures: [] }, [{ path: 'measures', message: 'needs at least one measure' }]],
    ['min = max', { measures: [{ id: 'm', min: 5, max: 5 }] }, [{ path: 'measures[0].max', message: 'must be greater than min (5)' }]],
    ['min > max', { measures: [{ id: 'm', min: 5, max: 1 }] }, [{ path: 'measures[0].max', message: 'must be greater than min (5)' }]],
    [
      'fractional limits on an integer measure',
      { measures: [{ id: 'm', min: 0.5, max: 10, integer: true }] },
      [{ path: 'measures[0].min', message: 'an integer measure needs whole-number limits' }],
    ],
    [
      'a reserved measure id',
      { measures: [{ id: 'condition', min: 0, max: 1 }] },
      [{ path: 'measures[0].id', message: 'must not be condition or respondent (those names are form fields)' }],
    ],
    [
      'a limit given as a string',
      { measures: [{ id: 'm', min: '0', max: 1 }] },
      [{ path: 'measures[0].min', message: 'Invalid input: expected number, received string' }],
    ],
    ['alpha 0', { alpha: 0 }, [{ path: 'alpha', message: 'Too small: expected number to be >0' }]],
    ['a planned size of 0', { plannedPerCondition: 0 }, [{ path: 'plannedPerCondition', message: 'Too small: expected number to be >=1' }]],
    ['a javascript: thank-you URL', { thankYouUrl: 'javascript:alert(1)' }, [{ path: 'thankYouUrl', message: 'must be an absolute http:// or https:// URL' }]],
    ['an unknown field', { colour: 'blue' }, [{ path: 'colour', message: 'is not a known field' }]],
  ];
  for (const [name, override, errors] of invalid) {
    it(`${name} → 422 with the exact problem`, async () => {
      const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: waterBillDefinition(override) });
      expect(res.statusCode).toBe(422);
      expect(res.json()).toEqual({
        type: 'urn:splitballot:problem:validation-failed',
        title: 'Validation failed',
        status: 422,
        detail: `The request body has ${errors.length} problem${errors.length === 1 ? '' : 's'}; nothing was stored.`,
        errors,
      });
      expect(await t.sql('SELECT count(*) AS n FROM experiments')).toEqual([{ n: 0 }]);
    });
  }

  it('an infinite limit (1e999 in the JSON) → 422', async () => {
    const body = JSON.stringify(waterBillDefinition()).replace('"max":200', '"max":1e999');
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: body, headers: { 'content-type': 'application/json' } });
    expect(res.statusCode).toBe(422);
    expect(res.json().errors).toEqual([{ path: 'measures[2].max', message: 'Invalid input: expected number, received Infinity' }]);
  });

  it('an overlong number in a definition → 422 saying so', async () => {
    const body = JSON.stringify(waterBillDefinition()).replace('"max":200', `"max":2${'0'.repeat(45)}`);
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: body, headers: { 'content-type': 'application/json' } });
    expect(res.statusCode).toBe(422);
    expect(res.json().errors).toEqual([{ path: 'measures[2].max', message: 'is a number with more than 40 characters', value: `2${'0'.repeat(45)}` }]);
  });
});

describe('U+0000 in any text of a definition', () => {
  it('is refused with 400 before anything is stored (PostgreSQL text cannot hold it; refused on every engine alike)', async () => {
    const withNul = waterBillDefinition({ title: 'a\u0000b' });
    const labelled = waterBillDefinition() as { measures: { label: string }[] };
    labelled.measures[0].label = 'x\u0000';
    for (const payload of [withNul, labelled]) {
      const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: JSON.stringify(payload), headers: { 'content-type': 'application/json' } });
      expect(res.statusCode).toBe(400);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      expect(res.json().detail).toContain('U+0000 (NUL)');
    }
    expect((await t.request({ method: 'GET', url: '/v1/experiments' })).json().experiments).toEqual([]);
  });
});

describe('GET /v1/experiments and /v1/experiments/{id}', () => {
  it('lists experiments and reads one with counts per condition; unknown → 404', async () => {
    await t.createWater();
    await t.createWater({ id: 'water-bill-2028' });
    for (const [i, condition] of ['bill-first', 'bill-first', 'service-first'].entries()) {
      await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse({ responseId: `r${i}`, condition }) });
    }
    const list = await t.request({ method: 'GET', url: '/v1/experiments' });
    expect(list.statusCode).toBe(200);
    expect(list.json().experiments.map((e: { id: string }) => e.id)).toEqual(['water-bill-2027', 'water-bill-2028']);
    const one = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` });
    expect(one.json().counts).toEqual({
      responses: 3,
      excluded: 0,
      byCondition: [
        { condition: 'bill-first', responses: 2, excluded: 0 },
        { condition: 'service-first', responses: 1, excluded: 0 },
      ],
    });
    expect(one.json().dataVersion).toBe(3);
    const missing = await t.request({ method: 'GET', url: '/v1/experiments/nope' });
    expect(missing.statusCode).toBe(404);
    expect(missing.json()).toEqual({ type: 'urn:splitballot:problem:not-found', title: 'Not found', status: 404, detail: 'There is no experiment "nope".' });
  });
});

describe('PATCH /v1/experiments/{id}', () => {
  it('changes title, status, planned size, alpha and thank-you URL', async () => {
    await t.createWater();
    const res = await t.request({
      method: 'PATCH',
      url: `/v1/experiments/${WATER_ID}`,
      payload: { title: 'Renamed', status: 'closed', plannedPerCondition: null, alpha: 0.01, thankYouUrl: 'https://example.org/done' },
    });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toMatchObject({ title: 'Renamed', status: 'closed', plannedPerCondition: null, alpha: 0.01, thankYouUrl: 'https://example.org/done' });
    expect(res.json().updatedAt >= res.json().createdAt).toBe(true);
  });

  it("changes a measure's limits while it has no values; refuses with 409 once it has some", async () => {
    await t.createWater();
    const before = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'satisfaction', max: 100 }] } });
    expect(before.statusCode).toBe(200);
    expect(before.json().measures[0]).toMatchObject({ id: 'satisfaction', min: 0, max: 100 });
    await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse() });
    const locked = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'trust', label: 'Trust' }, { id: 'satisfaction', max: 10 }] } });
    expect(locked.statusCode).toBe(409);
    expect(locked.json()).toEqual({
      type: 'urn:splitballot:problem:limits-locked',
      title: 'Measure limits locked',
      status: 409,
      detail: 'The limits (min, max, integer) of satisfaction cannot change: the measure already has stored values.',
      errors: [{ path: 'measures[1]', message: 'satisfaction already has 1 stored value; its limits cannot change' }],
    });
    // Labels and "required" may still change; nothing else changed with the refused patch.
    const label = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'trust', label: 'Trust', required: false }] } });
    expect(label.statusCode).toBe(200);
    expect(label.json().measures[0].max).toBe(100);
    expect(label.json().measures[1]).toMatchObject({ label: 'Trust', required: false });
  });

  it('refuses unknown measures, bad limits, an empty patch and an unknown experiment', async () => {
    await t.createWater();
    const unknown = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'loyalty', max: 3 }] } });
    expect(unknown.statusCode).toBe(422);
    expect(unknown.json().errors).toEqual([{ path: 'measures[0].id', message: 'is not a measure of this experiment', value: 'loyalty' }]);
    const bad = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'trust', min: 9 }] } });
    expect(bad.statusCode).toBe(422);
    expect(bad.json().errors).toEqual([{ path: 'measures[0]', message: 'min (9) must be smaller than max (7)' }]);
    const empty = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: {} });
    expect(empty.statusCode).toBe(422);
    expect(empty.json().errors).toEqual([{ path: '', message: 'must change at least one field' }]);
    const status = await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { status: 'paused' } });
    expect(status.json().errors).toEqual([{ path: 'status', message: 'Invalid option: expected one of "open"|"closed"' }]);
    const missing = await t.request({ method: 'PATCH', url: '/v1/experiments/nope', payload: { title: 'x' } });
    expect(missing.statusCode).toBe(404);
  });
});

describe('experiment options: flag thresholds, monitoring, allocation', () => {
  it('stores them at creation and returns them; flagThresholds can be patched and reset', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: {
      id: 'options-check',
      title: 'Options',
      conditions: [{ id: 'x' }, { id: 'y' }],
      measures: [{ id: 'm', min: 0, max: 10, integer: true }],
      flagThresholds: { sdRatio: 3 },
      monitoring: { spending: 'pocock' },
      allocation: { x: 1, y: 2 },
    } });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toMatchObject({ flagThresholds: { sdRatio: 3 }, monitoring: { spending: 'pocock' }, allocation: { x: 1, y: 2 } });
    const patched = await t.request({ method: 'PATCH', url: '/v1/experiments/options-check', payload: { flagThresholds: { smallN: 10 } } });
    expect(patched.json()).toMatchObject({ flagThresholds: { smallN: 10 }, monitoring: { spending: 'pocock' } });
    const reset = await t.request({ method: 'PATCH', url: '/v1/experiments/options-check', payload: { flagThresholds: null } });
    expect(reset.json().flagThresholds).toBeNull();
  });

  it('an allocation that misses a condition or names an unknown one → 422, nothing stored', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: {
      id: 'bad-allocation',
      title: 'Bad',
      conditions: [{ id: 'x' }, { id: 'y' }],
      measures: [{ id: 'm', min: 0, max: 10 }],
      allocation: { x: 1, z: 1 },
    } });
    expect(res.statusCode).toBe(422);
    expect(res.json().errors.map((e: { path: string }) => e.path).sort()).toEqual(['allocation', 'allocation.z']);
    expect((await t.request({ method: 'GET', url: '/v1/experiments/bad-allocation' })).statusCode).toBe(404);
  });
});
