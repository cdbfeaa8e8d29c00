/**
 * Security and limits: headers on every answer, the ingest rate limit (per key and address, 429 problem+json
 * with Retry-After, a batch counts once), request timeout and protocol errors as problem+json, body and depth
 * limits, the 503 while shutting down, and the log redaction list (no secret, key hash or SQL in logs or errors).
 */
import { connect } from 'node:net';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.js';
import { REDACTED_LOG_PATHS } from '../../server/http/logging.js';
import { API_CSP } from '../../server/http/security-headers.js';
import { ConfigError, loadConfig, sha256 } from '../../server/config.js';
import { HTML_CSP } from '../../server/views/html.js';
import { LogCapture, startTestApp, tempDir, TEST_ENGINE, testConfig, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

const PROBLEM = 'application/problem+json';

describe('security headers', () => {
  let t: TestApp;
  beforeAll(async () => {
    t = await startTestApp();
    expect((await t.createWater()).statusCode).toBe(201);
  });
  afterAll(async () => t.close());

  it('every kind of answer carries nosniff, no-referrer, CORP same-origin and a CSP; none has X-Powered-By', async () => {
    const ingest = await t.key('ingest');
    const answers = [
      await t.request({ method: 'GET', url: '/healthz', key: null }),
      await t.request({ method: 'GET', url: '/v1/experiments' }),
      await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}`, key: null }),
      await t.request({ method: 'GET', url: '/nowhere', key: null }),
      await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, payload: waterResponse({}, { satisfaction: 99 }) }),
      await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, payload: waterResponse() }),
      await t.request({ method: 'GET', url: '/thank-you', key: null }),
      await t.request({ method: 'GET', url: '/metrics' }),
    ];
    for (const res of answers) {
      const where = `${res.statusCode} ${res.headers['content-type']}`;
      expect(res.headers['x-content-type-options'], where).toBe('nosniff');
      expect(res.headers['referrer-policy'], where).toBe('no-referrer');
      expect(res.headers['cross-origin-resource-policy'], where).toBe('same-origin');
      expect(res.headers['content-security-policy'], where).toBeDefined();
      expect(res.headers['x-powered-by'], where).toBeUndefined();
      expect(res.headers.server, where).toBeUndefined();
    }
    // JSON and problems: nothing may run if a browser renders one.
    expect(answers[1].headers['content-security-policy']).toBe(API_CSP);
    expect(answers[3].headers['content-type']).toContain(PROBLEM);
    expect(answers[3].headers['content-security-policy']).toBe(API_CSP);
    // The thank-you page keeps its own CSP (it allows its one inline style by hash).
    expect(answers[6].headers['content-type']).toContain('text/html');
    expect(answers[6].headers['content-security-policy']).toBe(HTML_CSP);
    // Answers to a key are private to it.
    expect(answers[1].headers['cache-control']).toBe('private, no-cache');
    expect(answers[0].headers['cache-control']).toBeUndefined();
  });

  it('an HTML answer without its own CSP gets the default restrictive one and X-Frame-Options', async () => {
    const app = buildApp(testConfig(`${tempDir()}/html.db`, { logLevel: 'silent' }));
    app.get('/test-html', { config: { access: { public: true } } }, async (_req, reply) => reply.type('text/html; charset=utf-8').send('<p>hi</p>'));
    await app.ready();
    const res = await app.inject({ method: 'GET', url: '/test-html' });
    expect(res.headers['content-security-policy']).toBe("default-src 'none'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'");
    expect(res.headers['x-frame-options']).toBe('DENY');
    await app.close();
  });

  it('body size and JSON depth limits answer 413 and 400 as problem+json', async () => {
    const big = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses`,
      headers: { 'content-type': 'application/json' },
      payload: JSON.stringify({ condition: 'bill-first', respondent: 'x'.repeat(1024 * 1024), values: {} }),
    });
    expect(big.statusCode).toBe(413);
    expect(big.headers['content-type']).toContain(PROBLEM);
    const deep = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses`,
      headers: { 'content-type': 'application/json' },
      payload: `${'['.repeat(33)}${']'.repeat(33)}`,
    });
    expect(deep.statusCode).toBe(400);
    expect(deep.json()).toMatchObject({ type: 'urn:splitballot:problem:malformed-request', detail: 'The JSON body is nested more than 32 levels deep.' });
  });
});

describe('ingest rate limit', () => {
  let t: TestApp;
  beforeAll(async () => {
    t = await startTestApp({ config: { rateLimitIngestPerMinute: 5 } });
    expect((await t.createWater()).statusCode).toBe(201);
  });
  afterAll(async () => t.close());

  const post = (key: string, remoteAddress = '127.0.0.1', payload: unknown = waterResponse()) =>
    t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key, payload: payload as Record<string, unknown>, remoteAddress });

  it('per key and address: the 6th answer in a minute gets 429 problem+json with Retry-After; others are unaffected', async () => {
    const a = await t.key('ingest', null, 'form a');
    const b = await t.key('ingest', null, 'form b');
    for (let i = 0; i < 5; i++) {
      const res = await post(a);
      expect(res.statusCode).toBe(201);
      expect(res.headers['x-ratelimit-limit']).toBe('5');
      expect(res.headers['x-ratelimit-remaining']).toBe(String(4 - i));
    }
    const limited = await post(a);
    expect(limited.statusCode).toBe(429);
    expect(limited.headers['content-type']).toContain(PROBLEM);
    const retryAfter = Number(limited.headers['retry-after']);
    expect(retryAfter).toBeGreaterThanOrEqual(1);
    expect(retryAfter).toBeLessThanOrEqual(60);
    expect(limited.json()).toEqual({
      type: 'urn:splitballot:problem:rate-limited',
      title: 'Too many requests',
      status: 429,
      detail: `More than 5 answers per minute from this key and address; retry after ${retryAfter} s. The limit counts answers, not requests: a batch or CSV import is charged one per answer.`,
    });
    // Another key from the same address, and the same key from another address, have their own budgets.
    expect((await post(b)).statusCode).toBe(201);
    expect((await post(a, '10.1.2.3')).statusCode).toBe(201);
    // Reading is not limited.
    for (let i = 0; i < 8; i++) expect((await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).statusCode).toBe(200);
    // Nothing was stored by the refused request.
    const e = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json();
    expect(e.counts.responses).toBe(7);
    const metrics = (await t.request({ method: 'GET', url: '/metrics' })).body;
    expect(metrics).toContain('splitballot_rate_limited_total{route="/v1/experiments/:id/responses"} 1');
    expect(metrics).toContain('splitballot_ingest_refused_total{reason="rate-limited"} 1');
  });

  it('a batch counts its answers: one batch of 100 is admitted on a full budget, then the key waits until the 100 are paid back', async () => {
    const c = await t.key('ingest', null, 'batch');
    const batch = () => ({ responses: Array.from({ length: 100 }, () => waterResponse()) });
    const first = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, key: c, payload: batch(), remoteAddress: '10.9.9.9' });
    expect(first.statusCode).toBe(201);
    expect(first.headers['x-ratelimit-remaining']).toBe('0');
    const second = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, key: c, payload: batch(), remoteAddress: '10.9.9.9' });
    expect(second.statusCode).toBe(429);
    // Refused before its body is read (the key has no answer left): Retry-After is when ONE answer fits again —
    // 5 answers a minute, 95 overdrawn → (95 + 1) / 5 per minute = 1152 s (± 1 s of test time).
    expect(Math.abs(Number(second.headers['retry-after']) - 1152)).toBeLessThanOrEqual(1);
    const single = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: c, payload: waterResponse(), remoteAddress: '10.9.9.9' });
    expect(single.statusCode).toBe(429);
  });

  it('a CSV import counts its rows', async () => {
    const c = await t.key('ingest', null, 'csv');
    const rows = Array.from({ length: 7 }, (_, i) => `csv-rate-${i},bill-first,5,4,20`).join('\n');
    const csv = (n: number) => `responseId,condition,satisfaction,trust,fair_price\n${rows.replaceAll('csv-rate', `csv-rate-${n}`)}\n`;
    const send = (n: number) =>
      t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/import`, key: c, headers: { 'content-type': 'text/csv' }, payload: csv(n), remoteAddress: '10.9.9.8' });
    expect((await send(1)).statusCode).toBe(201);
    const refused = await send(2);
    expect(refused.statusCode).toBe(429);
    // 7 rows charged on a budget of 5: 2 overdrawn; refused before the body is read, Retry-After is when one answer
    // fits again: (2 + 1) / 5 per minute = 36 s.
    expect(Math.abs(Number(refused.headers['retry-after']) - 36)).toBeLessThanOrEqual(1);
  });

  it('an HTML form without a header key is limited per address, and a browser gets a readable page', async () => {
    const key = await t.key('ingest', WATER_ID, 'web form');
    const form = (n: number) => `condition=bill-first&satisfaction=${n}&trust=3&fair_price=10&ingestKey=${key}`;
    const send = (n: number) =>
      t.request({
        method: 'POST',
        url: `/v1/experiments/${WATER_ID}/responses`,
        key: null,
        headers: { 'content-type': 'application/x-www-form-urlencoded', accept: 'text/html' },
        payload: form(n),
        remoteAddress: '192.0.2.7',
      });
    for (let i = 0; i < 5; i++) expect((await send(i)).statusCode).toBe(303);
    const page = await send(5);
    expect(page.statusCode).toBe(429);
    expect(page.headers['content-type']).toContain('text/html');
    expect(page.headers['retry-after']).toBeDefined();
    expect(page.body).toContain('More than 5 answers per minute from this key and address');
    expect(page.body).toContain('(status 429)');
  });

  it('0 turns the limit off', async () => {
    const off = await startTestApp({ config: { rateLimitIngestPerMinute: 0 } });
    expect((await off.createWater()).statusCode).toBe(201);
    for (let i = 0; i < 12; i++) {
      const res = await off.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse() });
      expect(res.statusCode).toBe(201);
      expect(res.headers['x-ratelimit-limit']).toBeUndefined();
    }
    await off.close();
  });
});

