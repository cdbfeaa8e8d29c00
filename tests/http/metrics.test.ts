/**
 * GET /metrics: who may read it (admin key for every experiment, or SPLITBALLOT_METRICS_TOKEN), the Prometheus
 * text format, route patterns instead of raw URLs, stored/refused answers per reason, comparisons and cache hits
 * through ServiceMetrics.recordComparison() (the comparison service's callback), backups, and the database size.
 */
import SwaggerParser from '@apidevtools/swagger-parser';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { startTestApp, TEST_ENGINE, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp;
const token = generateSecret();

beforeAll(async () => {
  t = await startTestApp({ config: { metricsTokenHash: hashSecret(token), rateLimitIngestPerMinute: 1000 } });
  expect((await t.createWater()).statusCode).toBe(201);
});
afterAll(async () => t.close());

async function scrape(): Promise<string> {
  const res = await t.request({ method: 'GET', url: '/metrics', key: null, headers: { authorization: `Bearer ${token}` } });
  expect(res.statusCode).toBe(200);
  return res.body;
}

/** The value of one sample line, e.g. sample(text, 'splitballot_responses_stored_total{outcome="created"}'). */
function sample(text: string, series: string): number {
  const line = text.split('\n').find((l) => l.startsWith(`${series} `));
  if (line === undefined) throw new Error(`no sample ${series} in:\n${text}`);
  return Number(line.slice(series.length + 1));
}

describe('access', () => {
  it('admin key or metrics token → 200; no/bad/unknown/revoked → 401; read, ingest or limited admin → 403', async () => {
    const read = await t.key('read');
    const ingest = await t.key('ingest');
    const limitedAdmin = await t.key('admin', WATER_ID);
    const revoked = await t.key('admin', null, 'old');
    const old = (await t.store.apiKeys.list()).find((k) => k.label === 'old')!;
    await t.store.apiKeys.revoke(old.id, new Date().toISOString());
    const cases: [Record<string, string>, number][] = [
      [{}, 401],
      [{ authorization: 'Basic abc' }, 401],
      [{ authorization: `Bearer ${generateSecret()}` }, 401],
      [{ authorization: `Bearer ${revoked}` }, 401],
      [{ authorization: `Bearer ${read}` }, 403],
      [{ authorization: `Bearer ${ingest}` }, 403],
      [{ authorization: `Bearer ${limitedAdmin}` }, 403],
      [{ authorization: `Bearer ${t.adminKey}` }, 200],
      [{ authorization: `Bearer ${token}` }, 200],
    ];
    for (const [headers, status] of cases) {
      const res = await t.request({ method: 'GET', url: '/metrics', key: null, headers });
      expect(res.statusCode, JSON.stringify(headers).slice(0, 40)).toBe(status);
      if (status !== 200) expect(res.headers['content-type']).toContain('application/problem+json');
      else {
        expect(res.headers['content-type']).toBe('text/plain; version=0.0.4; charset=utf-8');
        expect(res.headers['cache-control']).toBe('no-store');
      }
    }
    // The token opens /metrics and nothing else.
    expect((await t.request({ method: 'GET', url: '/v1/experiments', key: token })).statusCode).toBe(401);
  });
});

describe('content', () => {
  it('counts requests per route pattern (never the raw URL), stored and refused answers per reason', async () => {
    const before = await scrape();
    const created0 = sample(before, 'splitballot_responses_stored_total{outcome="created"}');
    const ingestKey = await t.key('ingest');
    const post = (payload: Record<string, unknown>) =>
      t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingestKey, payload });
    expect((await post(waterResponse({ responseId: 'm-1' }))).statusCode).toBe(201);
    expect((await post(waterResponse({ responseId: 'm-1' }))).statusCode).toBe(200);
    expect((await post(waterResponse({ responseId: 'm-1' }, { satisfaction: 3 }))).statusCode).toBe(409);
    expect((await post(waterResponse({}, { satisfaction: 11, trust: 2.5 }))).statusCode).toBe(422);
    expect((await post(waterResponse({}, { satisfaction: 12 }))).statusCode).toBe(422);
    const batch = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses/batch`,
      key: ingestKey,
      payload: { responses: [waterResponse(), waterResponse()] },
    });
    expect(batch.statusCode).toBe(201);
    expect((await t.request({ method: 'GET', url: '/no/such/place/12345', key: null })).statusCode).toBe(404);

    const text = await scrape();
    expect(sample(text, 'splitballot_responses_stored_total{outcome="created"}')).toBe(created0 + 3);
    expect(sample(text, 'splitballot_responses_stored_total{outcome="repeated"}')).toBeGreaterThanOrEqual(1);
    expect(sample(text, 'splitballot_rejected_values_total{reason="out_of_range"}')).toBe(2);
    expect(sample(text, 'splitballot_rejected_values_total{reason="not_integer"}')).toBe(1);
    expect(sample(text, 'splitballot_ingest_refused_total{reason="validation-failed"}')).toBe(2);
    expect(sample(text, 'splitballot_ingest_refused_total{reason="response-conflict"}')).toBe(1);
    expect(sample(text, 'splitballot_http_requests_total{method="POST",route="/v1/experiments/:id/responses",status="201"}')).toBe(1);
    expect(sample(text, 'splitballot_http_requests_total{method="POST",route="/v1/experiments/:id/responses",status="422"}')).toBe(2);
    expect(sample(text, 'splitballot_http_requests_total{method="GET",route="unmatched",status="404"}')).toBe(1);
    expect(sample(text, 'splitballot_http_request_duration_seconds_count{method="POST",route="/v1/experiments/:id/responses/batch"}')).toBe(1);
    expect(text).toContain('splitballot_http_request_duration_seconds_bucket{le="0.005",method="POST",route="/v1/experiments/:id/responses"}');
    // Label values are route patterns: no experiment id, raw path or responseId appears in any series.
    const seriesLines = text.split('\n').filter((l) => !l.startsWith('#'));
    for (const l of seriesLines) {
      expect(l).not.toContain(WATER_ID);
      expect(l).not.toContain('/no/such/place');
      expect(l).not.toContain('m-1');
    }
  });

  it('recordComparison() counts cache hits and computed comparisons with their duration', async () => {
    const before = await scrape();
    const hits = sample(before, 'splitballot_comparisons_total{cache="hit"}');
    const misses = sample(before, 'splitballot_comparisons_total{cache="miss"}');
    t.app.metrics.recordComparison({ cacheHit: false, durationSeconds: 0.004 });
    t.app.metrics.recordComparison({ cacheHit: true });
    t.app.metrics.recordComparison({ cacheHit: true });
    const after = await scrape();
    expect(sample(after, 'splitballot_comparisons_total{cache="hit"}')).toBe(hits + 2);
    expect(sample(after, 'splitballot_comparisons_total{cache="miss"}')).toBe(misses + 1);
    expect(sample(after, 'splitballot_comparison_duration_seconds_bucket{le="0.005"}')).toBeGreaterThanOrEqual(1);
  });

  it('the comparison route counts a computed comparison, then a cache hit for the same request', async () => {
    const posted = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse() });
    expect(posted.statusCode).toBe(201);
    const before = await scrape();
    const hits = sample(before, 'splitballot_comparisons_total{cache="hit"}');
    const misses = sample(before, 'splitballot_comparisons_total{cache="miss"}');
    const url = `/v1/experiments/${WATER_ID}/comparisons/satisfaction`;
    expect((await t.request({ method: 'GET', url })).statusCode).toBe(200);
    expect((await t.request({ method: 'GET', url })).statusCode).toBe(200);
    const after = await scrape();
    expect(sample(after, 'splitballot_comparisons_total{cache="miss"}')).toBe(misses + 1);
    expect(sample(after, 'splitballot_comparisons_total{cache="hit"}')).toBe(hits + 1);
  });

  // The database file, its WAL and online backups are the SQLite store's; on PostgreSQL the backup route answers 503
  // (the PostgreSQL half of the access matrix, tests/reliability/access-matrix.test.ts, checks that answer).
  it.skipIf(TEST_ENGINE === 'postgres')('reports the database and WAL size, and backups', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/admin/backup', payload: {} });
    expect(res.statusCode).toBe(201);
    const text = await scrape();
    expect(sample(text, 'splitballot_database_bytes{file="main"}')).toBeGreaterThanOrEqual(4096);
    expect(sample(text, 'splitballot_database_bytes{file="wal"}')).toBeGreaterThanOrEqual(0);
    expect(sample(text, 'splitballot_backups_total{outcome="ok"}')).toBe(1);
  });

  it('every line is valid Prometheus text exposition (HELP/TYPE comments, name{labels} value)', async () => {
    const text = await scrape();
    const lines = text.split('\n').filter((l) => l !== '');
    expect(lines.length).toBeGreaterThan(20);
    for (const l of lines) {
      expect(l, l).toMatch(/^(# (HELP|TYPE) [a-zA-Z_:][a-zA-Z0-9_:]* .+|[a-zA-Z_:][a-zA-Z0-9_:]*(\{([a-zA-Z_][a-zA-Z0-9_]*="(?:[^"\\]|\\.)*",?)*\})? -?[0-9.e+-]+|[a-zA-Z_:][a-zA-Z0-9_:]*(\{.*\})? (\+Inf|NaN))$/);
    }
  });

  it('the OpenAPI document stays valid with /metrics and /v1/admin/backup in it', async () => {
    const doc = t.app.swagger() as { paths: Record<string, unknown> };
    expect(Object.keys(doc.paths)).toEqual(expect.arrayContaining(['/metrics', '/v1/admin/backup']));
    await SwaggerParser.validate(structuredClone(doc) as never);
  });
});
