/**
 * GET /v1/experiments/{id}/events: the initial event, an event after new data (also data written by another
 * connection, as the import CLI does), at most one event per poll however many changes, heartbeats, one shared
 * poll per experiment, access, and shutdown not held up by open streams. Runs over a real socket on 127.0.0.1.
 */
import { request as httpRequest, type IncomingMessage } from 'node:http';
import Fastify from 'fastify';
import { serializerCompiler } from 'fastify-type-provider-zod';
import { beforeEach, describe, expect, it } from 'vitest';
import { registerProblemHandlers } from '../../../server/http/problem-handler.js';
import { DataVersionWatcher, eventRoutes } from '../../../server/http/routes/events.js';
import { zodValidatorCompiler } from '../../../server/http/validator.js';
import { eachTestApp, openStore, TEST_ENGINE, waterResponse, WATER_ID, type TestApp } from '../../helpers/app.js';

let t: TestApp;
let base: string;
eachTestApp((app) => (t = app));
beforeEach(async () => {
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  const addr = t.app.server.address();
  base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
});

/** Open an event stream and collect its text. */
function open(url: string, key: string | null): Promise<{ res: IncomingMessage; text: () => string; waitFor: (re: RegExp, ms?: number) => Promise<string>; close: () => void }> {
  return new Promise((resolve, reject) => {
    const req = httpRequest(url, { headers: key ? { authorization: `Bearer ${key}`, accept: 'text/event-stream' } : {} }, (res) => {
      let text = '';
      const waiters: { re: RegExp; done: (s: string) => void }[] = [];
      res.setEncoding('utf8');
      res.on('data', (chunk: string) => {
        text += chunk;
        for (const w of [...waiters]) if (w.re.test(text)) {
          waiters.splice(waiters.indexOf(w), 1);
          w.done(text);
        }
      });
      res.on('error', () => undefined);
      resolve({
        res,
        text: () => text,
        waitFor: (re, ms = 5000) =>
          new Promise((done, fail) => {
            if (re.test(text)) return done(text);
            const timer = setTimeout(() => fail(new Error(`no ${re} within ${ms} ms; got ${JSON.stringify(text)}`)), ms);
            waiters.push({ re, done: (s) => (clearTimeout(timer), done(s)) });
          }),
        close: () => req.destroy(),
      });
    });
    req.on('error', reject);
    req.end();
  });
}

const post = (values: Record<string, unknown> = {}, id?: string) =>
  t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse(id ? { responseId: id } : {}, values) });

