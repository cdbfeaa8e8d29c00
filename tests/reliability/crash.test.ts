/**
 * Crash durability with the real built server (issue 6, test 1).
 *
 * Single responses: 16 concurrent clients post responses with unique responseIds; after about 2,000
 * acknowledgements the server gets SIGKILL (no shutdown code runs). Then: `splitballot check` passes on the
 * crashed file; every acknowledged id is stored exactly once; no id is stored that was never sent; after a
 * restart, re-sending every request (acknowledged or not) answers 200 (already stored) for every acknowledged one
 * and leaves exactly one copy of each; `check` passes again.
 *
 * Batches: the same with batches of 25; additionally every batch is either wholly stored or wholly absent.
 */
import { dirname, join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { openDatabase } from '../../server/store/sqlite/open.js';
import { tempDir } from '../helpers/app.js';
import { answerFor, AUTH, HAVE_DIST, postJson, runBuiltCli, startBuiltServer, waterDefinition, warnIfNoDist, type BuiltServer } from './built-server.js';

warnIfNoDist('tests/reliability/crash.test.ts');

const CLIENTS = 16;
const KILL_AFTER = 2000;
const BATCH = 25;
const EXP = 'water-bill-2027';

let running: BuiltServer[] = [];
afterEach(() => {
  for (const s of running) s.child.kill('SIGKILL');
  running = [];
});

function storedIds(dbPath: string): Map<string, number> {
  const db = openDatabase(dbPath, { readonly: true });
  try {
    const rows = db.prepare(`SELECT response_id AS id, count(*) AS n FROM responses GROUP BY response_id`).all() as { id: string; n: number }[];
    return new Map(rows.map((r) => [r.id, r.n]));
  } finally {
    db.close();
  }
}

async function start(dbPath: string): Promise<BuiltServer> {
  const s = await startBuiltServer(dbPath);
  running.push(s);
  return s;
}

async function checkPasses(dbPath: string): Promise<string> {
  const r = await runBuiltCli(['check'], { SPLITBALLOT_DB: dbPath });
  expect(r.code, r.stderr + r.stdout).toBe(0);
  expect(r.stdout).toMatch(/^check ok: /);
  return r.stdout;
}

/**
 * Run `CLIENTS` loops; each takes the next unit (an id or a batch) from a shared counter, records it as sent,
 * posts it, and records it as acknowledged on 200/201. Stops when the server is gone. `onAck` sees the running
 * acknowledgement count (in responses) and may kill the server.
 */
function explain(err: unknown): string {
  const e = err as Error & { cause?: { code?: string; message?: string } };
  return `${e.message}${e.cause ? ` (${e.cause.code ?? ''} ${e.cause.message ?? ''})` : ''}`;
}

/** POST with up to 3 attempts on a network error (not on an HTTP status): for the resend phase. */
async function postRetrying(url: string, body: unknown): Promise<{ status: number; body: unknown }> {
  for (let attempt = 1; ; attempt++) {
    try {
      return await postJson(url, body);
    } catch (err) {
      if (attempt >= 3) throw new Error(`POST ${url} failed 3 times: ${explain(err)}`);
      await new Promise((r) => setTimeout(r, 100));
    }
  }
}

async function hammer(
  post: (unit: number) => Promise<{ status: number; size: number }>,
  onAck: (acked: number) => void,
  killed: () => boolean,
): Promise<{ sent: Set<number>; acked: Set<number> }> {
  const sent = new Set<number>();
  const acked = new Set<number>();
  let next = 0;
  let ackedResponses = 0;
  let stop = false;
  const client = async () => {
    while (!stop) {
      const unit = next++;
      sent.add(unit);
      let r: { status: number; size: number };
      try {
        r = await post(unit);
      } catch (err) {
        if (!killed()) throw new Error(`request ${unit} failed before the kill: ${explain(err)}`);
        stop = true; // connection refused / reset: the server is gone
        continue;
      }
      if (r.status !== 200 && r.status !== 201) throw new Error(`request ${unit}: unexpected status ${r.status}`);
      acked.add(unit);
      ackedResponses += r.size;
      onAck(ackedResponses);
    }
  };
  await Promise.all(Array.from({ length: CLIENTS }, client));
  return { sent, acked };
}

describe.skipIf(!HAVE_DIST)('crash durability (SIGKILL of the built server)', () => {
  it('single responses: every acknowledged id survives exactly once; resending changes nothing; check passes', async () => {
    const dbPath = join(tempDir('splitballot-crash-'), 'crash.db');
    const first = await start(dbPath);
    expect((await postJson(`${first.base}/v1/experiments`, waterDefinition())).status).toBe(201);
    const url = `${first.base}/v1/experiments/${EXP}/responses`;
    const id = (u: number) => `r-${u}`;
    let killed = false;
    const { sent, acked } = await hammer(
      async (u) => ({ status: (await postJson(url, { responseId: id(u), ...answerFor(u) })).status, size: 1 }),
      (n) => {
        if (!killed && n >= KILL_AFTER) {
          killed = true;
          first.child.kill('SIGKILL');
        }
      },
      () => killed,
    );
    const exit = await first.exited;
    expect(exit.signal).toBe('SIGKILL');
    expect(acked.size).toBeGreaterThanOrEqual(KILL_AFTER);

    await checkPasses(dbPath);
    const stored = storedIds(dbPath);
    for (const u of acked) expect(stored.get(id(u)), `acknowledged ${id(u)} must be stored once`).toBe(1);
    for (const [rid, n] of stored) {
      expect(n).toBe(1);
      expect(sent.has(Number(rid.slice(2))), `${rid} was stored but never sent`).toBe(true);
    }

    const second = await start(dbPath);
    const url2 = `${second.base}/v1/experiments/${EXP}/responses`;
    const all = [...sent];
    const statuses = new Map<number, number>();
    let cursor = 0;
    await Promise.all(
      Array.from({ length: CLIENTS }, async () => {
        while (cursor < all.length) {
          const u = all[cursor++];
          statuses.set(u, (await postRetrying(url2, { responseId: id(u), ...answerFor(u) })).status);
        }
      }),
    );
    for (const u of all) {
      if (acked.has(u)) expect(statuses.get(u), `resent acknowledged ${id(u)}`).toBe(200);
      else expect([200, 201], `resent unacknowledged ${id(u)}`).toContain(statuses.get(u));
    }
    second.child.kill('SIGTERM');
    expect((await second.exited).code).toBe(0);
    await checkPasses(dbPath);
    const after = storedIds(dbPath);
    expect(after.size).toBe(sent.size);
    for (const u of sent) expect(after.get(id(u))).toBe(1);
  }, 120_000);

  it('batches: a batch is wholly present or wholly absent; acknowledged batches survive; resending changes nothing', async () => {
    const dbPath = join(tempDir('splitballot-crash-'), 'batch.db');
    const first = await start(dbPath);
    expect((await postJson(`${first.base}/v1/experiments`, waterDefinition())).status).toBe(201);
    const url = `${first.base}/v1/experiments/${EXP}/responses/batch`;
    const batchBody = (u: number) => ({
      responses: Array.from({ length: BATCH }, (_, k) => ({ responseId: `b-${u}-${k}`, ...answerFor(u * BATCH + k) })),
    });
    let killed = false;
    const { sent, acked } = await hammer(
      async (u) => ({ status: (await postJson(url, batchBody(u))).status, size: BATCH }),
      (n) => {
        if (!killed && n >= KILL_AFTER) {
          killed = true;
          first.child.kill('SIGKILL');
        }
      },
      () => killed,
    );
    expect((await first.exited).signal).toBe('SIGKILL');
    expect(acked.size * BATCH).toBeGreaterThanOrEqual(KILL_AFTER);

    await checkPasses(dbPath);
    const stored = storedIds(dbPath);
    const present = new Map<number, number>();
    for (const [rid, n] of stored) {
      expect(n).toBe(1);
      const m = /^b-(\d+)-(\d+)$/.exec(rid);
      expect(m, rid).not.toBeNull();
      const u = Number(m![1]);
      expect(sent.has(u), `${rid} was stored but never sent`).toBe(true);
      present.set(u, (present.get(u) ?? 0) + 1);
    }
    for (const [u, n] of present) expect(n, `batch ${u} is partly stored`).toBe(BATCH);
    for (const u of acked) expect(present.get(u), `acknowledged batch ${u}`).toBe(BATCH);

    const second = await start(dbPath);
    const url2 = `${second.base}/v1/experiments/${EXP}/responses/batch`;
    const all = [...sent];
    let cursor = 0;
    const results = new Map<number, { status: number; body: unknown }>();
    await Promise.all(
      Array.from({ length: CLIENTS }, async () => {
        while (cursor < all.length) {
          const u = all[cursor++];
          results.set(u, await postRetrying(url2, batchBody(u)));
        }
      }),
    );
    for (const u of all) {
      const r = results.get(u)!;
      if (acked.has(u) || present.has(u)) {
        expect(r.status, `resent stored batch ${u}`).toBe(200);
        expect(r.body).toMatchObject({ created: 0, repeated: BATCH });
      } else {
        expect(r.status, `resent absent batch ${u}`).toBe(201);
        expect(r.body).toMatchObject({ created: BATCH, repeated: 0 });
      }
    }
    second.child.kill('SIGTERM');
    expect((await second.exited).code).toBe(0);
    await checkPasses(dbPath);
    const after = storedIds(dbPath);
    expect(after.size).toBe(sent.size * BATCH);
    for (const n of after.values()) expect(n).toBe(1);
  }, 120_000);
});

describe.skipIf(!HAVE_DIST)('a second server on the same database', () => {
  it('refuses to start while the first runs, and restore refuses too', async () => {
    const dbPath = join(tempDir('splitballot-crash-'), 'twice.db');
    const first = await start(dbPath);
    const second = await runBuiltCli(['serve'], { SPLITBALLOT_DB: dbPath, PORT: '0', HOST: '127.0.0.1', SPLITBALLOT_ADMIN_KEY: 'x'.repeat(40) });
    expect(second.code).toBe(1);
    expect(second.stderr).toContain(`is using ${dbPath}`);
    // A CLI backup of the running server works (another connection: SQLite's backup API copes with the writer)…
    const backup = join(dirname(dbPath), 'live.db');
    const b = await runBuiltCli(['backup', backup], { SPLITBALLOT_DB: dbPath });
    expect(b.code, b.stderr).toBe(0);
    expect(b.stdout).toMatch(/^backup ok: .*live\.db .*integrity and counts checked\n$/);
    // …but restoring over the running server's database is refused, changing nothing.
    const restore = await runBuiltCli(['restore', backup], { SPLITBALLOT_DB: dbPath });
    expect(restore.code).toBe(1);
    expect(restore.stderr).toContain(`restore refused: a splitballot server (or another restore) is using ${dbPath}`);
    // Still serving.
    expect((await fetch(`${first.base}/v1/experiments`, { headers: AUTH })).status).toBe(200);
  }, 60_000);
});