describe('protocol errors, timeouts and shutdown', () => {
  let app: FastifyInstance;
  let port: number;
  beforeAll(async () => {
    app = buildApp(testConfig(`${tempDir()}/raw.db`, { logLevel: 'silent', requestTimeoutMs: 1000 }));
    await app.listen({ port: 0, host: '127.0.0.1' });
    const a = app.server.address();
    port = typeof a === 'object' && a ? a.port : 0;
  });
  afterAll(async () => app.close());

  function raw(bytes: Buffer | string, endAfterWrite = false): Promise<{ text: string; ms: number }> {
    return new Promise((resolve, reject) => {
      const t0 = Date.now();
      const s = connect(port, '127.0.0.1');
      let text = '';
      s.on('data', (d) => (text += d.toString('latin1')));
      s.on('error', () => undefined);
      s.on('close', () => resolve({ text, ms: Date.now() - t0 }));
      s.on('connect', () => {
        s.write(bytes);
        if (endAfterWrite) s.end();
      });
      setTimeout(() => reject(new Error(`no answer within 10 s; got ${text}`)), 10_000).unref();
    });
  }

  function parseRaw(text: string): { status: number; headers: Record<string, string>; body: string } {
    const [head, ...rest] = text.split('\r\n\r\n');
    const lines = head.split('\r\n');
    const headers: Record<string, string> = {};
    for (const l of lines.slice(1)) {
      const i = l.indexOf(':');
      headers[l.slice(0, i).toLowerCase()] = l.slice(i + 1).trim();
    }
    return { status: Number(lines[0].split(' ')[1]), headers, body: rest.join('\r\n\r\n') };
  }

  it('a request whose body never completes gets 408 problem+json after the request timeout', async () => {
    const { text, ms } = await raw(
      // A form post without a header key: authentication waits for the body, which never completes.
      'POST /v1/experiments/x/responses HTTP/1.1\r\nHost: a\r\nContent-Type: application/x-www-form-urlencoded\r\nContent-Length: 100\r\n\r\ncond',
    );
    const r = parseRaw(text);
    expect(r.status).toBe(408);
    expect(r.headers['content-type']).toBe(PROBLEM);
    expect(r.headers['x-content-type-options']).toBe('nosniff');
    expect(JSON.parse(r.body)).toMatchObject({ type: 'urn:splitballot:problem:request-timeout', status: 408 });
    expect(ms).toBeGreaterThanOrEqual(900);
    expect(ms).toBeLessThan(5000);
  });

  it('bytes that are not HTTP get 400 problem+json; oversized headers get 431', async () => {
    const junk = parseRaw((await raw(Buffer.from([0x00, 0xff, 0xfe, 0x0d, 0x0a, 0x0d, 0x0a]))).text);
    expect(junk.status).toBe(400);
    expect(JSON.parse(junk.body)).toMatchObject({ type: 'urn:splitballot:problem:malformed-request', status: 400 });
    const huge = parseRaw((await raw(`GET /healthz HTTP/1.1\r\nHost: a\r\nX-Big: ${'a'.repeat(20_000)}\r\n\r\n`)).text);
    expect(huge.status).toBe(431);
    expect(huge.headers['content-type']).toBe(PROBLEM);
    // The server still answers.
    expect((await fetch(`http://127.0.0.1:${port}/healthz`)).status).toBe(200);
  });

  it('requests that arrive on an open connection while the app is closing get 503 problem+json', async () => {
    const closing = buildApp(testConfig(`${tempDir()}/closing.db`, { logLevel: 'silent' }));
    let text = '';
    closing.addHook('preClose', async () => {
      // preClose hooks run in order: the app's own one has already marked it closing; the server still listens.
      const a = closing.server.address();
      const s = connect(typeof a === 'object' && a ? a.port : 0, '127.0.0.1');
      await new Promise<void>((resolve) => s.on('connect', () => resolve()));
      s.on('data', (d) => (text += d.toString('latin1')));
      const done = new Promise<void>((resolve) => s.on('close', () => resolve()));
      s.write('GET /healthz HTTP/1.1\r\nHost: a\r\nConnection: keep-alive\r\n\r\n');
      await done;
    });
    await closing.listen({ port: 0, host: '127.0.0.1' });
    await closing.close();
    const r = parseRaw(text);
    expect(r.status).toBe(503);
    expect(r.headers['content-type']).toContain(PROBLEM);
    expect(r.headers['retry-after']).toBe('5');
    expect(r.headers.connection).toBe('close');
    expect(JSON.parse(r.body)).toMatchObject({ type: 'urn:splitballot:problem:unavailable', status: 503 });
  });
});

