/**
 * Secrets never leak: not in any response (body or headers), not in any log line (captured at trace level),
 * not in the database file in clear. Key hashes never appear in responses or logs either.
 */
import { createHash } from 'node:crypto';
import { existsSync, readFileSync } from 'node:fs';
import type { InjectOptions } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { startTestApp, TEST_ENGINE, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp;
const envSecret = generateSecret();
const seen: string[] = [];
let secrets: string[] = [];

beforeAll(async () => {
  t = await startTestApp({ config: { logLevel: 'trace', adminKeyHash: hashSecret(envSecret) } });
  const ingest = await t.key('ingest', null, 'form');
  const read = await t.key('read', null, 'dashboard');
  const revoked = await t.key('admin', null, 'old');
  const all = await t.store.apiKeys.list();
  await t.store.apiKeys.revoke(all.find((k) => k.label === 'old')!.id, new Date().toISOString());
  secrets = [t.adminKey, envSecret, ingest, read, revoked];

  const calls: InjectOptions[] = [
    { method: 'POST', url: '/v1/experiments', headers: t.auth(envSecret), payload: { id: WATER_ID, title: 't', conditions: [{ id: 'bill-first' }, { id: 'service-first' }], measures: [{ id: 'satisfaction', min: 0, max: 10, integer: true }] } },
    { method: 'GET', url: '/v1/experiments', headers: t.auth(read) },
    { method: 'GET', url: `/v1/experiments/${WATER_ID}`, headers: t.auth(ingest) },
    { method: 'GET', url: '/v1/experiments', headers: t.auth(revoked) },
    { method: 'GET', url: '/v1/experiments', headers: { authorization: `Token ${t.adminKey}` } },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: t.auth(ingest), payload: { condition: 'bill-first', values: { satisfaction: 3 } } },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: t.auth(ingest), payload: { condition: 'bill-first', values: { satisfaction: 30 } } },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: { 'content-type': 'application/x-www-form-urlencoded' }, payload: `condition=bill-first&satisfaction=4&ingestKey=${ingest}` },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: { 'content-type': 'application/x-www-form-urlencoded', accept: 'text/html' }, payload: `condition=bill-first&satisfaction=44&ingestKey=${ingest}` },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, headers: { 'content-type': 'application/x-www-form-urlencoded' }, payload: `condition=bill-first&satisfaction=4&ingestKey=${t.adminKey}` },
    { method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, headers: t.auth(t.adminKey), payload: { responses: [waterResponse({}, { trust: undefined, fair_price: undefined })] } },
    { method: 'GET', url: `/nowhere?key=x`, headers: t.auth(t.adminKey) },
  ];
  for (const call of calls) {
    const res = await t.app.inject(call);
    seen.push(JSON.stringify(res.headers), res.body);
  }
  await t.app.close(); // flushes and checkpoints; the file is complete
});

afterAll(async () => {
  await t.close().catch(() => undefined);
});

function forms(secret: string): string[] {
  const hash = createHash('sha256').update(secret).digest();
  return [secret, secret.slice(3), hash.toString('hex'), hash.toString('base64'), hash.toString('base64url')];
}

describe('secrets', () => {
  it('the captured logs are real (requests were logged)', () => {
    expect(t.logs.lines.length).toBeGreaterThan(20);
    expect(t.logs.text()).toContain('incoming request');
  });

  it('no secret or key hash in any response', () => {
    const text = seen.join('\n');
    for (const s of secrets) for (const f of forms(s)) expect(text.includes(f), `response contains ${f.slice(0, 8)}…`).toBe(false);
  });

  it('no secret or key hash in any log line', () => {
    const text = t.logs.text();
    for (const s of secrets) for (const f of forms(s)) expect(text.includes(f), `log contains ${f.slice(0, 8)}…`).toBe(false);
  });

  // The SQLite file's bytes; on PostgreSQL only hashes are stored as well, in the same columns (not read as a file here).
  it.skipIf(TEST_ENGINE === 'postgres')('no secret in the database file in clear (only hashes are stored)', () => {
    const files = [t.dbPath, `${t.dbPath}-wal`].filter((p) => existsSync(p));
    const bytes = Buffer.concat(files.map((p) => readFileSync(p)));
    expect(bytes.length).toBeGreaterThan(0);
    for (const s of secrets) {
      expect(bytes.includes(Buffer.from(s)), 'secret in the database').toBe(false);
      expect(bytes.includes(Buffer.from(s.slice(3))), 'secret body in the database').toBe(false);
      // The raw hash is stored (that is how keys are checked); it is never written as text.
      expect(bytes.includes(Buffer.from(createHash('sha256').update(s).digest('hex'))), 'hex hash as text').toBe(false);
    }
  });
});
