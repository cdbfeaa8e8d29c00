/**
 * Measure roles and the primary outcome: the definition carries them, the family adjustment covers outcome measures
 * only (checked against adjustPValues on the outcome comparisons alone), and a change of the primary outcome after
 * answers exist is recorded with the definition.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { adjustPValues } from '../../../stats/adjust.js';
import { startTestApp, type TestApp } from '../../helpers/app.js';

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

// The invented water-utility survey, a variant with a 0–100 main item, a second outcome and a process measure.
const definition = {
  id: 'water-tariff-2027',
  title: 'Invented water-utility survey: tariff wording',
  conditions: [{ id: 'plain', label: 'Plain tariff wording' }, { id: 'detailed', label: 'Detailed tariff wording' }],
  measures: [
    { id: 'acceptance', label: 'Acceptance of the new tariff (0–100)', min: 0, max: 100, integer: true, primary: true },
    { id: 'trust', label: 'Trust in the utility (1–7)', min: 1, max: 7, integer: true },
    { id: 'minutes', label: 'Minutes spent on the page', min: 0, max: 120, integer: false, required: false, role: 'process' },
  ],
};

function answers(n: number) {
  const out = [];
  for (let i = 0; i < n; i++) {
    const detailed = i % 2 === 1;
    out.push({
      responseId: `r-${i}`,
      condition: detailed ? 'detailed' : 'plain',
      values: { acceptance: (i * 37 + (detailed ? 9 : 0)) % 101, trust: 1 + ((i * 5) % 7), minutes: ((i * 13) % 190) / 10 + (detailed ? 0.5 : 0) },
    });
  }
  return out;
}

describe('measure roles and the primary outcome', () => {
  it('the definition shows role and primary; a second primary or a primary process measure is refused (422)', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: definition });
    expect(res.statusCode, res.body).toBe(201);
    expect(res.json().measures.map((m: { id: string; role: string; primary: boolean }) => [m.id, m.role, m.primary])).toEqual([
      ['acceptance', 'outcome', true],
      ['trust', 'outcome', false],
      ['minutes', 'process', false],
    ]);
    expect(res.json().primaryChanges).toEqual([]);
    const two = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: { ...definition, id: 'two-primaries', measures: definition.measures.map((m) => ({ ...m, primary: m.id !== 'minutes' })) },
    });
    expect(two.statusCode).toBe(422);
    expect(two.json().errors).toEqual([{ path: 'measures[1].primary', message: 'only one measure can be primary (measures[0] already is)' }]);
    const processPrimary = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: { ...definition, id: 'process-primary', measures: definition.measures.map((m) => ({ ...m, primary: m.id === 'minutes' })) },
    });
    expect(processPrimary.statusCode).toBe(422);
    expect(processPrimary.json().errors).toEqual([{ path: 'measures[2].primary', message: 'a primary measure must have the role "outcome"' }]);
  });

  it('the family adjustment covers the outcome measures only and says so', async () => {
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: definition })).statusCode).toBe(201);
    const batch = await t.request({ method: 'POST', url: '/v1/experiments/water-tariff-2027/responses/batch', payload: { responses: answers(80) } });
    expect(batch.statusCode, batch.body).toBe(201);
    for (const adjust of ['holm', 'bh'] as const) {
      const body = (await t.request({ method: 'GET', url: `/v1/experiments/water-tariff-2027/comparisons?adjust=${adjust}` })).json();
      expect(body.comparisons.map((c: { measure: string; role: string; primary: boolean }) => [c.measure, c.role, c.primary])).toEqual([
        ['acceptance', 'outcome', true],
        ['trust', 'outcome', false],
        ['minutes', 'process', false],
      ]);
      const outcomes = body.comparisons.slice(0, 2);
      // The same adjustment over the two outcome comparisons alone (adjustPValues is checked against R's p.adjust elsewhere).
      const welch = adjustPValues(outcomes.map((c: { welch: { p: number } }) => c.welch.p), adjust);
      const rank = adjustPValues(outcomes.map((c: { mannWhitney: { p: number } }) => c.mannWhitney.p), adjust);
      expect(outcomes.map((c: { adjusted: { welchP: number } }) => c.adjusted.welchP)).toEqual(welch);
      expect(outcomes.map((c: { adjusted: { mannWhitneyP: number } }) => c.adjusted.mannWhitneyP)).toEqual(rank);
      expect(body.comparisons[2].adjusted).toEqual({
        welchP: null,
        mannWhitneyP: null,
        method: adjust,
        reason: 'A process measure is not part of the adjusted family (outcome measures only).',
      });
      expect(body.adjustedFamily).toEqual({
        roles: ['outcome'],
        measures: ['acceptance', 'trust'],
        size: 2,
        description: `${adjust === 'holm' ? 'Holm' : 'Benjamini–Hochberg'} adjustment over the 2 outcome comparisons; process measures are not in the family.`,
      });
    }
  });

  it('changing the primary outcome before answers is not recorded; after answers it is, with who, when and the data version', async () => {
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: definition })).statusCode).toBe(201);
    const url = '/v1/experiments/water-tariff-2027';
    const before = await t.request({ method: 'PATCH', url, payload: { measures: [{ id: 'trust', primary: true }] } });
    expect(before.statusCode, before.body).toBe(200);
    expect(before.json().measures.filter((m: { primary: boolean }) => m.primary).map((m: { id: string }) => m.id)).toEqual(['trust']);
    expect(before.json().primaryChanges).toEqual([]);
    const batch = await t.request({ method: 'POST', url: `${url}/responses/batch`, payload: { responses: answers(10) } });
    expect(batch.statusCode).toBe(201);
    const after = await t.request({ method: 'PATCH', url, payload: { measures: [{ id: 'acceptance', primary: true }] } });
    expect(after.statusCode, after.body).toBe(200);
    const changes = after.json().primaryChanges;
    expect(changes).toHaveLength(1);
    expect(changes[0]).toMatchObject({ from: 'trust', to: 'acceptance', dataVersion: 1 });
    expect(typeof changes[0].apiKeyId).toBe('number');
    expect(changes[0].at).toMatch(/^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$/);
    // A process measure cannot become primary; a role is fixed when the experiment is created (a PATCH of it is refused, nothing changes).
    const bad = await t.request({ method: 'PATCH', url, payload: { measures: [{ id: 'minutes', primary: true }] } });
    expect(bad.statusCode).toBe(422);
    expect(bad.json().errors).toEqual([{ path: 'measures[0].primary', message: 'a primary measure must have the role "outcome"' }]);
    const role = await t.request({ method: 'PATCH', url, payload: { measures: [{ id: 'trust', role: 'process' }] } });
    expect(role.statusCode, role.body).toBe(422);
    expect(role.json().errors).toEqual([{ path: 'measures[0].role', message: 'is not a known field' }]);
    const now = (await t.request({ method: 'GET', url })).json();
    expect(now.measures.find((m: { id: string }) => m.id === 'trust')).toMatchObject({ role: 'outcome', min: 1, max: 7 });
    const family = (await t.request({ method: 'GET', url: `${url}/comparisons` })).json();
    expect(family.adjustedFamily.measures).toEqual(['acceptance', 'trust']);
  });
});
