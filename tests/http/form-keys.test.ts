/**
 * Public form keys (scope form): a key meant to sit in a public web page may do only what a respondent does — post
 * one answer, assign a NEW respondent — and learns nothing it did not send: no data version, no earlier assignment.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { FORM_SCOPE_ROUTES, RESPONDENT_SCOPES } from '../../server/http/auth.js';
import { hashSecret } from '../../server/services/keys.js';
import { startTestApp, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp;
let form: string;
let ingest: string;

beforeAll(async () => {
  t = await startTestApp();
  expect((await t.createWater()).statusCode).toBe(201);
  form = await t.key('form', WATER_ID, 'survey page');
  ingest = await t.key('ingest', WATER_ID, 'server integration');
});
afterAll(async () => t.close());

describe('form keys', () => {
  it('are stored and read back with the form scope', async () => {
    const record = await t.store.apiKeys.findByHash(hashSecret(form));
    expect(record).toMatchObject({ scope: 'form', experiment: WATER_ID, label: 'survey page' });
    expect((await t.store.apiKeys.list()).filter((k) => k.scope === 'form').map((k) => k.label)).toEqual(['survey page']);
  });

  it('post one answer (JSON or a form field) and get no dataVersion back', async () => {
    const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: form, payload: waterResponse({ responseId: 'form-1' }) });
    expect(res.statusCode).toBe(201);
    expect(Object.keys(res.json()).sort()).toEqual(['condition', 'receivedAt', 'respondent', 'responseId', 'submittedAt', 'values']);
    expect(res.body).not.toContain('dataVersion');
    const repeat = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: form, payload: waterResponse({ responseId: 'form-1' }) });
    expect(repeat.statusCode).toBe(200);
    expect(repeat.body).not.toContain('dataVersion');
    const page = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses`,
      key: null,
      headers: { 'content-type': 'application/x-www-form-urlencoded', accept: 'text/html' },
      payload: `condition=bill-first&satisfaction=4&trust=3&fair_price=10&ingestKey=${form}`,
    });
    expect(page.statusCode).toBe(303);
  });

  it('cannot send a batch or a CSV import (403), and nothing is stored', async () => {
    const before = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json().counts.responses;
    const batch = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses/batch`,
      key: form,
      payload: { responses: [waterResponse(), waterResponse()] },
    });
    expect(batch.statusCode).toBe(403);
    expect(batch.json().detail).toBe('This key has the form scope; this route needs ingest or admin.');
    const csv = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses/import`,
      key: form,
      headers: { 'content-type': 'text/csv' },
      payload: 'responseId,condition,satisfaction,trust,fair_price\nf-csv-1,bill-first,5,4,20\n',
    });
    expect(csv.statusCode).toBe(403);
    expect((await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json().counts.responses).toBe(before);
  });

  it('assign a new respondent, but never reveal the condition of one assigned before', async () => {
    const first = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, key: form, payload: { respondent: 'page-visitor-1' } });
    expect(first.statusCode).toBe(201);
    const condition = first.json().condition as string;
    expect(['bill-first', 'service-first']).toContain(condition);
    const again = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, key: form, payload: { respondent: 'page-visitor-1' } });
    expect(again.statusCode).toBe(409);
    expect(again.json()).toEqual({
      type: 'urn:splitballot:problem:already-assigned',
      title: 'Respondent already assigned',
      status: 409,
      detail: 'This respondent was assigned before; a form key assigns new respondents only and does not reveal an earlier assignment.',
    });
    expect(again.body).not.toContain('bill-first');
    expect(again.body).not.toContain('service-first');
    // A server-side ingest key (never in a page) gets the sticky assignment back.
    const server = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, key: ingest, payload: { respondent: 'page-visitor-1' } });
    expect(server.statusCode).toBe(200);
    expect(server.json()).toMatchObject({ condition, new: false });
  });

  it('reach exactly the routes of FORM_SCOPE_ROUTES that this build registers', () => {
    const withForm = t.app.routeTable
      .filter((r) => r.method !== 'HEAD' && r.access && !r.access.public && r.access.scopes.includes('form'))
      .map((r) => `${r.method} ${r.url}`)
      .sort();
    const registered = new Set(t.app.routeTable.map((r) => `${r.method} ${r.url}`));
    expect(withForm).toEqual(FORM_SCOPE_ROUTES.filter((r) => registered.has(r)).sort());
    expect(RESPONDENT_SCOPES).toEqual(['form', 'ingest', 'admin']);
  });
});
