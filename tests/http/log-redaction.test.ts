/**
 * Logs keep no personal data and no secrets: a full run (keys of every scope, answers with respondent ids, an
 * assignment, an exclusion and an erasure addressed by identifier in the URL, secrets in query strings, a 404 on a
 * personal path) is logged at trace level, and the log is searched for every secret and identifier used.
 */
import { createHash } from 'node:crypto';
import type { InjectOptions } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { redactUrl } from '../../server/http/logging.js';
import { startTestApp, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp;
const secrets: string[] = [];
const identifiers = ['respondent-ana-0417', 'respondent-bo-9921', 'visitor-to-assign-77', 'resp-id-secretive-1', 'resp-id-secretive-2'];
const BASE = `/v1/experiments/${WATER_ID}`;

beforeAll(async () => {
  t = await startTestApp({ config: { logLevel: 'trace' } });
  expect((await t.createWater()).statusCode).toBe(201);
  const form = await t.key('form', WATER_ID, 'page');
  const ingest = await t.key('ingest', null, 'server');
  const read = await t.key('read', null, 'dashboard');
  secrets.push(t.adminKey, form, ingest, read);
  const calls: (InjectOptions & { key?: string | null })[] = [
    { method: 'POST', url: `${BASE}/responses`, key: form, payload: waterResponse({ responseId: identifiers[3], respondent: identifiers[0] }) },
    { method: 'POST', url: `${BASE}/responses/batch`, key: ingest, payload: { responses: [waterResponse({ responseId: identifiers[4], respondent: identifiers[1] })] } },
    { method: 'POST', url: `${BASE}/assignments`, key: form, payload: { respondent: identifiers[2] } },
    {
      method: 'POST',
      url: `${BASE}/responses`,
      key: null,
      headers: { 'content-type': 'application/x-www-form-urlencoded' },
      payload: `condition=bill-first&satisfaction=4&trust=3&fair_price=10&respondent=${identifiers[0]}&ingestKey=${form}`,
    },
    { method: 'POST', url: `${BASE}/responses/${identifiers[3]}/exclusion`, payload: { reason: 'speeder' } },
    { method: 'DELETE', url: `${BASE}/responses/${identifiers[3]}/exclusion` },
    { method: 'DELETE', url: `${BASE}/respondents/${encodeURIComponent(identifiers[1])}` },
    { method: 'DELETE', url: `/v1/experiments/no-such-study/respondents/${identifiers[0]}` },
    { method: 'GET', url: `${BASE}/comparisons/satisfaction?key=${read}&token=${ingest}&includeExcluded=false`, key: read },
    { method: 'GET', url: `/nowhere?api_key=${t.adminKey}&respondent=${identifiers[2]}`, key: read },
    { method: 'GET', url: `${BASE}/responses.csv`, key: read },
  ];
  for (const call of calls) {
    const res = await t.request(call);
    expect(res.statusCode, `${call.method} ${call.url}: ${res.body}`).toBeLessThan(500);
  }
  await t.app.close();
});
afterAll(async () => t.close().catch(() => undefined));

describe('log redaction', () => {
  it('the log of the run is real: every request was logged with its (redacted) URL', () => {
    const urls = t.logs.parsed().flatMap((l) => {
      const req = l.req as { url?: string } | undefined;
      return req?.url ? [req.url] : [];
    });
    expect(urls).toContain(`${BASE}/responses/[redacted]/exclusion`);
    expect(urls).toContain(`${BASE}/respondents/[redacted]`);
    expect(urls).toContain(`${BASE}/comparisons/satisfaction?key=[redacted]&token=[redacted]&includeExcluded=false`);
    expect(urls).toContain(`${BASE}/responses.csv`);
  });

  it('holds no secret, key hash or respondent identifier', () => {
    const text = t.logs.text();
    for (const s of secrets) {
      const hash = createHash('sha256').update(s).digest();
      for (const f of [s, s.slice(3), hash.toString('hex'), hash.toString('base64url')]) expect(text.includes(f), `log contains a secret ${f.slice(0, 6)}…`).toBe(false);
    }
    for (const id of identifiers) expect(text.includes(id), `log contains ${id}`).toBe(false);
  });
});

describe('redactUrl', () => {
  it.each([
    ['/v1/experiments/s/respondents/ana%40example.org', '/v1/experiments/s/respondents/[redacted]'],
    ['/v1/experiments/s/responses/r-1/exclusion', '/v1/experiments/s/responses/[redacted]/exclusion'],
    ['/v1/experiments/s/responses/batch', '/v1/experiments/s/responses/batch'],
    ['/v1/experiments/s/responses/import?skipInvalid=true', '/v1/experiments/s/responses/import?skipInvalid=true'],
    ['/v1/experiments/s/responses.csv?bom=true', '/v1/experiments/s/responses.csv?bom=true'],
    ['/x?ingestKey=sb_abc&adjust=holm&Access_Token=1&password', '/x?ingestKey=[redacted]&adjust=holm&Access_Token=[redacted]&password'],
    ['/x?%E0%A4%A=1', '/x?%E0%A4%A=[redacted]'],
  ])('%s → %s', (url, expected) => {
    expect(redactUrl(url)).toBe(expected);
  });
});
