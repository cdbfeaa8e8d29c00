/**
 * GET /v1/overview: every study the key may see, with progress, answers today and this week, refused values, warnings
 * and the primary outcome's headline equal to the family's entry; conditional (304 while nothing changes).
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { boundaries } from '../../../server/services/overview.js';
import { startTestApp, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

// Invented water-utility studies.
const tariff = {
  id: 'water-tariff-2027',
  title: 'Invented water-utility survey: tariff wording',
  conditions: [{ id: 'plain', label: 'Plain tariff wording' }, { id: 'detailed', label: 'Detailed tariff wording' }],
  plannedPerCondition: 50,
  measures: [
    { id: 'acceptance', label: 'Acceptance of the new tariff (0–100)', min: 0, max: 100, integer: true, primary: true },
    { id: 'minutes', label: 'Minutes spent on the page', min: 0, max: 120, required: false, role: 'process' },
  ],
};
const leaflet = {
  id: 'water-leaflet-2027',
  title: 'Invented water-utility survey: leaflet order',
  conditions: [{ id: 'tips-first' }, { id: 'costs-first' }],
  measures: [{ id: 'intent', min: 1, max: 7, integer: true }],
};

function answers(n: number) {
  return Array.from({ length: n }, (_, i) => ({
    responseId: `r-${i}`,
    condition: i % 2 === 0 ? 'plain' : 'detailed',
    values: { acceptance: 40 + ((i * 7) % 21) + (i % 2) * 4, minutes: 3 + (i % 9) },
  }));
}

describe('GET /v1/overview', () => {
  it('lists every study with its headline; a limited key sees its own; If-None-Match answers 304 until data move', async () => {
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: tariff })).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: leaflet })).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses/batch', payload: { responses: answers(40) } })).statusCode).toBe(201);
    // One refused value (out of range) on the tariff study.
    expect((await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses', payload: { condition: 'plain', values: { acceptance: 140 } } })).statusCode).toBe(422);

    const res = await t.request({ method: 'GET', url: '/v1/overview' });
    expect(res.statusCode, res.body).toBe(200);
    const body = res.json();
    expect(body.studies.map((s: { id: string }) => s.id)).toEqual(['water-tariff-2027', 'water-leaflet-2027']);
    const s = body.studies[0];
    expect(s.conditions).toEqual([
      { id: 'plain', label: 'Plain tariff wording', answers: 20, excluded: 0, planned: 50, progress: 0.4 },
      { id: 'detailed', label: 'Detailed tariff wording', answers: 20, excluded: 0, planned: 50, progress: 0.4 },
    ]);
    expect([s.answersToday, s.answersThisWeek, s.refusedValues]).toEqual([40, 40, 1]);
    const family = (await t.request({ method: 'GET', url: '/v1/experiments/water-tariff-2027/comparisons' })).json();
    const entry = family.comparisons.find((c: { measure: string }) => c.measure === 'acceptance');
    expect(s.primary).toEqual({
      measure: 'acceptance',
      label: 'Acceptance of the new tariff (0–100)',
      a: 'plain',
      b: 'detailed',
      welch: { estimate: entry.welch.meanDifference, lower: entry.welch.ci.lower, upper: entry.welch.ci.upper, p: entry.welch.p },
      rankSum: { estimate: entry.hodgesLehmann.estimate, lower: entry.hodgesLehmann.ci.lower, upper: entry.hodgesLehmann.ci.upper, p: entry.mannWhitney.p },
      anytimeValid: { p: entry.monitoring.anytimeValid.p, lower: entry.monitoring.anytimeValid.ci.lower, upper: entry.monitoring.anytimeValid.ci.upper },
      changedAfterDataCollectionBegan: false,
    });
    const warnings = family.comparisons.reduce((n: number, c: { flags: { severity: string }[] }) => n + c.flags.filter((f) => f.severity === 'warning').length, 0);
    expect(s.warnings).toBe(warnings);
    expect(body.studies[1]).toMatchObject({ primary: null, answersToday: 0, refusedValues: 0, plannedPerCondition: null });

    const etag = res.headers.etag as string;
    expect((await t.request({ method: 'GET', url: '/v1/overview', headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    expect((await t.request({ method: 'POST', url: '/v1/experiments/water-leaflet-2027/responses', payload: { condition: 'tips-first', values: { intent: 5 } } })).statusCode).toBe(201);
    const moved = await t.request({ method: 'GET', url: '/v1/overview', headers: { 'if-none-match': etag } });
    expect(moved.statusCode).toBe(200);
    expect(moved.json().studies[1].answersToday).toBe(1);

    const limited = await t.key('read', 'water-leaflet-2027');
    const own = (await t.request({ method: 'GET', url: '/v1/overview', key: limited })).json();
    expect(own.studies.map((x: { id: string }) => x.id)).toEqual(['water-leaflet-2027']);
    const ingest = await t.key('ingest');
    expect((await t.request({ method: 'GET', url: '/v1/overview', key: ingest })).statusCode).toBe(403);
  });

  it('day and ISO-week boundaries are UTC, the week starting on Monday', () => {
    expect(boundaries(new Date('2027-03-03T15:04:05Z'))).toEqual({ day: '2027-03-03T00:00:00.000Z', week: '2027-03-01T00:00:00.000Z' });
    expect(boundaries(new Date('2027-03-07T23:59:59Z'))).toEqual({ day: '2027-03-07T00:00:00.000Z', week: '2027-03-01T00:00:00.000Z' });
    expect(boundaries(new Date('2027-03-08T00:00:00Z'))).toEqual({ day: '2027-03-08T00:00:00.000Z', week: '2027-03-08T00:00:00.000Z' });
  });
});
