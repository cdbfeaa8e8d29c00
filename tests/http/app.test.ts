import { loadMigrations } from '../../server/store/sqlite/migrate.js';
/**
 * Over a real socket with supertest (app.server on 127.0.0.1): health, CORS for configured origins only, and the
 * OpenAPI document generated from the route schemas (valid OpenAPI 3.1, every route present).
 */
import SwaggerParser from '@apidevtools/swagger-parser';
import request from 'supertest';
import { afterEach, describe, expect, it } from 'vitest';
import { startTestApp, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp | null = null;
afterEach(async () => {
  await t?.close();
  t = null;
});

describe('over HTTP with supertest', () => {
  it('healthz, readyz, and the curl tour: create, post, 422', async () => {
    t = await startTestApp();
    const server = t.app.server;
    await request(server).get('/healthz').expect(200).expect('content-type', /application\/json/).expect({ status: 'ok' });
    await request(server).get('/readyz').expect(200, { status: 'ready', migrations: loadMigrations().length });
    const auth = `Bearer ${t.adminKey}`;
    const created = await request(server)
      .post('/v1/experiments')
      .set('authorization', auth)
      .send({
        id: WATER_ID,
        title: 'Water utility survey 2027',
        conditions: [{ id: 'bill-first' }, { id: 'service-first' }],
        measures: [{ id: 'satisfaction', min: 0, max: 10, integer: true }],
      });
    expect(created.status).toBe(201);
    const ok = await request(server).post(`/v1/experiments/${WATER_ID}/responses`).set('authorization', auth).send({ responseId: 'r1', condition: 'bill-first', values: { satisfaction: 7 } });
    expect(ok.status).toBe(201);
    const bad = await request(server).post(`/v1/experiments/${WATER_ID}/responses`).set('authorization', auth).send({ condition: 'bill-first', values: { satisfaction: 170 } });
    expect(bad.status).toBe(422);
    expect(bad.headers['content-type']).toBe('application/problem+json; charset=utf-8');
    expect(bad.body.errors).toEqual([{ path: 'values.satisfaction', message: '170 is outside the scale from 0 to 10', value: 170, limit: { min: 0, max: 10 } }]);
  });

  it('CORS: an allowed origin gets the headers (also on preflight), another origin does not', async () => {
    t = await startTestApp({ config: { corsOrigins: ['https://survey.example.org'] } });
    await t.createWater();
    const server = t.app.server;
    const pre = await request(server)
      .options(`/v1/experiments/${WATER_ID}/responses`)
      .set('origin', 'https://survey.example.org')
      .set('access-control-request-method', 'POST')
      .set('access-control-request-headers', 'authorization,content-type');
    expect(pre.status).toBe(204);
    expect(pre.headers['access-control-allow-origin']).toBe('https://survey.example.org');
    expect(pre.headers['access-control-allow-methods']).toContain('POST');
    expect(pre.headers['access-control-allow-headers']).toContain('Authorization');
    const post = await request(server)
      .post(`/v1/experiments/${WATER_ID}/responses`)
      .set('origin', 'https://survey.example.org')
      .set('authorization', `Bearer ${t.adminKey}`)
      .send(waterResponse());
    expect(post.status).toBe(201);
    expect(post.headers['access-control-allow-origin']).toBe('https://survey.example.org');
    // A page's script may read how long to wait after a 429, and the rate-limit headers.
    expect(String(post.headers['access-control-expose-headers']).split(',').map((h) => h.trim().toLowerCase()).sort()).toEqual(
      ['etag', 'location', 'retry-after', 'x-ratelimit-limit', 'x-ratelimit-remaining', 'x-ratelimit-reset'],
    );
    const evil = await request(server).post(`/v1/experiments/${WATER_ID}/responses`).set('origin', 'https://evil.example.com').set('authorization', `Bearer ${t.adminKey}`).send(waterResponse());
    expect(evil.headers['access-control-allow-origin']).toBeUndefined();
  });

  it('CORS: no origins configured → no CORS headers at all', async () => {
    t = await startTestApp();
    const res = await request(t.app.server).get('/healthz').set('origin', 'https://survey.example.org');
    expect(res.headers['access-control-allow-origin']).toBeUndefined();
    const pre = await request(t.app.server).options('/v1/experiments').set('origin', 'https://survey.example.org').set('access-control-request-method', 'POST');
    expect(pre.headers['access-control-allow-origin']).toBeUndefined();
  });
});

describe('OpenAPI document from the route schemas', () => {
  it('is valid OpenAPI 3.1 and lists every route with its problem responses', async () => {
    t = await startTestApp();
    const doc = t.app.swagger() as unknown as { openapi: string; paths: Record<string, Record<string, { responses: Record<string, { content?: Record<string, unknown> }>; security?: unknown }>> };
    expect(doc.openapi).toBe('3.1.0');
    await SwaggerParser.validate(structuredClone(doc) as never);
    expect(Object.keys(doc.paths)).toEqual(
      expect.arrayContaining(['/healthz', '/readyz', '/thank-you', '/v1/experiments', '/v1/experiments/{id}', '/v1/experiments/{id}/responses', '/v1/experiments/{id}/responses/batch']),
    );
    const ingest = doc.paths['/v1/experiments/{id}/responses'].post;
    expect(Object.keys(ingest.responses).sort()).toEqual(['200', '201', '303', '400', '401', '403', '404', '409', '413', '415', '422', '500']);
    expect(Object.keys(ingest.responses['422'].content!)).toEqual(['application/problem+json']);
    expect(ingest.security).toEqual([{ bearerAuth: [] }]);
    expect(doc.paths['/healthz'].get.security).toBeUndefined();
  });
});
