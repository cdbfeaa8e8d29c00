/**
 * Graceful shutdown of the real built server: SIGTERM while requests are in flight.
 *
 *  - A request whose body is still arriving when SIGTERM comes is finished and acknowledged (201);
 *  - meanwhile new connections are refused (the listener is closed);
 *  - an idle keep-alive connection is closed by the server;
 *  - the process exits 0, the WAL is checkpointed (the -wal file is gone or empty) and every acknowledged
 *    response is in the main database file;
 *  - a request that never completes does not hold the process past SPLITBALLOT_SHUTDOWN_TIMEOUT: it is cut off,
 *    the database is still closed cleanly, and the exit code is 1.
 */
import { existsSync, statSync } from 'node:fs';
import { connect, type Socket } from 'node:net';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { openDatabase } from '../../server/store/sqlite/open.js';
import { tempDir } from '../helpers/app.js';
import { ADMIN_SECRET, answerFor, HAVE_DIST, postJson, runBuiltCli, startBuiltServer, waterDefinition, warnIfNoDist, type BuiltServer } from './built-server.js';

warnIfNoDist('tests/reliability/shutdown.test.ts');

let running: BuiltServer[] = [];
afterEach(() => {
  for (const s of running) s.child.kill('SIGKILL');
  running = [];
});

/** Open a raw connection and send the headers and the first part of a JSON body; returns the socket and a reader. */
async function partialPost(port: number, path: string, body: string, firstBytes: number, keepAlive = false) {
  const socket: Socket = connect(port, '127.0.0.1');
  await new Promise<void>((resolve, reject) => {
    socket.once('connect', resolve);
    socket.once('error', reject);
  });
  let received = '';
  socket.on('data', (d) => (received += d.toString('latin1')));
  const closed = new Promise<void>((resolve) => socket.on('close', () => resolve()));
  socket.on('error', () => undefined);
  socket.write(
    `POST ${path} HTTP/1.1\r\nHost: 127.0.0.1\r\nAuthorization: Bearer ${ADMIN_SECRET}\r\nContent-Type: application/json\r\n` +
      `Content-Length: ${Buffer.byteLength(body)}\r\nConnection: ${keepAlive ? 'keep-alive' : 'close'}\r\n\r\n` +
      body.slice(0, firstBytes),
  );
  return { socket, closed, received: () => received, rest: () => socket.write(body.slice(firstBytes)) };
}

async function refusesConnections(port: number, withinMs: number): Promise<boolean> {
  const deadline = Date.now() + withinMs;
  while (Date.now() < deadline) {
    const refused = await new Promise<boolean>((resolve) => {
      const s = connect(port, '127.0.0.1');
      s.once('connect', () => {
        s.destroy();
        resolve(false);
      });
      s.once('error', () => resolve(true));
    });
    if (refused) return true;
    await new Promise((r) => setTimeout(r, 25));
  }
  return false;
}

describe.skipIf(!HAVE_DIST)('graceful shutdown (SIGTERM to the built server)', () => {
  it('finishes the in-flight request, refuses new connections, checkpoints the WAL and exits 0', async () => {
    const dbPath = join(tempDir('splitballot-shutdown-'), 'shutdown.db');
    const server = await startBuiltServer(dbPath);
    running.push(server);
    expect((await postJson(`${server.base}/v1/experiments`, waterDefinition())).status).toBe(201);
    // Some acknowledged data first, so that the WAL has content to checkpoint.
    for (let n = 0; n < 20; n++) {
      expect((await postJson(`${server.base}/v1/experiments/water-bill-2027/responses`, { responseId: `before-${n}`, ...answerFor(n) })).status).toBe(201);
    }
    expect(statSync(`${dbPath}-wal`).size).toBeGreaterThan(0);

    const body = JSON.stringify({ responseId: 'in-flight', ...answerFor(99) });
    const inFlight = await partialPost(server.port, '/v1/experiments/water-bill-2027/responses', body, 10);
    // An idle keep-alive connection with one finished request on it, to send another request after SIGTERM.
    const idleBody = JSON.stringify({ responseId: 'keep-alive-1', ...answerFor(7) });
    const keepAlive = await partialPost(server.port, '/v1/experiments/water-bill-2027/responses', idleBody, idleBody.length, true);
    await new Promise((r) => setTimeout(r, 300));
    expect(keepAlive.received()).toMatch(/^HTTP\/1\.1 201 /);

    server.child.kill('SIGTERM');
    expect(await refusesConnections(server.port, 3000), 'new connections are refused after SIGTERM').toBe(true);
    // The in-flight request completes after the signal and is acknowledged.
    inFlight.rest();
    await inFlight.closed;
    expect(inFlight.received()).toMatch(/^HTTP\/1\.1 201 /);
    await keepAlive.closed;
    const exit = await server.exited;
    expect(exit.code, server.errors()).toBe(0);
    expect(server.errors()).toBe('');

    // Checkpointed: the WAL is gone (or empty) and the main file alone holds everything.
    expect(!existsSync(`${dbPath}-wal`) || statSync(`${dbPath}-wal`).size === 0).toBe(true);
    const db = openDatabase(dbPath, { readonly: true });
    const ids = db.prepare(`SELECT response_id FROM responses ORDER BY response_id`).pluck().all() as string[];
    db.close();
    expect(ids).toContain('in-flight');
    expect(ids).toContain('keep-alive-1');
    expect(ids.filter((i) => i.startsWith('before-'))).toHaveLength(20);
    const check = await runBuiltCli(['check'], { SPLITBALLOT_DB: dbPath });
    expect(check.code, check.stderr).toBe(0);
  }, 60_000);

  it('a request that never completes is cut off after the shutdown timeout; the database still closes cleanly (exit 1)', async () => {
    const dbPath = join(tempDir('splitballot-shutdown-'), 'stuck.db');
    const server = await startBuiltServer(dbPath, { SPLITBALLOT_SHUTDOWN_TIMEOUT: '1', SPLITBALLOT_REQUEST_TIMEOUT: '60' });
    running.push(server);
    expect((await postJson(`${server.base}/v1/experiments`, waterDefinition())).status).toBe(201);
    const body = JSON.stringify({ responseId: 'never', ...answerFor(1) });
    const stuck = await partialPost(server.port, '/v1/experiments/water-bill-2027/responses', body, 5);
    await new Promise((r) => setTimeout(r, 300)); // let the server read the headers: the request has begun
    const t0 = Date.now();
    server.child.kill('SIGTERM');
    const exit = await server.exited;
    const waited = Date.now() - t0;
    expect(exit.code, `${waited} ms; received: ${stuck.received()}; stderr: ${server.errors()}`).toBe(1);
    expect(waited).toBeGreaterThanOrEqual(900);
    expect(waited).toBeLessThan(8000);
    expect(server.errors()).toContain('in-flight requests did not finish within 1 s');
    await stuck.closed;
    expect(!existsSync(`${dbPath}-wal`) || statSync(`${dbPath}-wal`).size === 0).toBe(true);
    const check = await runBuiltCli(['check'], { SPLITBALLOT_DB: dbPath });
    expect(check.code, check.stderr).toBe(0);
  }, 60_000);
});
