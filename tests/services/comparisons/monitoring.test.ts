/**
 * The comparison calls computeMonitoring (server/services/monitoring/interim.ts) with the MonitoringInput it declares — moments of
 * each group as compared and Welch's t and df — and puts what it returns in `monitoring`. The monitoring module is
 * replaced by a recording double here; its own numbers are tested by the interim-monitoring work.
 */
import { afterAll, beforeAll, expect, it, vi } from 'vitest';
import type { MonitoringInput } from '../../../server/services/monitoring/interim.js';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

const calls: MonitoringInput[] = [];
vi.mock('../../../server/services/monitoring/interim.js', () => ({
  computeMonitoring: async (input: MonitoringInput) => {
    calls.push(input);
    return { anytimeValid: null, groupSequential: null, caveat: 'recording double' };
  },
}));

let t: TestApp;
beforeAll(async () => {
  t = await startTestApp();
  await t.createWater();
});
afterAll(async () => {
  await t.close();
});

it('passes n, mean, variance = sd² of each group, Welch t/df and alpha; the reply carries the result', async () => {
  const responses = [3, 5, 8, 9, 4, 6, 7, 2].map((v, i) => ({ condition: i % 2 ? 'service-first' : 'bill-first', values: { satisfaction: v, trust: 4, fair_price: 10 * v } }));
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
  const body = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/comparisons/fair_price` })).json();
  expect(body.monitoring).toEqual({ anytimeValid: null, groupSequential: null, caveat: 'recording double' });
  expect(calls).toHaveLength(1);
  const input = calls[0];
  const e = (await t.store.experiments.getBySlug(WATER_ID))!;
  expect(input.experiment.id).toBe(WATER_ID);
  expect(input.store).toBe(t.store);
  expect(input.measureKey).toBe(e.measures[2].key);
  expect(input.conditionKeys).toEqual([e.conditions[0].key, e.conditions[1].key]);
  expect(input.alpha).toBe(0.05);
  // bill-first: 30, 80, 40, 70 → mean 55, variance 1700/3 (n − 1); service-first: 50, 90, 60, 20 → mean 55, variance 2500/3.
  expect(input.a).toEqual({ n: 4, mean: body.groups.a.mean, variance: body.groups.a.sd ** 2 });
  expect(input.a.mean).toBe(55);
  expect(input.a.variance).toBeCloseTo(1700 / 3, 10);
  expect(input.b.variance).toBeCloseTo(2500 / 3, 10);
  expect(input.welch).toEqual({ t: body.welch.t, df: body.welch.df });
  // A cached reply does not call it again.
  await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/comparisons/fair_price` });
  expect(calls).toHaveLength(1);
});

// fastify's default maxParamLength (100) would answer 414 for a responseId of up to 128 characters or a respondent
// of up to 256, which ingest accepts; server/http/app.ts raises it.
it('long ids: a responseId of 128 characters and a respondent of 256 reach their routes', async () => {
  const responseId = `r${'x'.repeat(127)}`;
  const respondent = `p${'y'.repeat(255)}`;
  const post = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: { responseId, respondent, condition: 'bill-first', values: { satisfaction: 1, trust: 1, fair_price: 1 } } });
  expect(post.statusCode).toBe(201);
  const ex = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/${responseId}/exclusion`, payload: { reason: 'long id check' } });
  expect(ex.statusCode, ex.body).toBe(200);
  const er = await t.request({ method: 'DELETE', url: `/v1/experiments/${WATER_ID}/respondents/${respondent}` });
  expect(er.statusCode, er.body).toBe(200);
  expect(er.json().erased).toBe(1);
});

it('path parts: a 150-character id reaches its route (404 for an unknown experiment); beyond 1,024 characters → 414 naming the limit', async () => {
  const mid = await t.request({ method: 'GET', url: `/v1/experiments/${'a'.repeat(150)}/comparisons` });
  expect(mid.statusCode).toBe(404);
  const long = await t.request({ method: 'DELETE', url: `/v1/experiments/${WATER_ID}/responses/${'r'.repeat(1025)}/exclusion` });
  expect(long.statusCode).toBe(414);
  expect(long.json()).toEqual({
    type: 'urn:splitballot:problem:malformed-request',
    title: 'URI too long',
    status: 414,
    detail: 'A part of the URL path is longer than 1,024 characters.',
  });
  expect((await t.request({ method: 'DELETE', url: `/v1/experiments/${WATER_ID}/responses/${'r'.repeat(1024)}/exclusion` })).statusCode).not.toBe(414);
});
