/**
 * API keys: each scope against each route, experiment-limited keys, revoked/unknown/missing/malformed keys,
 * the environment admin key, the first-start admin key, and the rule that every route declares its access.
 */
import { beforeEach, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.js';
import { ensureAdminKey, generateSecret, hashSecret } from '../../server/services/keys.js';
import { eachTestApp, testConfig, waterResponse, WATER_ID, tempDir, type TestApp } from '../helpers/app.js';
import { join } from 'node:path';

let t: TestApp;
eachTestApp((app) => (t = app));
beforeEach(async () => {
  expect((await t.createWater({ id: 'other-study' })).statusCode).toBe(201);
});

let counter = 0;
interface RouteCase {
  name: string;
  method: 'GET' | 'POST' | 'PATCH';
  url: string;
  payload?: () => unknown;
  ok: number;
}
const ROUTES: RouteCase[] = [
  {
    name: 'create experiment',
    method: 'POST',
    url: '/v1/experiments',
    payload: () => ({ id: `made-${++counter}`, title: 'x', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 'm', min: 0, max: 1 }] }),
    ok: 201,
  },
  { name: 'list experiments', method: 'GET', url: '/v1/experiments', ok: 200 },
  { name: 'read experiment', method: 'GET', url: `/v1/experiments/${WATER_ID}`, ok: 200 },
  { name: 'change experiment', method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: () => ({ title: `t${++counter}` }), ok: 200 },
  { name: 'post response', method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: () => waterResponse(), ok: 201 },
  { name: 'post batch', method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: () => ({ responses: [waterResponse()] }), ok: 201 },
];

type Who = 'none' | 'malformed' | 'unknown' | 'revoked' | 'admin' | 'admin@water' | 'admin@other' | 'ingest' | 'ingest@water' | 'ingest@other' | 'read' | 'read@water' | 'read@other';

/** Expected status per route (in ROUTES order) for each caller. "ok" = the route's success status. */
const MATRIX: Record<Who, (number | 'ok')[]> = {
  none: [401, 401, 401, 401, 401, 401],
  malformed: [401, 401, 401, 401, 401, 401],
  unknown: [401, 401, 401, 401, 401, 401],
  revoked: [401, 401, 401, 401, 401, 401],
  admin: ['ok', 'ok', 'ok', 'ok', 'ok', 'ok'],
  'admin@water': [403, 'ok', 'ok', 'ok', 'ok', 'ok'],
  'admin@other': [403, 'ok', 403, 403, 403, 403],
  ingest: [403, 403, 403, 403, 'ok', 'ok'],
  'ingest@water': [403, 403, 403, 403, 'ok', 'ok'],
  'ingest@other': [403, 403, 403, 403, 403, 403],
  read: [403, 'ok', 'ok', 403, 403, 403],
  'read@water': [403, 'ok', 'ok', 403, 403, 403],
  'read@other': [403, 'ok', 403, 403, 403, 403],
};

async function headerFor(who: Who): Promise<Record<string, string>> {
  switch (who) {
    case 'none':
      return {};
    case 'malformed':
      return { authorization: `Token ${t.adminKey}` };
    case 'unknown':
      return t.auth(generateSecret());
    case 'revoked': {
      const secret = await t.key('admin');
      const keys = await t.store.apiKeys.list();
      await t.store.apiKeys.revoke(keys[keys.length - 1].id, new Date().toISOString());
      return t.auth(secret);
    }
    default: {
      const [scope, limit] = who.split('@') as ['admin' | 'ingest' | 'read', string | undefined];
      const experiment = limit === undefined ? null : limit === 'water' ? WATER_ID : 'other-study';
      return t.auth(await t.key(scope, experiment));
    }
  }
}