describe('no secret, key hash or SQL in logs or errors', () => {
  it('the redaction list censors credentials, hashes, tokens and SQL fields wherever they are logged', async () => {
    const logs = new LogCapture();
    const app = buildApp(testConfig(`${tempDir()}/redact.db`, { logLevel: 'trace' }), { logStream: logs });
    await app.ready();
    const secret = 'sb_super_secret_value_that_must_not_appear_1234567890';
    app.log.info(
      {
        req: { headers: { authorization: `Bearer ${secret}`, cookie: secret, 'x-api-key': secret, 'proxy-authorization': secret } },
        ingestKey: secret,
        body: { ingestKey: secret },
        form: { ingestKey: secret },
        key: { secret, hash: secret, adminKeyHash: secret, metricsTokenHash: secret, contentHash: secret, token: secret },
        secret,
        hash: secret,
        token: secret,
        err: { message: 'boom', sql: `SELECT ${secret}`, source: `INSERT ${secret}` },
      },
      'redaction probe',
    );
    await app.close();
    const line = logs.lines.find((l) => l.includes('redaction probe'));
    expect(line).toBeDefined();
    expect(line).not.toContain(secret);
    expect(line).toContain('[redacted]');
    expect(REDACTED_LOG_PATHS).toEqual(expect.arrayContaining(['err.sql', 'metricsTokenHash', 'contentHash', 'req.headers.authorization']));
  });

  it('a database failure becomes a 500 whose body and log carry no SQL text', async () => {
    const t = await startTestApp({ config: { logLevel: 'trace' } });
    expect((await t.createWater()).statusCode).toBe(201);
    // Break the schema under the running app: the ingest statement now fails inside the database.
    if (TEST_ENGINE === 'postgres') await t.sql('DROP TABLE value_counts');
    else t.store.db.exec('DROP TABLE value_counts');
    const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse() });
    expect(res.statusCode).toBe(500);
    expect(res.headers['content-type']).toContain(PROBLEM);
    const body = res.json();
    expect(body.detail).toMatch(/^An unexpected error occurred; it has been logged with request id \S+\.$/);
    expect(res.body).not.toMatch(/value_counts|INSERT|SELECT|UPDATE|sqlite/i);
    const logText = t.logs.text();
    expect(logText).toContain('request failed');
    expect(logText).not.toMatch(/INSERT INTO|SELECT .* FROM|UPDATE \w+ SET/);
    for (const secret of [t.adminKey, t.adminKey.slice(3)]) expect(logText).not.toContain(secret);
    await t.close();
  });
});

