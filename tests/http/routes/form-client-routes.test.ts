/**
 * The two routes a survey page uses besides ingest and assignment: the public form definition
 * (GET /v1/experiments/{id}/form) and the served browser client (GET /client/v1/collect.js and collect.d.ts).
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { clientDirectory } from '../../../server/http/routes/client-script.js';
import { eachTestApp, startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

const PAGE_ORIGIN = 'http://127.0.0.1:9';
let t: TestApp;
eachTestApp((app) => (t = app), { config: { corsOrigins: [PAGE_ORIGIN] } });

describe('GET /v1/experiments/{id}/form', () => {
  it('gives exactly what a form needs to an ingest key of the experiment, with a strong ETag', async () => {
    await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: { condition: 'bill-first', values: { satisfaction: 7, trust: 5, fair_price: 42.5 } } });
    const ingest = await t.key('ingest', WATER_ID, 'survey page');
    const res = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/form`, key: ingest });
    expect(res.statusCode, res.body).toBe(200);
    expect(res.json()).toEqual({
      experiment: WATER_ID,
      status: 'open',
      conditions: ['bill-first', 'service-first'],
      measures: [
        { id: 'satisfaction', min: 0, max: 10, integer: true, required: true },
        { id: 'trust', min: 1, max: 7, integer: true, required: true },
        { id: 'fair_price', min: 0, max: 200, integer: false, required: true },
      ],
    });
    // Nothing that tells the respondent the manipulation, the counts or the results.
    for (const word of ['title', 'label', 'count', 'dataVersion', 'responses', 'Water utility']) expect(res.body).not.toContain(word);
    const etag = res.headers.etag as string;
    expect(etag).toMatch(/^"[A-Za-z0-9_-]{27}"$/);
    expect(res.headers['cache-control']).toBe('private, no-cache');
    const again = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/form`, key: ingest, headers: { 'if-none-match': etag } });
    expect(again.statusCode).toBe(304);
    // A change of limits changes the ETag (and the body).
    await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'form-limits', title: 'Invented', conditions: [{ id: 'a', label: 'A' }, { id: 'b', label: 'B' }], measures: [{ id: 'score', label: 'Score', min: 0, max: 10, integer: true, required: true }] } });
    const before = await t.request({ method: 'GET', url: '/v1/experiments/form-limits/form' });
    expect((await t.request({ method: 'PATCH', url: '/v1/experiments/form-limits', payload: { measures: [{ id: 'score', max: 5 }] } })).statusCode).toBe(200);
    const after = await t.request({ method: 'GET', url: '/v1/experiments/form-limits/form', headers: { 'if-none-match': before.headers.etag as string } });
    expect(after.statusCode).toBe(200);
    expect(after.json().measures[0].max).toBe(5);
  });

  it('refuses an ingest key limited to another experiment, and answers 404 for an unknown one', async () => {
    await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'other', title: 'Invented', conditions: [{ id: 'a', label: 'A' }, { id: 'b', label: 'B' }], measures: [{ id: 'score', label: 'Score', min: 0, max: 10, integer: true, required: true }] } });
    const other = await t.key('ingest', 'other');
    const res = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/form`, key: other });
    expect(res.statusCode).toBe(403);
    expect(res.json().detail).toBe('This key is limited to experiment other.');
    expect((await t.request({ method: 'GET', url: '/v1/experiments/nope/form' })).statusCode).toBe(404);
  });
});

describe('GET /client/v1/{file}', () => {
  it('serves the module and its declarations byte for byte, with an ETag, a cache lifetime and 304', async () => {
    for (const [name, type] of [['collect.js', 'text/javascript; charset=utf-8'], ['collect.d.ts', 'application/typescript; charset=utf-8']]) {
      const res = await t.request({ method: 'GET', url: `/client/v1/${name}`, key: null });
      expect(res.statusCode).toBe(200);
      expect(res.headers['content-type']).toBe(type);
      expect(res.body).toBe(readFileSync(`${clientDirectory()}/${name}`, 'utf8'));
      expect(res.headers['cache-control']).toBe('public, max-age=3600');
      expect(res.headers['cross-origin-resource-policy']).toBe('cross-origin');
      const etag = res.headers.etag as string;
      expect(etag).toMatch(/^"[A-Za-z0-9_-]{27}"$/);
      expect((await t.request({ method: 'GET', url: `/client/v1/${name}`, key: null, headers: { 'if-none-match': etag } })).statusCode).toBe(304);
    }
    const js = (await t.request({ method: 'GET', url: '/client/v1/collect.js', key: null })).body;
    expect(js).toMatch(/export const VERSION = '1\.\d+\.\d+';/);
    expect(js).not.toMatch(/^\s*import /m);
  });

  it('serves nothing else from the folder', async () => {
    for (const name of ['collect.ts', '..%2Fassets.ts', 'README.md', 'x']) {
      expect((await t.request({ method: 'GET', url: `/client/v1/${name}`, key: null })).statusCode, name).toBe(404);
    }
    // Other answers keep the same-origin resource policy.
    expect((await t.request({ method: 'GET', url: '/healthz', key: null })).headers['cross-origin-resource-policy']).toBe('same-origin');
  });

  it('CORS: the configured origin may load it and read Retry-After; another origin gets no CORS headers', async () => {
    const allowed = await t.request({ method: 'GET', url: '/client/v1/collect.js', key: null, headers: { origin: PAGE_ORIGIN } });
    expect(allowed.headers['access-control-allow-origin']).toBe(PAGE_ORIGIN);
    const other = await t.request({ method: 'GET', url: '/client/v1/collect.js', key: null, headers: { origin: 'http://127.0.0.1:10' } });
    expect(other.headers['access-control-allow-origin']).toBeUndefined();
    const ingest = await t.key('ingest', WATER_ID);
    const post = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, headers: { origin: PAGE_ORIGIN }, payload: { condition: 'bill-first', values: { satisfaction: 7, trust: 5, fair_price: 1 } } });
    expect(post.statusCode).toBe(201);
    expect(String(post.headers['access-control-expose-headers']).toLowerCase().split(/,\s*/)).toContain('retry-after');
  });
});

describe('what the client reads from a refusal across origins', () => {
  it("the service's own 429 carries Retry-After, readable by a configured origin", async () => {
    const limited = await startTestApp({ config: { corsOrigins: [PAGE_ORIGIN], rateLimitIngestPerMinute: 1 } });
    try {
      expect((await limited.createWater()).statusCode).toBe(201);
      const ingest = await limited.key('ingest', WATER_ID);
      const post = () =>
        limited.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, headers: { origin: PAGE_ORIGIN }, payload: { condition: 'bill-first', values: { satisfaction: 7, trust: 5, fair_price: 1 } } });
      expect((await post()).statusCode).toBe(201);
      const refused = await post();
      expect(refused.statusCode).toBe(429);
      expect(Number(refused.headers['retry-after'])).toBeGreaterThanOrEqual(1);
      expect(refused.headers['access-control-allow-origin']).toBe(PAGE_ORIGIN);
      expect(String(refused.headers['access-control-expose-headers']).toLowerCase().split(/,\s*/)).toContain('retry-after');
    } finally {
      await limited.close();
    }
  });
});