describe('keys × routes', () => {
  for (const who of Object.keys(MATRIX) as Who[]) {
    it(`${who}`, async () => {
      const headers = await headerFor(who);
      for (const [i, route] of ROUTES.entries()) {
        const expected = MATRIX[who][i] === 'ok' ? route.ok : MATRIX[who][i];
        const res = await t.app.inject({ method: route.method, url: route.url, headers, ...(route.payload ? { payload: route.payload() as object } : {}) });
        expect(res.statusCode, `${who} → ${route.name}: ${res.body}`).toBe(expected);
        if (res.statusCode >= 400) {
          expect(res.headers['content-type']).toBe('application/problem+json; charset=utf-8');
          expect(res.json().status).toBe(res.statusCode);
        }
        if (res.statusCode === 401) expect(res.headers['www-authenticate']).toBe('Bearer realm="splitballot"');
      }
    });
  }

  it('the public routes need no key', async () => {
    for (const url of ['/healthz', '/readyz', '/thank-you']) {
      expect((await t.app.inject({ method: 'GET', url })).statusCode, url).toBe(200);
    }
  });

  it('a key limited to one experiment lists only that experiment', async () => {
    const limited = await t.key('read', 'other-study');
    const res = await t.app.inject({ method: 'GET', url: '/v1/experiments', headers: t.auth(limited) });
    expect(res.json().experiments.map((e: { id: string }) => e.id)).toEqual(['other-study']);
  });

  it('exact problem bodies for 401 and 403', async () => {
    const none = await t.app.inject({ method: 'GET', url: '/v1/experiments' });
    expect(none.json()).toEqual({ type: 'urn:splitballot:problem:unauthorized', title: 'Unauthorized', status: 401, detail: 'Send an API key in the header Authorization: Bearer <key>.' });
    const malformed = await t.app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: 'Bearer' } });
    expect(malformed.json().detail).toBe('The Authorization header must be "Bearer <key>".');
    const unknown = await t.app.inject({ method: 'GET', url: '/v1/experiments', headers: t.auth('sb_nope') });
    expect(unknown.json().detail).toBe('The API key is not valid (unknown or revoked).');
    const ingest = await t.key('ingest');
    const scope = await t.app.inject({ method: 'GET', url: `/v1/experiments/${WATER_ID}`, headers: t.auth(ingest) });
    expect(scope.json()).toEqual({ type: 'urn:splitballot:problem:forbidden', title: 'Forbidden', status: 403, detail: 'This key has the ingest scope; this route needs admin or read.' });
    const other = await t.key('read', 'other-study');
    const limited = await t.app.inject({ method: 'GET', url: `/v1/experiments/${WATER_ID}`, headers: t.auth(other) });
    expect(limited.json().detail).toBe('This key is limited to experiment other-study.');
  });

  it('revocation takes effect at once; last_used_at is recorded', async () => {
    const secret = await t.key('read', null, 'dashboard');
    expect((await t.app.inject({ method: 'GET', url: '/v1/experiments', headers: t.auth(secret) })).statusCode).toBe(200);
    const key = (await t.store.apiKeys.list()).find((k) => k.label === 'dashboard')!;
    expect(key.lastUsedAt).toMatch(/^\d{4}-/);
    expect(await t.store.apiKeys.revoke(key.id, new Date().toISOString())).toBe('revoked');
    expect((await t.app.inject({ method: 'GET', url: '/v1/experiments', headers: t.auth(secret) })).statusCode).toBe(401);
    expect(await t.store.apiKeys.revoke(key.id, new Date().toISOString())).toBe('already-revoked');
    expect(await t.store.apiKeys.revoke(99999, new Date().toISOString())).toBe('not-found');
  });
});

describe('admin keys from the environment and at first start', () => {
  it('SPLITBALLOT_ADMIN_KEY is accepted, stored only as its hash, and replaced when it changes', async () => {
    const dir = tempDir();
    const dbPath = join(dir, 'env.db');
    const first = generateSecret();
    let app = buildApp(testConfig(dbPath, { adminKeyHash: hashSecret(first), logLevel: 'silent' }));
    await app.ready();
    expect((await app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: `Bearer ${first}` } })).statusCode).toBe(200);
    await app.close();
    const second = generateSecret();
    app = buildApp(testConfig(dbPath, { adminKeyHash: hashSecret(second), logLevel: 'silent' }));
    await app.ready();
    expect((await app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: `Bearer ${second}` } })).statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: `Bearer ${first}` } })).statusCode).toBe(401);
    const envKeys = (await app.store.apiKeys.list()).filter((k) => k.origin === 'environment');
    // [label, active] in creation order: the first key was revoked when the second replaced it.
    expect(envKeys.map((k) => [k.label, k.revokedAt === null])).toEqual([
      ['SPLITBALLOT_ADMIN_KEY', false],
      ['SPLITBALLOT_ADMIN_KEY', true],
    ]);
    await app.close();
    // Unset: the environment key stops working.
    app = buildApp(testConfig(dbPath, { logLevel: 'silent' }));
    await app.ready();
    expect((await app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: `Bearer ${second}` } })).statusCode).toBe(401);
    await app.close();
  });

  it('ensureAdminKey creates one admin key only when none is active and none is configured', async () => {
    const dir = tempDir();
    const app = buildApp(testConfig(join(dir, 'boot.db'), { logLevel: 'silent' }));
    await app.ready();
    const secret = await ensureAdminKey(app.store, null);
    expect(secret).toMatch(/^sb_[A-Za-z0-9_-]{43}$/);
    expect(await ensureAdminKey(app.store, null)).toBeNull();
    expect((await app.inject({ method: 'GET', url: '/v1/experiments', headers: { authorization: `Bearer ${secret}` } })).statusCode).toBe(200);
    const keys = await app.store.apiKeys.list();
    expect(keys.map((k) => [k.scope, k.origin])).toEqual([['admin', 'bootstrap']]);
    // With a configured key nothing is created.
    const key = (await app.store.apiKeys.list())[0];
    await app.store.apiKeys.revoke(key.id, new Date().toISOString());
    expect(await ensureAdminKey(app.store, hashSecret(generateSecret()))).toBeNull();
    expect((await app.store.apiKeys.list()).filter((k) => k.origin === 'bootstrap')).toHaveLength(1);
    await app.close();
  });

  it('a route that declares no access cannot be registered', async () => {
    const app = buildApp(testConfig(join(tempDir(), 'guard.db'), { logLevel: 'silent' }));
    let error: unknown = null;
    try {
      app.get('/sneaky', async () => 'x');
      await app.ready();
    } catch (err) {
      error = err;
    }
    expect(String(error)).toContain('route GET /sneaky declares no config.access');
    await app.close().catch(() => undefined);
  });
});