describe('configuration of the limits', () => {
  it('defaults: 600 ingest requests per minute, 60 s request timeout, 10 s shutdown, no metrics token, no trusted proxy', () => {
    expect(loadConfig({})).toMatchObject({
      rateLimitIngestPerMinute: 600,
      requestTimeoutMs: 60_000,
      shutdownGraceMs: 10_000,
      metricsTokenHash: null,
      trustProxy: false,
    });
    expect(loadConfig({}).backupDir).toBeUndefined();
  });

  it('reads the variables; keeps only the hash of the metrics token', () => {
    const token = 'm'.repeat(40);
    const c = loadConfig({
      SPLITBALLOT_RATE_LIMIT_INGEST: '0',
      SPLITBALLOT_REQUEST_TIMEOUT: '5',
      SPLITBALLOT_SHUTDOWN_TIMEOUT: '30',
      SPLITBALLOT_BACKUP_DIR: '/srv/backups',
      SPLITBALLOT_METRICS_TOKEN: token,
      SPLITBALLOT_TRUST_PROXY: '10.0.0.0/8, 127.0.0.1',
    });
    expect(c).toMatchObject({ rateLimitIngestPerMinute: 0, requestTimeoutMs: 5000, shutdownGraceMs: 30_000, backupDir: '/srv/backups', trustProxy: ['10.0.0.0/8', '127.0.0.1'] });
    expect(c.metricsTokenHash).toEqual(sha256(token));
    expect(JSON.stringify(c)).not.toContain(token);
    expect(loadConfig({ SPLITBALLOT_TRUST_PROXY: '1' }).trustProxy).toBe(1);
  });

  it('a bad value stops start-up with one line naming the variable (the token is never echoed)', () => {
    const cases: [Record<string, string>, string][] = [
      [{ SPLITBALLOT_RATE_LIMIT_INGEST: 'lots' }, 'Configuration error: SPLITBALLOT_RATE_LIMIT_INGEST must be a whole number of requests per minute (0 turns the limit off) (got "lots")'],
      [{ SPLITBALLOT_REQUEST_TIMEOUT: '0' }, 'Configuration error: SPLITBALLOT_REQUEST_TIMEOUT must be a whole number of seconds from 1 to 3600 (got "0")'],
      [{ SPLITBALLOT_SHUTDOWN_TIMEOUT: '-1' }, 'Configuration error: SPLITBALLOT_SHUTDOWN_TIMEOUT must be a whole number of seconds from 1 to 3600 (got "-1")'],
      [{ SPLITBALLOT_METRICS_TOKEN: 'short secret' }, 'Configuration error: SPLITBALLOT_METRICS_TOKEN must be at least 32 characters (for example the output of `openssl rand -hex 32`)'],
      [{ SPLITBALLOT_TRUST_PROXY: 'everyone' }, 'Configuration error: SPLITBALLOT_TRUST_PROXY must be a number of proxy hops or a comma-separated list of addresses/CIDR ranges ("everyone" is neither) (got "everyone")'],
    ];
    for (const [env, message] of cases) {
      expect(() => loadConfig(env)).toThrow(ConfigError);
      expect(() => loadConfig(env)).toThrow(message);
    }
  });
});
