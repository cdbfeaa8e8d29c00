/**
 * The answers behind the outlier and influential-answer flags: exactly the stored responses with the flagged values
 * (checked against the data posted), with arrival times; after an exclusion the comparison is recomputed without it.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { startTestApp, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

// Invented water-utility tariff study: a 0–100 acceptance item; "detailed" has three answers near the top.
const definition = {
  id: 'water-tariff-2027',
  title: 'Invented water-utility survey: tariff wording',
  conditions: [{ id: 'plain' }, { id: 'detailed' }],
  measures: [{ id: 'acceptance', min: 0, max: 100, integer: true }],
};

function answers() {
  const out = [];
  for (let i = 0; i < 40; i++) out.push({ responseId: `p-${i}`, condition: 'plain', values: { acceptance: 40 + (i % 9) - 4 } });
  for (let i = 0; i < 37; i++) out.push({ responseId: `d-${i}`, condition: 'detailed', values: { acceptance: 42 + (i % 7) - 3 } });
  out.push({ responseId: 'd-top-1', condition: 'detailed', values: { acceptance: 97 } });
  out.push({ responseId: 'd-top-2', condition: 'detailed', values: { acceptance: 100 } });
  out.push({ responseId: 'd-top-3', condition: 'detailed', values: { acceptance: 100 } });
  return out;
}

describe('flaggedAnswers in the comparison reply', () => {
  it('lists the responses behind the outlier flag; an exclusion removes one and the reply follows', async () => {
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: definition })).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses/batch', payload: { responses: answers() } })).statusCode).toBe(201);
    const url = '/v1/experiments/water-tariff-2027/comparisons/acceptance';
    const body = (await t.request({ method: 'GET', url })).json();
    const outliers = body.flags.find((f: { code: string }) => f.code === 'outliers');
    expect(outliers.detail.b.values.map((v: { value: number }) => v.value)).toEqual([100, 97]);
    const listed = body.flaggedAnswers.answers.filter((x: { flag: string }) => x.flag === 'outliers');
    expect(listed.map((x: { responseId: string; value: number; group: string; condition: string; excluded: boolean }) => [x.responseId, x.value, x.group, x.condition, x.excluded])).toEqual([
      ['d-top-2', 100, 'b', 'detailed', false],
      ['d-top-3', 100, 'b', 'detailed', false],
      ['d-top-1', 97, 'b', 'detailed', false],
    ]);
    for (const x of listed) expect(x.receivedAt).toMatch(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/);
    expect(body.flaggedAnswers.truncated).toBe(false);
    // The read key sees the same list (comparisons are answered to read and admin keys only).
    const readKey = await t.key('read', 'water-tariff-2027');
    expect((await t.request({ method: 'GET', url, key: readKey })).json().flaggedAnswers).toEqual(body.flaggedAnswers);

    const ex = await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses/d-top-1/exclusion', payload: { reason: 'typed 97 for 47 (checked with the respondent)' } });
    expect(ex.statusCode, ex.body).toBe(200);
    const after = (await t.request({ method: 'GET', url })).json();
    expect(after.groups.b.n).toBe(39);
    expect(after.flaggedAnswers.answers.filter((x: { flag: string }) => x.flag === 'outliers').map((x: { responseId: string }) => x.responseId)).toEqual(['d-top-2', 'd-top-3']);
    // With includeExcluded the excluded answer is listed again, marked as excluded.
    const all = (await t.request({ method: 'GET', url: `${url}?includeExcluded=true` })).json();
    expect(all.flaggedAnswers.answers.find((x: { responseId: string }) => x.responseId === 'd-top-1')).toMatchObject({ value: 97, excluded: true });
  });

  it('no outlier or influential flag: flaggedAnswers is null', async () => {
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: definition })).statusCode).toBe(201);
    const plain = answers().filter((r) => !r.responseId.startsWith('d-top'));
    expect((await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses/batch', payload: { responses: plain } })).statusCode).toBe(201);
    const body = (await t.request({ method: 'GET', url: '/v1/experiments/water-tariff-2027/comparisons/acceptance' })).json();
    expect(body.flags.map((f: { code: string }) => f.code).filter((c: string) => c === 'outliers' || c === 'influential_point')).toEqual([]);
    expect(body.flaggedAnswers).toBeNull();
  });
});
