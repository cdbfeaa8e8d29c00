/**
 * Weights and covariates in the CSV files: the `weight` column of responses.csv (and `weight` in NDJSON), read back by
 * the CSV import; the weighted and adjusted columns of comparisons.csv. Invented water-utility data.
 */
import { describe, expect, it } from 'vitest';
import { parse } from 'csv-parse/sync';
import { eachTestApp, type TestApp } from '../../helpers/app.js';
import { ADJUSTED_CSV_COLUMNS, COMPARISON_CSV_COLUMNS, WEIGHTED_CSV_COLUMNS } from '../../../server/http/routes/exports.js';

let t: TestApp;
eachTestApp((app) => (t = app), { water: false });

async function create(id: string): Promise<void> {
  const res = await t.request({
    method: 'POST',
    url: '/v1/experiments',
    payload: {
      id,
      title: 'Invented water-utility survey with weights and a prior-trust question',
      conditions: [{ id: 'bill-first' }, { id: 'service-first' }],
      measures: [
        { id: 'prior_trust', min: 1, max: 7, integer: true, role: 'covariate' },
        { id: 'satisfaction', min: 0, max: 10, integer: true },
      ],
      weights: 'optional',
    },
  });
  expect(res.statusCode, res.body).toBe(201);
}

function invented(): Record<string, unknown>[] {
  const out: Record<string, unknown>[] = [];
  for (let i = 0; i < 40; i++) {
    const prior = 1 + (i % 7);
    out.push({
      responseId: `r${i}`,
      condition: i % 2 === 0 ? 'bill-first' : 'service-first',
      ...(i % 10 === 9 ? {} : { weight: 0.5 + (i % 4) * 0.75 }),
      values: { prior_trust: prior, satisfaction: Math.min(10, prior + (i % 3) + (i % 2)) },
    });
  }
  return out;
}

describe('weights in the CSV files', () => {
  it('responses.csv carries the weight column; importing it elsewhere gives the same responses and weighted numbers', async () => {
    await create('w1');
    expect((await t.request({ method: 'POST', url: '/v1/experiments/w1/responses/batch', payload: { responses: invented() } })).statusCode).toBe(201);
    const csv = await t.request({ method: 'GET', url: '/v1/experiments/w1/responses.csv' });
    expect(csv.statusCode).toBe(200);
    const lines = csv.body.split('\r\n');
    expect(lines[0]).toBe('responseId,condition,respondent,prior_trust,satisfaction,weight,submittedAt,receivedAt,excluded,excludedReason');
    expect(lines[1].split(',').slice(0, 6)).toEqual(['r0', 'bill-first', '', '1', '1', '0.5']);
    expect(lines[10].split(',').slice(0, 6)).toEqual(['r9', 'service-first', '', '3', '4', '']);
    const nd = await t.request({ method: 'GET', url: '/v1/experiments/w1/responses.ndjson' });
    expect(JSON.parse(nd.body.split('\n')[1]).weight).toBe(1.25);

    await create('w2');
    const imported = await t.request({ method: 'POST', url: '/v1/experiments/w2/responses/import', headers: { 'content-type': 'text/csv' }, payload: csv.body });
    expect(imported.statusCode, imported.body).toBe(201);
    const a = (await t.request({ method: 'GET', url: '/v1/experiments/w1/comparisons/satisfaction' })).json();
    const b = (await t.request({ method: 'GET', url: '/v1/experiments/w2/comparisons/satisfaction' })).json();
    expect(b.weighted).toEqual(a.weighted);
  });

  it('a bad weight in an imported row is refused with the row and column named, and counted', async () => {
    await create('w3');
    const body = 'responseId,condition,prior_trust,satisfaction,weight\r\nx1,bill-first,3,4,0\r\n';
    const res = await t.request({ method: 'POST', url: '/v1/experiments/w3/responses/import', headers: { 'content-type': 'text/csv' }, payload: body });
    expect(res.statusCode).toBe(422);
    expect(res.body).toContain('0 is not a valid weight: a weight must be greater than 0 and at most 1000000');
    const e = (await t.store.experiments.getBySlug('w3'))!;
    expect(await t.store.responses.getRejectedWeightCounts(e.key)).toEqual([{ reason: 'out_of_range', count: 1 }]);
    expect(await t.sql(`SELECT count(*) AS n FROM responses`)).toEqual([{ n: 0 }]);
  });

  it('comparisons.csv appends the weighted and the adjusted columns; covariates get no row of their own', async () => {
    await create('w4');
    await t.request({ method: 'POST', url: '/v1/experiments/w4/responses/batch', payload: { responses: invented() } });
    const res = await t.request({ method: 'GET', url: '/v1/experiments/w4/comparisons.csv' });
    expect(res.statusCode).toBe(200);
    const rows = parse(res.body, { columns: true }) as Record<string, string>[];
    expect(Object.keys(rows[0])).toEqual([...COMPARISON_CSV_COLUMNS, ...WEIGHTED_CSV_COLUMNS, ...ADJUSTED_CSV_COLUMNS]);
    expect(rows.map((r) => r.measure)).toEqual(['satisfaction']);
    const json = (await t.request({ method: 'GET', url: '/v1/experiments/w4/comparisons/satisfaction?covariates=prior_trust' })).json();
    expect(Number(rows[0].weightedMeanDifference)).toBe(json.weighted.tTest.meanDifference);
    expect(Number(rows[0].weightedP)).toBe(json.weighted.tTest.p);
    expect(rows[0].covariates).toBe('prior_trust');
    expect(Number(rows[0].adjustedEstimate)).toBe(json.adjusted.adjusted.estimate);
    expect(Number(rows[0].narrowingPercent)).toBe(json.adjusted.narrowingPercent);
    expect(Number(rows[0].adjustedN)).toBe(40);
  });
});
