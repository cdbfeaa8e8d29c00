/**
 * The one error handler: every error is application/problem+json; a 5xx never shows the message, stack or SQL;
 * fastify's own client errors keep their status.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { z } from 'zod';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { MAX_JSON_DEPTH } from '../../server/http/json-body.js';
import { ProblemError } from '../../server/errors.js';
import { LogCapture, tempDir, testConfig } from '../helpers/app.js';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';

let app: FastifyInstance;
const logs = new LogCapture();

beforeAll(async () => {
  app = buildApp(testConfig(join(tempDir(), 'p.db')), { logStream: logs });
  const publicAccess = { config: { access: { public: true as const } } };
  app.get('/test/throws', publicAccess, async () => {
    throw new Error('SELECT secret_column FROM api_keys WHERE hash = x — internal detail');
  });
  app.get('/test/sql', publicAccess, async () => {
    (app.store as unknown as { db: { prepare(sql: string): unknown } }).db.prepare('SELEC broken FROM nowhere');
    return 'unreachable';
  });
  app.get('/test/teapot', publicAccess, async () => {
    throw Object.assign(new Error('internal teapot detail'), { statusCode: 418 });
  });
  app.get('/test/problem', publicAccess, async () => {
    throw new ProblemError('forbidden', 'A thrown problem keeps its detail.');
  });
  app.withTypeProvider<ZodTypeProvider>().get(
    '/test/bad-reply',
    { ...publicAccess, schema: { response: { 200: z.object({ n: z.number() }) } } },
    async () => ({ n: 'not a number' }) as unknown as { n: number },
  );
  app.withTypeProvider<ZodTypeProvider>().get(
    '/test/query',
    { ...publicAccess, schema: { querystring: z.object({ n: z.coerce.number().int() }) } },
    async (req) => ({ n: req.query.n }),
  );
  await app.ready();
});

afterAll(async () => {
  await app.close();
});

const INTERNAL = { type: 'urn:splitballot:problem:internal-error', title: 'Internal server error', status: 500 };

describe('problem+json', () => {
  it('a route that throws → 500 with a generic detail, no message, stack or SQL; the log has the error', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/throws' });
    expect(res.statusCode).toBe(500);
    expect(res.headers['content-type']).toBe('application/problem+json; charset=utf-8');
    const body = res.json();
    expect(body).toEqual({ ...INTERNAL, detail: expect.stringMatching(/^An unexpected error occurred; it has been logged with request id [\w-]+\.$/) });
    expect(res.body).not.toMatch(/SELECT|secret_column|internal detail|at \w+ \(|\.ts:\d+/);
    const logged = logs.parsed().find((l) => l.msg === 'request failed');
    expect(logged).toBeDefined();
    expect(JSON.stringify(logged)).toContain('internal detail');
    expect(body.detail).toContain(String(logged!.reqId));
  });

  it('a database error → 500 without SQL text', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/sql' });
    expect(res.statusCode).toBe(500);
    expect(res.json()).toMatchObject(INTERNAL);
    expect(res.body).not.toMatch(/SELEC|nowhere|syntax|sqlite/i);
  });

  it('a reply that does not match its schema → 500, not the bad data', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/bad-reply' });
    expect(res.statusCode).toBe(500);
    expect(res.json()).toMatchObject(INTERNAL);
    expect(res.body).not.toContain('not a number');
  });

  it('another client error keeps its status with a generic detail', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/teapot' });
    expect(res.statusCode).toBe(418);
    expect(res.json()).toEqual({ type: 'urn:splitballot:problem:malformed-request', title: 'Bad request', status: 418, detail: 'The request could not be processed.' });
  });

  it('a thrown ProblemError keeps its type and detail', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/problem' });
    expect(res.json()).toEqual({ type: 'urn:splitballot:problem:forbidden', title: 'Forbidden', status: 403, detail: 'A thrown problem keeps its detail.' });
  });

  it('an invalid query string → 400 invalid-parameters with the field', async () => {
    const res = await app.inject({ method: 'GET', url: '/test/query?n=1.5' });
    expect(res.statusCode).toBe(400);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:invalid-parameters',
      title: 'Invalid parameters',
      status: 400,
      detail: 'The request query string is not valid.',
      errors: [{ path: 'n', message: 'Invalid input: expected int, received number' }],
    });
  });

  it('an unknown route → 404 problem naming it', async () => {
    const res = await app.inject({ method: 'DELETE', url: '/v1/nothing/here?x=1' });
    expect(res.statusCode).toBe(404);
    expect(res.json()).toEqual({ type: 'urn:splitballot:problem:not-found', title: 'Not found', status: 404, detail: 'There is no route DELETE /v1/nothing/here.' });
  });

  it(`JSON nested deeper than ${MAX_JSON_DEPTH} levels → 400 before parsing`, async () => {
    const deep = `${'['.repeat(MAX_JSON_DEPTH + 1)}${']'.repeat(MAX_JSON_DEPTH + 1)}`;
    const secret = generateSecret();
    await app.store.apiKeys.create({ hash: hashSecret(secret), scope: 'admin', experimentKey: null, label: '', origin: 'cli', createdAt: new Date().toISOString() });
    const authed = await app.inject({ method: 'POST', url: '/v1/experiments', payload: deep, headers: { 'content-type': 'application/json', authorization: `Bearer ${secret}` } });
    expect(authed.statusCode).toBe(400);
    expect(authed.json()).toEqual({
      type: 'urn:splitballot:problem:malformed-request',
      title: 'Malformed request',
      status: 400,
      detail: `The JSON body is nested more than ${MAX_JSON_DEPTH} levels deep.`,
    });
  });

  it('every response carries nosniff and no-referrer', async () => {
    for (const url of ['/healthz', '/test/throws', '/nowhere']) {
      const res = await app.inject({ method: 'GET', url });
      expect(res.headers['x-content-type-options'], url).toBe('nosniff');
      expect(res.headers['referrer-policy'], url).toBe('no-referrer');
    }
  });
});