describe('event stream', () => {
  it('sends the current version at once, then the new version after data change', async () => {
    expect((await post()).statusCode).toBe(201);
    const s = await open(`${base}/v1/experiments/${WATER_ID}/events`, await t.key('read', WATER_ID));
    expect(s.res.statusCode).toBe(200);
    expect(s.res.headers['content-type']).toBe('text/event-stream; charset=utf-8');
    expect(s.res.headers['cache-control']).toBe('no-store');
    expect(s.res.headers['x-content-type-options']).toBe('nosniff');
    await s.waitFor(/data: \{"dataVersion":1\}\n\n/);
    expect(s.text()).toBe('retry: 5000\n\ndata: {"dataVersion":1}\n\n');
    // Three changes in quick succession: at most one event per poll (1 s), ending on the latest version.
    for (let i = 0; i < 3; i++) expect((await post({ trust: 1 + i })).statusCode).toBe(201);
    await s.waitFor(/"dataVersion":4\}/, 4000);
    const events = s.text().match(/^data: .*$/gm) ?? [];
    expect(events.length).toBeLessThanOrEqual(3);
    expect(events.at(-1)).toBe('data: {"dataVersion":4}');
    s.close();
  });

  it('sees data written by another connection (as `splitballot import` in another process does)', async () => {
    const s = await open(`${base}/v1/experiments/${WATER_ID}/events`, t.adminKey);
    await s.waitFor(/"dataVersion":0\}/);
    if (TEST_ENGINE === 'postgres') {
      // Another pooled connection of the same database (no notification sent: the poll must see it).
      await t.sql(`UPDATE experiments SET data_version = data_version + 1 WHERE slug = ?`, WATER_ID);
    } else {
      const other = openStore(t.dbPath);
      try {
        other.db.prepare(`UPDATE experiments SET data_version = data_version + 1 WHERE slug = ?`).run(WATER_ID);
      } finally {
        await other.close();
      }
    }
    await s.waitFor(/"dataVersion":1\}/, 4000);
    s.close();
  });

  it('checks the key like every read route', async () => {
    const none = await open(`${base}/v1/experiments/${WATER_ID}/events`, null);
    expect(none.res.statusCode).toBe(401);
    expect(none.res.headers['content-type']).toContain('application/problem+json');
    const ingest = await open(`${base}/v1/experiments/${WATER_ID}/events`, await t.key('ingest'));
    expect(ingest.res.statusCode).toBe(403);
    expect((await t.createWater({ id: 'water-copy' })).statusCode).toBe(201);
    const other = await open(`${base}/v1/experiments/${WATER_ID}/events`, await t.key('read', 'water-copy'));
    expect(other.res.statusCode).toBe(403);
    const missing = await open(`${base}/v1/experiments/nope/events`, t.adminKey);
    expect(missing.res.statusCode).toBe(404);
  });

  it('app.close() ends open streams promptly instead of waiting for clients', async () => {
    const s = await open(`${base}/v1/experiments/${WATER_ID}/events`, t.adminKey);
    await s.waitFor(/dataVersion/);
    const ended = new Promise<void>((resolve) => s.res.on('end', () => resolve()));
    const started = Date.now();
    await t.app.close();
    await ended;
    expect(Date.now() - started).toBeLessThan(3000);
  });
});

