/**
 * Hostile input (issue 6, test 2): a fast-check property sends 5,200 generated bodies and raw byte strings to
 * every write route the app registers (read from app.routeTable, so new routes are included), plus a few 10 MB
 * strings and raw-socket cases with invalid bytes.
 *
 * Generated: any JSON value; valid-looking responses with one field replaced by something hostile (1e309, -0,
 * "NaN", NaN, huge integers, 400-digit numbers, duplicate keys, __proto__ / constructor keys, unicode and control
 * characters in ids, SQL fragments, wrong types); deep nesting (33–5,000 levels); random bytes; wrong, odd or
 * missing content types; form bodies with the same hostile values.
 *
 * Asserted for every request: the answer is a 4xx application/problem+json with type/title/status/detail (or a
 * 2xx for an item that happens to be valid — recorded as accepted), never a 5xx, never slower than 10 s. After
 * the run: the process answers /healthz; `check` passes (counts agree with the values); every table is exactly as
 * before, except for the accepted items (their response rows, values, counts and the data version) and the
 * counters of refused values (which may only grow), and last-used times of keys.
 */
import { connect } from 'node:net';
import fc from 'fast-check';
import type { InjectOptions, LightMyRequestResponse } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { dumpAppTables, startTestApp, tableNames, tempDir, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

const RUNS = 5200;
const VOLATILE_COLUMNS = new Set(['updated_at', 'last_used_at', 'data_version']);
const INGEST_WRITE_TABLES = new Set(['responses', 'response_values', 'value_counts', 'conditions']);

let t: TestApp;
let writeRoutes: { method: string; url: string }[] = [];
let baseline: Record<string, Record<string, unknown>[]>;
let baselineVersion = 0;
const accepted: { route: string; status: number; body: string }[] = [];
let createdRequests = 0;
const statusCounts = new Map<number, number>();

async function dumpAll(): Promise<Record<string, Record<string, unknown>[]>> {
  return dumpAppTables(t, await tableNames(t));
}

async function dataVersion(): Promise<number> {
  return ((await t.sql(`SELECT data_version FROM experiments WHERE slug = ?`, WATER_ID))[0]?.data_version as number) ?? 0;
}

function strip(row: Record<string, unknown>): Record<string, unknown> {
  const out: Record<string, unknown> = {};
  for (const [k, v] of Object.entries(row)) if (!VOLATILE_COLUMNS.has(k)) out[k] = v;
  return out;
}

beforeAll(async () => {
  t = await startTestApp({ config: { backupDir: `${tempDir()}/backups`, requestTimeoutMs: 2000 } });
  expect((await t.createWater()).statusCode).toBe(201);
  const responses = Array.from({ length: 50 }, (_, i) =>
    waterResponse({ responseId: `base-${i}`, respondent: `p-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11, trust: 1 + (i % 7) }),
  );
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
  // One refused value, so that the baseline has a rejected-value counter whose "may only grow" rule is checked.
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse({}, { satisfaction: 11 }) })).statusCode).toBe(422);
  writeRoutes = t.app.routeTable.filter((r) => ['POST', 'PUT', 'PATCH', 'DELETE'].includes(r.method)).map((r) => ({ method: r.method, url: r.url }));
  baseline = await dumpAll();
  baselineVersion = await dataVersion();
});
afterAll(async () => t.close());

// ---------------------------------------------------------------------------------------------------------------
// Generators

const SQL = ["'; DROP TABLE responses; --", '" OR 1=1 --', "1); DELETE FROM value_counts; --", 'Robert\'); DROP TABLE experiments;--', '%27%20OR%201=1'];
const WEIRD_STRINGS = ['', ' ', '\u0000', 'a\u0000b', '\u202Eevil', '\uD800', '\uFFFF', '🙂'.repeat(40), '\r\n\t', 'NaN', 'Infinity', '-0', '1e309', '__proto__', 'constructor', 'x'.repeat(300), ...SQL];
/** Raw JSON tokens (not necessarily valid JSON). */
const HOSTILE_TOKENS = [
  '1e309', '-1e309', '-0', '0.0', '"NaN"', 'NaN', 'Infinity', '-Infinity', '"7"', 'true', 'null', '[]', '{}', '[7]', '{"value":7}',
  '9007199254740993', '1' + '0'.repeat(400), '0.' + '1'.repeat(400), '-' + '9'.repeat(60), '1e-400', '5.000000000000000000001',
  '7e0', '0x10', '07', '+7', '.5', '5.', '1_000', '"\\u0000"', '"\\ud800"', '10.5', '-3', '11', '4.5',
];

const jsonString = fc.oneof(fc.constantFrom(...WEIRD_STRINGS), fc.string({ maxLength: 40 }), fc.string({ unit: 'grapheme', maxLength: 20 }));

/** A response-shaped JSON text with one hostile element. */
const hostileResponseText = fc
  .record({
    where: fc.constantFrom('satisfaction', 'trust', 'fair_price', 'condition', 'responseId', 'respondent', 'submittedAt', 'extraKey', 'duplicate', 'proto', 'constructor', 'values'),
    token: fc.constantFrom(...HOSTILE_TOKENS),
    text: jsonString,
    n: fc.integer({ min: 0, max: 1e9 }),
    raw: fc.boolean(),
  })
  .map(({ where, token, text, n, raw }) => {
    const values: Record<string, string> = { satisfaction: '7', trust: '4', fair_price: '42.5' };
    const top: Record<string, string> = { condition: '"bill-first"', responseId: JSON.stringify(`h-${n}`) };
    if (where in values) values[where] = token;
    else if (where === 'condition' || where === 'responseId' || where === 'respondent' || where === 'submittedAt') top[where] = raw ? token : JSON.stringify(text);
    const valuesText = `{${Object.entries(values).map(([k, v]) => `"${k}":${v}`).join(',')}}`;
    const members = Object.entries(top).map(([k, v]) => `"${k}":${v}`);
    if (where === 'values') members.push(`"values":${token}`);
    else members.push(`"values":${valuesText}`);
    if (where === 'extraKey') members.push(`${JSON.stringify(text)}:${token}`);
    if (where === 'duplicate') members.push(`"condition":"service-first"`, `"values":{"satisfaction":${token}}`);
    if (where === 'proto') members.push(`"__proto__":{"admin":true,"values":{"satisfaction":5}}`);
    if (where === 'constructor') members.push(`"constructor":{"prototype":{"polluted":${token}}}`);
    return `{${members.join(',')}}`;
  });

const deepText = fc.record({ depth: fc.integer({ min: 33, max: 5000 }), kind: fc.constantFrom('[', '{"a":') }).map(({ depth, kind }) =>
  kind === '[' ? '['.repeat(depth) + ']'.repeat(depth) : '{"a":'.repeat(depth) + '1' + '}'.repeat(depth),
);

const batchText = fc.array(hostileResponseText, { minLength: 1, maxLength: 5 }).map((items) => `{"responses":[${items.join(',')}]}`);

const CONTENT_TYPES = [
  'application/json',
  'application/json; charset=utf-8',
  'APPLICATION/JSON',
  'application/json; charset=utf-16',
  'text/plain',
  'text/csv',
  'application/xml',
  'application/x-www-form-urlencoded',
  'multipart/form-data; boundary=xyz',
  'application/octet-stream',
  'application/json-patch+json',
  '',
  'json',
  'application/json\u0000',
];

interface Body {
  payload: string | Buffer;
  contentType: string | null;
}

const bodyArb: fc.Arbitrary<Body> = fc.oneof(
  { weight: 4, arbitrary: hostileResponseText.map((payload) => ({ payload, contentType: 'application/json' })) },
  { weight: 2, arbitrary: batchText.map((payload) => ({ payload, contentType: 'application/json' })) },
  { weight: 2, arbitrary: fc.jsonValue({ maxDepth: 4 }).map((v) => ({ payload: JSON.stringify(v) ?? 'null', contentType: 'application/json' })) },
  { weight: 1, arbitrary: deepText.map((payload) => ({ payload, contentType: 'application/json' })) },
  { weight: 2, arbitrary: fc.uint8Array({ maxLength: 600 }).map((b) => ({ payload: Buffer.from(b), contentType: 'application/json' })) },
  {
    weight: 2,
    arbitrary: fc
      .record({ body: fc.oneof(hostileResponseText, fc.string({ maxLength: 200 }), fc.uint8Array({ maxLength: 200 }).map((b) => Buffer.from(b).toString('latin1'))), type: fc.constantFrom(...CONTENT_TYPES) })
      .map(({ body, type }) => ({ payload: body, contentType: type === '' ? null : type })),
  },
  {
    weight: 2,
    arbitrary: fc
      .record({ token: fc.constantFrom(...HOSTILE_TOKENS, ...WEIRD_STRINGS), field: fc.constantFrom('satisfaction', 'trust', 'fair_price', 'condition', 'responseId', 'ingestKey', 'respondent', 'values[x]', '__proto__') })
      .map(({ token, field }) => ({
        payload: `condition=bill-first&satisfaction=5&trust=3&fair_price=9&${enc(field)}=${enc(token)}&${enc(field)}=1`,
        contentType: 'application/x-www-form-urlencoded',
      })),
  },
);

const paramArb = fc.oneof(
  { weight: 6, arbitrary: fc.constant(WATER_ID) },
  { weight: 1, arbitrary: fc.constantFrom(...WEIRD_STRINGS, 'no-such-experiment', 'WATER-BILL-2027', 'water-bill-2027 ', '..', '%2e%2e') },
);

/** Percent-encode any string, lone surrogates included (sent as the bytes of U+FFFD). */
function enc(s: string): string {
  return encodeURIComponent(s.replace(/[\uD800-\uDBFF](?![\uDC00-\uDFFF])|(?<![\uD800-\uDBFF])[\uDC00-\uDFFF]/g, '\uFFFD'));
}

/**
 * Path parameters other than :id (a responseId, a respondent) start with "zz" so that they can never name a
 * response a hostile item created: an erasure or exclusion then always aims at nothing, and the tables other
 * than the ingest ones must stay exactly as they were.
 */
function fillUrl(url: string, id: string, other: string): string {
  return url.replace(':id', enc(id)).replace(/:[A-Za-z]+/g, () => enc(`zz${other}`));
}

function isProblem(res: LightMyRequestResponse): boolean {
  if (!String(res.headers['content-type'] ?? '').startsWith('application/problem+json')) return false;
  const p = res.json() as Record<string, unknown>;
  return typeof p.type === 'string' && p.type.startsWith('urn:splitballot:problem:') && typeof p.title === 'string' && p.status === res.statusCode && typeof p.detail === 'string';
}

async function send(opts: InjectOptions): Promise<LightMyRequestResponse> {
  let timer: NodeJS.Timeout | undefined;
  const timeout = new Promise<never>((_, reject) => {
    timer = setTimeout(() => reject(new Error(`no answer within 10 s: ${opts.method} ${opts.url}`)), 10_000);
  });
  try {
    return await Promise.race([t.app.inject(opts), timeout]);
  } finally {
    clearTimeout(timer);
  }
}

function record(route: string, res: LightMyRequestResponse): void {
  statusCounts.set(res.statusCode, (statusCounts.get(res.statusCode) ?? 0) + 1);
  if (res.statusCode >= 200 && res.statusCode < 300) {
    accepted.push({ route, status: res.statusCode, body: res.body });
    if (res.statusCode === 201 && route.includes('/responses')) createdRequests++;
  }
}

describe('hostile input', () => {
  it(`${RUNS} generated bodies to every write route: 4xx problem+json (or an accepted valid item), never 5xx or a hang`, async () => {
    expect(writeRoutes.length).toBeGreaterThanOrEqual(5);
    await fc.assert(
      fc.asyncProperty(fc.nat({ max: 1000 }), bodyArb, paramArb, jsonString, async (routeIndex, body, id, other) => {
        const route = writeRoutes[routeIndex % writeRoutes.length];
        const headers: Record<string, string> = { authorization: `Bearer ${t.adminKey}` };
        if (body.contentType !== null) headers['content-type'] = body.contentType;
        const res = await send({ method: route.method as InjectOptions['method'], url: fillUrl(route.url, id, other || 'x'), headers, payload: body.payload });
        record(`${route.method} ${route.url}`, res);
        // On PostgreSQL the backup route always answers a documented 503 problem (use pg_dump): not a failure.
        const documented503 = t.databaseUrl !== null && route.url === '/v1/admin/backup' && res.statusCode === 503 && isProblem(res);
        if (res.statusCode >= 500 && !documented503) throw new Error(`${res.statusCode} from ${route.method} ${route.url}: ${res.body.slice(0, 300)}`);
        if (res.statusCode >= 400 && !isProblem(res)) throw new Error(`not problem+json: ${res.statusCode} ${res.headers['content-type']} ${res.body.slice(0, 200)}`);
        if (res.statusCode < 200 || (res.statusCode >= 300 && res.statusCode < 400 && res.statusCode !== 303)) throw new Error(`unexpected ${res.statusCode}`);
      }),
      { numRuns: RUNS, seed: 20270301, endOnFailure: true },
    );
    const total = [...statusCounts.values()].reduce((a, b) => a + b, 0);
    expect(total).toBeGreaterThanOrEqual(RUNS);
  }, 120_000);

  it('10 MB strings: 413 or 422 as problem+json, nothing stored', async () => {
    const huge = 'x'.repeat(10 * 1024 * 1024);
    const cases: InjectOptions[] = [
      { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: `{"condition":"bill-first","responseId":"${huge}","values":{}}` },
      { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: `{"responses":[{"condition":"${huge}","values":{"satisfaction":1,"trust":1,"fair_price":1}}]}` },
      { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: `{"responses":[{"condition":"bill-first","respondent":"${huge}","values":{"satisfaction":1,"trust":1,"fair_price":1}}]}` },
      { method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: `{"title":"${huge}"}` },
      { method: 'POST', url: '/v1/experiments', payload: `{"id":"${huge}"}` },
    ];
    for (const c of cases) {
      const res = await send({ ...c, headers: { authorization: `Bearer ${t.adminKey}`, 'content-type': 'application/json' } });
      record(`${c.method} ${c.url}`, res);
      expect([400, 413, 422], `${c.method} ${c.url}`).toContain(res.statusCode);
      expect(isProblem(res)).toBe(true);
      expect(res.body.length).toBeLessThan(10_000);
    }
  }, 60_000);

  it('raw sockets: invalid bytes in the request line, headers and body get 4xx problem+json; the server stays up', async () => {
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    const a = t.app.server.address();
    const port = typeof a === 'object' && a ? a.port : 0;
    const auth = `Authorization: Bearer ${t.adminKey}\r\n`;
    const rawCases: (string | Buffer)[] = [
      Buffer.from([0x16, 0x03, 0x01, 0x02, 0x00, 0x01, 0x00, 0x01, 0xfc, 0x03, 0x03]), // a TLS hello
      'POST /v1/experiments/\u00ff\u00fe/responses HTTP/1.1\r\nHost: a\r\n\r\n',
      `POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nX-Bad: a\u0000b\r\nContent-Length: 2\r\n\r\n{}`,
      `POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nContent-Length: 5\r\nTransfer-Encoding: chunked\r\n\r\n0\r\n\r\n`,
      `POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\nZZZ\r\nnot hex\r\n0\r\n\r\n`,
      `POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nContent-Length: -1\r\n\r\n`,
      Buffer.concat([
        Buffer.from(`POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nContent-Length: 12\r\nConnection: close\r\n\r\n`),
        Buffer.from([0x7b, 0x22, 0xc3, 0x28, 0xa0, 0xa1, 0xe2, 0x28, 0xa1, 0x22, 0x3a, 0x7d]), // invalid UTF-8 inside JSON
      ]),
      `POST /v1/experiments/${WATER_ID}/responses HTTP/1.1\r\nHost: a\r\n${auth}Content-Type: application/json\r\nContent-Length: 50\r\n\r\n{"condition":`, // never completes: 408
      'GARBAGE\r\n\r\n',
    ];
    for (const bytes of rawCases) {
      const { text, ms } = await new Promise<{ text: string; ms: number }>((resolve, reject) => {
        const t0 = Date.now();
        const s = connect(port, '127.0.0.1');
        let out = '';
        s.on('data', (d) => (out += d.toString('latin1')));
        s.on('error', () => undefined);
        s.on('close', () => resolve({ text: out, ms: Date.now() - t0 }));
        s.on('connect', () => s.write(bytes));
        setTimeout(() => {
          s.destroy();
          reject(new Error(`no answer within 8 s to ${JSON.stringify(bytes.toString().slice(0, 80))}`));
        }, 8000).unref();
      });
      const status = Number(/^HTTP\/1\.1 (\d{3})/.exec(text)?.[1]);
      const where = JSON.stringify(bytes.toString('latin1').slice(0, 100));
      expect(status, where).toBeGreaterThanOrEqual(400);
      expect(status, where).toBeLessThan(500);
      expect(text.toLowerCase(), where).toContain('content-type: application/problem+json');
      expect(ms, where).toBeLessThan(5000);
    }
    expect((await fetch(`http://127.0.0.1:${port}/healthz`)).status).toBe(200);
  }, 60_000);

  it('afterwards: the process is up, check passes, and the data are unchanged except accepted items', async () => {
    expect((await t.app.inject({ method: 'GET', url: '/healthz' })).statusCode).toBe(200);
    const report = await t.check();
    expect(report.problems, report.problems.join('\n')).toEqual([]);
    expect(report.integrity).toEqual([]);
    const after = await dumpAll();
    expect(Object.keys(after)).toEqual(Object.keys(baseline));

    // Accepted requests (2xx) are allowed on any write route: a hostile generator sometimes produces a valid
    // item (a response, or an erasure/exclusion aimed at a response that an accepted item created). What must
    // hold is below: every row that existed before is unchanged, new responses come only from accepted requests,
    // append-only tables only grew, and the counts agree with the values (check).
    const acceptedRoutes = new Set(accepted.map((a) => a.route));
    const acceptedOutsideIngest = accepted.filter((a) => !/responses(\/batch|\/import)?$/.test(a.route)).length;
    const acceptedIds = new Set<string>();
    for (const a of accepted) {
      if (!a.route.includes('/responses')) continue;
      const body = JSON.parse(a.body) as { responseId?: string; responseIds?: string[] };
      if (body.responseId) acceptedIds.add(body.responseId);
      for (const id of body.responseIds ?? []) acceptedIds.add(id);
    }

    for (const name of Object.keys(baseline)) {
      const before = baseline[name];
      const now = after[name];
      if (name === 'rejected_value_counts') {
        // Counters of refused values may only grow; no row disappears.
        const key = (r: Record<string, unknown>) => `${r.experiment_id}|${r.measure_id}|${r.reason}`;
        const nowByKey = new Map(now.map((r) => [key(r), r.count as number]));
        expect(before.length).toBeGreaterThan(0);
        for (const r of before) expect(nowByKey.get(key(r)) ?? -1, key(r)).toBeGreaterThanOrEqual(r.count as number);
        continue;
      }
      if (name === 'responses') {
        const beforeIds = new Set(before.map((r) => r.response_id));
        expect(now.filter((r) => beforeIds.has(r.response_id)).map(strip)).toEqual(before.map(strip));
        const added = now.filter((r) => !beforeIds.has(r.response_id)).map((r) => r.response_id as string);
        for (const id of added) expect(acceptedIds.has(id), `stored ${id} without an accepted request`).toBe(true);
        continue;
      }
      if (name === 'response_values') {
        const beforeKeys = new Set(before.map((r) => `${r.response_id}|${r.measure_id}`));
        expect(now.filter((r) => beforeKeys.has(`${r.response_id}|${r.measure_id}`))).toEqual(before);
        continue;
      }
      if (INGEST_WRITE_TABLES.has(name)) continue; // value_counts and condition counters: verified by check above
      if (name === 'audit_log') {
        // Append-only: the old entries stay as they were; at most one entry per accepted non-ingest request follows.
        expect(now.slice(0, before.length)).toEqual(before);
        expect(now.length - before.length).toBeLessThanOrEqual(acceptedOutsideIngest);
        continue;
      }
      expect(now.map(strip), `table ${name} changed`).toEqual(before.map(strip));
    }
    const version = await dataVersion();
    // Each accepted ingest that created something moved it by one; accepted exclusions/erasures by at most one each.
    expect(version).toBeGreaterThanOrEqual(baselineVersion + createdRequests);
    expect(version).toBeLessThanOrEqual(baselineVersion + createdRequests + acceptedOutsideIngest);
    // eslint-disable-next-line no-console
    console.info(`hostile input: statuses ${JSON.stringify(Object.fromEntries([...statusCounts].sort((a, b) => a[0] - b[0])))}; ${accepted.length} accepted (${[...acceptedRoutes].join(', ')}); ${acceptedIds.size} responses stored`);
  });
});
