/**
 * Access matrix (issue 6, test 3): every registered route × {no key, malformed header, unknown key, revoked
 * key, form key, ingest key, read key, admin key, admin key limited to another experiment} → the expected status.
 *
 * ACCESS below is the one table; it is the specification, written by hand (not derived from the routes'
 * config.access, which would make the test repeat the code). Every route the app registers must have an entry:
 * a new route without one fails "every registered route has an entry", and an entry whose route is gone fails
 * too. HEAD routes that fastify adds for GET routes are checked with their GET entry.
 *
 * Expected answers:
 *  - public: every variant gets one of `ok` (an Authorization header, even a bad one, is ignored);
 *  - otherwise no / malformed / unknown / revoked key → 401; a scope not in `scopes` → 403; the admin key limited
 *    to another experiment → 403 where `limited` is 'denied', else one of `ok`; an allowed key → one of `ok`.
 * In particular an ingest key can never read a comparison, an export or a definition's counts, and a public form key
 * (scope form) can only post single answers and assign new respondents: no batch, no CSV import, no read.
 */
import { request as httpRequest } from 'node:http';
import type { InjectOptions } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { Scope } from '../../server/store/types.js';
import { startTestApp, TEST_ENGINE, waterBillDefinition, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

type Variant = 'no key' | 'malformed header' | 'unknown key' | 'revoked key' | 'form key' | 'ingest key' | 'read key' | 'admin key' | 'key limited to another experiment';
const VARIANTS: Variant[] = ['no key', 'malformed header', 'unknown key', 'revoked key', 'form key', 'ingest key', 'read key', 'key limited to another experiment', 'admin key'];

interface Entry {
  /** 'public', or the scopes that may call it. */
  scopes: 'public' | Scope[];
  /** For an admin key limited to ANOTHER experiment: refused (403) or served. Default 'denied'. */
  limited?: 'denied' | 'allowed';
  /** Statuses an allowed caller may get (default [200]). */
  ok?: number[];
  /** Path (with query) to call, default: the route URL with :id = the demo experiment, :measure = satisfaction, … */
  path?: string;
  /** Body and content type for write routes. */
  payload?: () => InjectOptions['payload'];
  contentType?: string;
  /** Server-sent events: read the status line, then hang up. */
  stream?: boolean;
}

const CSV = `responseId,condition,satisfaction,trust,fair_price\n`;
let csvRow = 0;

/** THE TABLE. Keys are "METHOD /route/pattern". */
const ACCESS: Record<string, Entry> = {
  'GET /healthz': { scopes: 'public' },
  'GET /readyz': { scopes: 'public' },
  'GET /thank-you': { scopes: 'public' },
  'GET /experiments/:id': { scopes: 'public' },
  'GET /': { scopes: 'public' },
  'GET /v1/overview': { scopes: ['admin', 'read'], limited: 'allowed' },
  'GET /pages/:name': { scopes: 'public', path: '/pages/results.css' },
  'GET /openapi.json': { scopes: 'public' },
  'GET /client/v1/:file': { scopes: 'public', path: '/client/v1/collect.js' },
  'GET /metrics': { scopes: ['admin'], limited: 'denied' },

  'POST /v1/experiments': {
    scopes: ['admin'],
    ok: [201, 409],
    payload: () => waterBillDefinition({ id: 'matrix-new' }),
  },
  'GET /v1/experiments': { scopes: ['admin', 'read'], limited: 'allowed' },
  'GET /v1/experiments/:id': { scopes: ['admin', 'read'] },
  'GET /v1/experiments/:id/form': { scopes: ['form', 'ingest', 'read', 'admin'] },
  'PATCH /v1/experiments/:id': { scopes: ['admin'], payload: () => ({ title: 'Water utility survey 2027 (renamed)' }) },

  'POST /v1/experiments/:id/responses': { scopes: ['form', 'ingest', 'admin'], ok: [201], payload: () => waterResponse() },
  'POST /v1/experiments/:id/responses/batch': {
    scopes: ['ingest', 'admin'],
    ok: [201],
    payload: () => ({ responses: [waterResponse(), waterResponse({ condition: 'service-first' })] }),
  },
  'POST /v1/experiments/:id/responses/import': {
    scopes: ['ingest', 'admin'],
    ok: [200, 201],
    contentType: 'text/csv',
    payload: () => `${CSV}csv-${csvRow++},bill-first,5,4,20\n`,
  },

  'GET /v1/experiments/:id/comparisons': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/comparisons/:measure': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/comparisons/:measure/chart.svg': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/comparisons/:measure/omnibus': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/comparisons/:measure/omnibus/chart.svg': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/comparisons/:measure/trajectory': { scopes: ['admin', 'read'], ok: [200, 409] },
  'GET /v1/experiments/:id/comparisons/:measure/trajectory.svg': { scopes: ['admin', 'read'], ok: [200, 409] },
  'GET /v1/experiments/:id/comparisons.csv': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/omnibus.csv': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/responses.csv': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/responses.ndjson': { scopes: ['read', 'admin'] },
  'GET /v1/experiments/:id/events': { scopes: ['read', 'admin'], stream: true },

  'POST /v1/experiments/:id/responses/:responseId/exclusion': {
    scopes: ['admin'],
    ok: [200, 201],
    path: `/v1/experiments/${WATER_ID}/responses/matrix-1/exclusion`,
    payload: () => ({ reason: 'failed attention check' }),
  },
  'DELETE /v1/experiments/:id/responses/:responseId/exclusion': {
    scopes: ['admin'],
    ok: [200, 204],
    path: `/v1/experiments/${WATER_ID}/responses/matrix-1/exclusion`,
  },
  'DELETE /v1/experiments/:id/respondents/:respondent': {
    scopes: ['admin'],
    ok: [200, 204],
    path: `/v1/experiments/${WATER_ID}/respondents/respondent-to-erase`,
  },
  'GET /v1/experiments/:id/audit': { scopes: ['admin'] },
  'POST /v1/experiments/:id/clean-up': {
    scopes: ['admin'],
    payload: () => ({ action: 'exclude', reason: 'access matrix (dry run)', receivedFrom: '2000-01-01T00:00:00Z' }),
  },

  'POST /v1/experiments/:id/looks': { scopes: ['admin'], ok: [200, 201, 409, 422], payload: () => ({ measure: 'satisfaction' }) },
  'GET /v1/experiments/:id/looks': { scopes: ['admin', 'read'] },
  'POST /v1/planning/sample-size': {
    scopes: ['admin', 'read'],
    limited: 'allowed',
    payload: () => ({ test: 'welch', effectSize: 0.5, alpha: 0.05, power: 0.8 }),
  },
  'POST /v1/experiments/:id/assignments': { scopes: ['form', 'ingest', 'admin'], ok: [200, 201, 409], payload: () => ({ respondent: `r-${Math.random()}` }) },
  'GET /v1/experiments/:id/assignments/summary': { scopes: ['admin', 'read'], ok: [200, 409] },

  // On PostgreSQL the service takes no backups (pg_dump does): 503 problem+json saying so, after the same access checks.
  'POST /v1/admin/backup': { scopes: ['admin'], ok: [TEST_ENGINE === 'postgres' ? 503 : 201], payload: () => ({}) },
};

let t: TestApp;
const keys = {} as Record<Variant, string | null>;
let port = 0;

beforeAll(async () => {
  t = await startTestApp({ config: { backupDir: undefined } });
  expect((await t.createWater()).statusCode).toBe(201);
  expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: waterBillDefinition({ id: 'other-survey' }) })).statusCode).toBe(201);
  const responses = Array.from({ length: 40 }, (_, i) =>
    waterResponse({ responseId: `matrix-${i}`, respondent: i === 3 ? 'respondent-to-erase' : `p-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11 }),
  );
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
  const revoked = await t.key('admin', null, 'revoked');
  const id = (await t.store.apiKeys.list()).find((k) => k.label === 'revoked')!.id;
  await t.store.apiKeys.revoke(id, new Date().toISOString());
  keys['no key'] = null;
  keys['malformed header'] = 'malformed';
  keys['unknown key'] = 'sb_' + 'A'.repeat(43);
  keys['revoked key'] = revoked;
  keys['form key'] = await t.key('form');
  keys['ingest key'] = await t.key('ingest');
  keys['read key'] = await t.key('read');
  keys['admin key'] = t.adminKey;
  keys['key limited to another experiment'] = await t.key('admin', 'other-survey');
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  const a = t.app.server.address();
  port = typeof a === 'object' && a ? a.port : 0;
});
afterAll(async () => t.close());

function headersFor(v: Variant): Record<string, string> {
  const k = keys[v];
  if (k === null) return {};
  if (v === 'malformed header') return { authorization: `Token ${t.adminKey}` };
  return { authorization: `Bearer ${k}` };
}

function expected(entry: Entry, v: Variant): number[] {
  const ok = entry.ok ?? [200];
  if (entry.scopes === 'public') return ok;
  if (v === 'no key' || v === 'malformed header' || v === 'unknown key' || v === 'revoked key') return [401];
  if (v === 'key limited to another experiment') return entry.limited === 'allowed' ? ok : [403];
  const scope = v.split(' ')[0] as Scope;
  return entry.scopes.includes(scope) ? ok : [403];
}

function pathFor(route: string, entry: Entry): string {
  if (entry.path) return entry.path;
  return route
    .split(' ')[1]
    .replace(':id', WATER_ID)
    .replace(':measure', 'satisfaction')
    .replace(':responseId', 'matrix-1')
    .replace(':respondent', 'p-1')
    .replace(':name', 'results.css');
}

/** Status of a streaming GET over a real socket: read the status line, then hang up. */
function streamStatus(path: string, headers: Record<string, string>): Promise<number> {
  return new Promise((resolve, reject) => {
    const req = httpRequest({ host: '127.0.0.1', port, path, headers }, (res) => {
      resolve(res.statusCode ?? 0);
      req.destroy();
    });
    req.on('error', (err) => (err.message.includes('socket hang up') ? undefined : reject(err)));
    req.end();
  });
}

describe('access matrix', () => {
  it('every registered route has an entry, and every entry a route', () => {
    const registered = new Set<string>();
    for (const r of t.app.routeTable) {
      if (r.method === 'HEAD' && t.app.routeTable.some((g) => g.method === 'GET' && g.url === r.url)) continue;
      registered.add(`${r.method} ${r.url}`);
    }
    const missing = [...registered].filter((r) => !(r in ACCESS));
    expect(missing, `routes without an access-matrix entry (add them to ACCESS in ${import.meta.url}): ${missing.join(', ')}`).toEqual([]);
    const stale = Object.keys(ACCESS).filter((r) => !registered.has(r));
    expect(stale, `entries without a route: ${stale.join(', ')}`).toEqual([]);
  });

  it('every route × every key variant answers as the table says', async () => {
    const failures: string[] = [];
    let calls = 0;
    for (const [route, entry] of Object.entries(ACCESS)) {
      const method = route.split(' ')[0] as InjectOptions['method'];
      const url = pathFor(route, entry);
      for (const v of VARIANTS) {
        const want = expected(entry, v);
        let status: number;
        let contentType = '';
        if (entry.stream && want.includes(200)) {
          status = await streamStatus(url, headersFor(v));
        } else {
          const headers: Record<string, string> = { ...headersFor(v) };
          if (entry.contentType) headers['content-type'] = entry.contentType;
          const res = await t.app.inject({ method, url, headers, ...(entry.payload ? { payload: entry.payload() } : {}) });
          status = res.statusCode;
          contentType = String(res.headers['content-type'] ?? '');
        }
        calls++;
        if (!want.includes(status)) failures.push(`${route} with ${v}: got ${status}, expected ${want.join(' or ')}`);
        if ((status === 401 || status === 403) && !entry.stream && !contentType.includes('application/problem+json')) {
          failures.push(`${route} with ${v}: ${status} is not problem+json (${contentType})`);
        }
        // The HEAD twin of a GET route is guarded the same way.
        if (method === 'GET' && !entry.stream && (want.includes(401) || want.includes(403))) {
          const head = await t.app.inject({ method: 'HEAD', url, headers: headersFor(v) });
          if (!want.includes(head.statusCode)) failures.push(`HEAD ${route.slice(4)} with ${v}: got ${head.statusCode}, expected ${want.join(' or ')}`);
        }
      }
    }
    expect(failures, failures.join('\n')).toEqual([]);
    expect(calls).toBe(Object.keys(ACCESS).length * VARIANTS.length);
  });

  it('an ingest key never reads a comparison, an export, events or a definition with its counts', async () => {
    const ingest = keys['ingest key']!;
    for (const path of [
      `/v1/experiments/${WATER_ID}`,
      '/v1/experiments',
      `/v1/experiments/${WATER_ID}/comparisons/satisfaction`,
      `/v1/experiments/${WATER_ID}/comparisons/satisfaction/omnibus`,
      `/v1/experiments/${WATER_ID}/comparisons`,
      `/v1/experiments/${WATER_ID}/responses.csv`,
      `/v1/experiments/${WATER_ID}/responses.ndjson`,
      `/v1/experiments/${WATER_ID}/comparisons.csv`,
      `/v1/experiments/${WATER_ID}/events`,
      `/v1/experiments/${WATER_ID}/looks`,
      `/v1/experiments/${WATER_ID}/audit`,
    ]) {
      const res = await t.app.inject({ method: 'GET', url: path, headers: { authorization: `Bearer ${ingest}` } });
      expect(res.statusCode, path).toBe(403);
      expect(res.body).not.toContain('"counts"');
      expect(res.body).not.toContain('satisfaction');
    }
  });
});