describe('heartbeats and the shared poll (short timings)', () => {
  it('sends a comment heartbeat and stops polling when the last listener leaves', async () => {
    const store = t.store; // the test app's store (SQLite file or PostgreSQL database); closed with the app
    const app = Fastify({ logger: false });
    app.setValidatorCompiler(zodValidatorCompiler);
    app.setSerializerCompiler(serializerCompiler);
    registerProblemHandlers(app);
    await app.register(eventRoutes, { store, timings: { pollMs: 50, heartbeatMs: 120 } });
    await app.listen({ port: 0, host: '127.0.0.1' });
    try {
      const addr = app.server.address();
      const url = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}/v1/experiments/${WATER_ID}/events`;
      const s = await open(url, null);
      await s.waitFor(/: keep-alive\n\n/, 2000);
      s.close();
    } finally {
      await app.close();
    }
  });

  it('one timer per experiment, however many listeners', async () => {
    const e = (await t.store.experiments.getBySlug(WATER_ID))!;
    const seen: (number | null)[] = [];
    const watcher = new DataVersionWatcher(t.store, { pollMs: 20, heartbeatMs: 10_000 }, (err) => {
      throw err;
    });
    const offs = [0, 1, 2].map(() => watcher.subscribe(e.key, 0, { version: (v) => seen.push(v), heartbeat: () => undefined }));
    expect(watcher.watchedExperiments).toBe(1);
    expect((await post()).statusCode).toBe(201);
    await new Promise((r) => setTimeout(r, 150));
    expect(seen).toEqual([1, 1, 1]);
    for (const off of offs) off();
    expect(watcher.watchedExperiments).toBe(0);
  });
});

describe('revoked keys and limits per key and per experiment', () => {
  it("a revoked key's open stream is closed at once (within one poll), another key's stays open", async () => {
    const doomed = await t.key('read', WATER_ID, 'to revoke');
    const other = await t.key('read', WATER_ID, 'stays');
    const a = await open(`${base}/v1/experiments/${WATER_ID}/events`, doomed);
    const b = await open(`${base}/v1/experiments/${WATER_ID}/events`, other);
    await a.waitFor(/data: /);
    await b.waitFor(/data: /);
    const ended = new Promise<number>((resolve) => a.res.once('end', () => resolve(Date.now())));
    const id = (await t.store.apiKeys.list()).find((k) => k.label === 'to revoke')!.id;
    const revokedAt = Date.now();
    await t.store.apiKeys.revoke(id, new Date().toISOString());
    const endedAt = await ended;
    // The key table is read once per poll interval (1 s): closed within 2 s, allowing for a loaded machine.
    expect(endedAt - revokedAt).toBeLessThan(2000);
    expect(b.res.readableEnded).toBe(false);
    b.close();
    expect(t.logs.text()).toContain('event stream closed: its key was revoked');
  });

  it('refuses a stream beyond the limit per key (429) and per experiment (503), logged at warn without a stack', async () => {
    // The test app's own store (either engine); closed by the test app, not here.
    const store = t.store;
    const lines: string[] = [];
    const app = Fastify({ logger: { level: 'info', stream: { write: (l: string) => void lines.push(l) } } });
    app.setValidatorCompiler(zodValidatorCompiler);
    app.setSerializerCompiler(serializerCompiler);
    registerProblemHandlers(app);
    // A stand-in for the auth hook: the key id comes from a header.
    app.decorateRequest('principal', null);
    app.addHook('onRequest', async (request) => {
      const id = Number(request.headers['x-test-key']);
      request.principal = { keyId: id, scope: 'read', experiment: null, experimentKey: null, via: 'header' };
    });
    await app.register(eventRoutes, { store, timings: { pollMs: 50, heartbeatMs: 10_000 }, limits: { perKey: 2, perExperiment: 3, total: 100 } });
    await app.listen({ port: 0, host: '127.0.0.1' });
    const addr = app.server.address();
    const url = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}/v1/experiments/${WATER_ID}/events`;
    const streams: { close: () => void }[] = [];
    const get = (keyId: number) =>
      new Promise<{ status: number; body: string; retryAfter?: string; close: () => void }>((resolve, reject) => {
        const req = httpRequest(url, { headers: { 'x-test-key': String(keyId) } }, (res) => {
          if (res.statusCode === 200) {
            resolve({ status: 200, body: '', close: () => req.destroy() });
            return;
          }
          let body = '';
          res.setEncoding('utf8');
          res.on('data', (c: string) => (body += c));
          res.on('end', () => resolve({ status: res.statusCode ?? 0, body, retryAfter: res.headers['retry-after'] as string | undefined, close: () => undefined }));
        });
        req.on('error', reject);
        req.end();
      });
    try {
      for (const keyId of [1, 1]) {
        const s = await get(keyId);
        expect(s.status).toBe(200);
        streams.push(s);
      }
      const third = await get(1);
      expect(third.status).toBe(429);
      expect(third.retryAfter).toBe('30');
      expect(JSON.parse(third.body)).toMatchObject({ type: 'urn:splitballot:problem:rate-limited', detail: 'This key already holds 2 open event streams (the limit per key); close one or try again later.' });
      streams.push(await get(2)); // the experiment's 3rd
      const fourth = await get(3);
      expect(fourth.status).toBe(503);
      expect(JSON.parse(fourth.body).detail).toBe(`Experiment ${WATER_ID} already has 3 open event streams (the limit per experiment); try again later.`);
      // Closing one stream frees its slots.
      streams.shift()!.close();
      await new Promise((r) => setTimeout(r, 100));
      const again = await get(3);
      expect(again.status).toBe(200);
      streams.push(again);
      const refusals = lines.map((l) => JSON.parse(l) as Record<string, unknown>).filter((l) => String(l.msg).startsWith('event stream refused'));
      expect(refusals.map((l) => [l.level, l.status])).toEqual([
        [40, 429],
        [40, 503],
      ]);
      expect(refusals.some((l) => 'err' in l || 'stack' in l)).toBe(false);
    } finally {
      for (const s of streams) s.close();
      await app.close();
    }
  });
});
