/**
 * Two real processes of the built server (dist/server/main.js) on ONE PostgreSQL database (a fresh one per file):
 *
 *   1. 16 clients spread over both nodes post single responses; after ≈ 2,000 acknowledgements node A is killed
 *      with SIGKILL and started again. Every acknowledged responseId is stored exactly once; re-sending every
 *      response (acknowledged or not) leaves one copy each; `splitballot check` passes.
 *   2. A write acknowledged by node A is visible at once in a comparison on node B: dataVersion and ETag move; B
 *      polled with the old ETag answers 200, then 304 with the new one.
 *   3. 240 concurrent assignment calls spread over both nodes never break a block; a repeat is sticky on the
 *      other node.
 *   4. An event-stream client on node B receives the event for a response posted to node A.
 *
 * Skipped with a notice without dist/ or without a PostgreSQL server (fails with CI=true when the server is missing).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';
import { answerFor, AUTH, HAVE_DIST, postJson, runBuiltCli, startBuiltServer, warnIfNoDist, waterDefinition, type BuiltServer } from './built-server.js';
import { WATER_ID } from '../helpers/water.js';

warnIfNoDist('the multi-node PostgreSQL tests');
const available = HAVE_DIST && (await postgresAvailable('the multi-node PostgreSQL tests'));

describe.skipIf(!available)('two nodes on one PostgreSQL database', () => {
  let test: TestDatabase;
  let env: Record<string, string>;
  const nodes: BuiltServer[] = [];
  const start = async () => {
    const n = await startBuiltServer('/nonexistent/unused.db', env);
    nodes.push(n);
    return n;
  };

  beforeAll(async () => {
    test = await createTestDatabase();
    env = { SPLITBALLOT_DATABASE_URL: test.url, SPLITBALLOT_DATABASE_POOL_SIZE: '6' };
    const [a] = [await start(), await start()];
    expect((await postJson(`${a.base}/v1/experiments`, waterDefinition())).status).toBe(201);
  }, 60_000);

  afterAll(async () => {
    for (const n of nodes) if (n.child.exitCode === null && n.child.signalCode === null) n.child.kill('SIGKILL');
    await Promise.all(nodes.map((n) => n.exited));
    await test?.drop();
  });

  it('SIGKILL of one node under ingest: every acknowledged response stored exactly once; re-sending stores nothing twice; check passes', async () => {
    let [a, b] = nodes;
    const total = 3200;
    const acknowledged = new Set<string>();
    let killed = false;
    let next = 0;
    const body = (i: number) => ({ responseId: `kill-${i}`, ...answerFor(i) });
    const client = async (c: number) => {
      for (;;) {
        const i = next++;
        if (i >= total) return;
        const node = c % 2 === 0 ? a : b;
        try {
          const r = await postJson(`${node.base}/v1/experiments/${WATER_ID}/responses`, body(i));
          if (r.status === 201 || r.status === 200) acknowledged.add(`kill-${i}`);
        } catch {
          // the killed node's connections fail: not acknowledged
        }
        if (!killed && acknowledged.size >= 2000) {
          killed = true;
          a.child.kill('SIGKILL');
          await a.exited;
          a = await start();
        }
      }
    };
    await Promise.all(Array.from({ length: 16 }, (_, c) => client(c)));
    expect(killed).toBe(true);
    expect(acknowledged.size).toBeGreaterThan(2000);
    const stored = await storedIds(test);
    for (const id of acknowledged) expect(stored.get(id), id).toBe(1);
    for (const [id, n] of stored) expect(n, id).toBe(1);
    // Re-send everything, split over both nodes: one copy each.
    for (let i = 0; i < total; i += 200) {
      const batch = Array.from({ length: Math.min(200, total - i) }, (_, k) => body(i + k));
      const r = await postJson(`${(i / 200) % 2 === 0 ? a.base : b.base}/v1/experiments/${WATER_ID}/responses/batch`, { responses: batch });
      expect([200, 201]).toContain(r.status);
    }
    const after = await storedIds(test);
    expect(after.size).toBe(total);
    for (const [id, n] of after) expect(n, id).toBe(1);
    const check = await runBuiltCli(['check'], env);
    expect(check.stdout).toMatch(/^check ok: /);
    expect(check.code).toBe(0);
  }, 240_000);

  it('a write on node A moves dataVersion and the ETag of a comparison on node B at once; old ETag → 200, new → 304', async () => {
    const [a, b] = nodes.slice(-2);
    const url = `${b.base}/v1/experiments/${WATER_ID}/comparisons/satisfaction`;
    const first = await fetch(url, { headers: AUTH });
    expect(first.status).toBe(200);
    const etag = first.headers.get('etag')!;
    const v0 = ((await first.json()) as { dataVersion: number }).dataVersion;
    expect((await postJson(`${a.base}/v1/experiments/${WATER_ID}/responses`, { responseId: 'etag-1', ...answerFor(1) })).status).toBe(201);
    const second = await fetch(url, { headers: { ...AUTH, 'if-none-match': etag } });
    expect(second.status).toBe(200);
    const etag2 = second.headers.get('etag')!;
    expect(etag2).not.toBe(etag);
    expect(((await second.json()) as { dataVersion: number }).dataVersion).toBe(v0 + 1);
    const third = await fetch(url, { headers: { ...AUTH, 'if-none-match': etag2 } });
    expect(third.status).toBe(304);
  });

  it('240 concurrent assignment calls over two nodes never break a block; repeats are sticky across nodes', async () => {
    const [a, b] = nodes.slice(-2);
    const slug = 'assign-two-nodes';
    expect((await postJson(`${a.base}/v1/experiments`, { ...waterDefinition(), id: slug })).status).toBe(201);
    const replies = await Promise.all(
      Array.from({ length: 240 }, (_, i) => postJson(`${(i % 2 === 0 ? a : b).base}/v1/experiments/${slug}/assignments`, { respondent: `r-${i}` })),
    );
    const got = replies.map((r) => {
      expect(r.status).toBe(201);
      return (r.body as { condition: string }).condition;
    });
    // Blocks straight from the database: every block but the newest holds each condition equally often, and
    // the newest is a prefix of one (no condition more than once ahead).
    const c = await test.admin();
    const rows = (
      await c.query<{ block_number: number; slug: string; n: string }>(
        `SELECT a.block_number, k.slug, count(*) AS n FROM assignments a JOIN conditions k ON k.id = a.condition_id
         JOIN experiments e ON e.id = a.experiment_id WHERE e.slug = $1 GROUP BY 1, 2 ORDER BY 1, 2`,
        [slug],
      )
    ).rows;
    const blocks = new Map<number, Map<string, number>>();
    for (const r of rows) blocks.set(r.block_number, (blocks.get(r.block_number) ?? new Map()).set(r.slug, Number(r.n)));
    const last = Math.max(...blocks.keys());
    const fullSize = Math.max(...[...blocks.values()].map((m) => [...m.values()].reduce((x, y) => x + y, 0)));
    for (const [block, counts] of blocks) {
      const values = ['bill-first', 'service-first'].map((k) => counts.get(k) ?? 0);
      if (block !== last) expect(values[0], `block ${block}: ${JSON.stringify(values)}`).toBe(values[1]);
      else expect(Math.abs(values[0] - values[1]), `block ${block}: ${JSON.stringify(values)}`).toBeLessThanOrEqual(fullSize / 2);
    }
    expect(got.length).toBe(240);
    for (const i of [0, 1, 77, 238]) {
      const again = await postJson(`${(i % 2 === 0 ? b : a).base}/v1/experiments/${slug}/assignments`, { respondent: `r-${i}` });
      expect([200, 201]).toContain(again.status);
      expect((again.body as { condition: string }).condition).toBe(got[i]);
    }
  });

  it('an event-stream client on node B receives the event for a response posted to node A', async () => {
    const [a, b] = nodes.slice(-2);
    const controller = new AbortController();
    const res = await fetch(`${b.base}/v1/experiments/${WATER_ID}/events`, { headers: AUTH, signal: controller.signal });
    expect(res.status).toBe(200);
    const reader = res.body!.getReader();
    const decoder = new TextDecoder();
    let text = '';
    const readUntil = async (re: RegExp, ms: number) => {
      const deadline = Date.now() + ms;
      while (!re.test(text) && Date.now() < deadline) {
        const chunk = await Promise.race([reader.read(), new Promise<null>((r) => setTimeout(() => r(null), deadline - Date.now()))]);
        if (chunk === null || chunk.done) break;
        text += decoder.decode(chunk.value, { stream: true });
      }
      return re.exec(text);
    };
    const initial = await readUntil(/data: \{"dataVersion":(\d+)\}/, 5000);
    expect(initial).not.toBeNull();
    const v0 = Number(initial![1]);
    const posted = Date.now();
    expect((await postJson(`${a.base}/v1/experiments/${WATER_ID}/responses`, { responseId: 'sse-1', ...answerFor(2) })).status).toBe(201);
    const moved = await readUntil(new RegExp(`data: \\{"dataVersion":${v0 + 1}\\}`), 5000);
    expect(moved, text).not.toBeNull();
    // LISTEN/NOTIFY, not the one-second poll (a generous bound for a loaded machine).
    expect(Date.now() - posted).toBeLessThan(3000);
    controller.abort();
  });
});

/** responseId → number of stored rows, straight from the database. */
async function storedIds(test: TestDatabase): Promise<Map<string, number>> {
  const c = await test.admin();
  const r = await c.query<{ response_id: string; n: string }>(`SELECT response_id, count(*) AS n FROM responses GROUP BY response_id`);
  return new Map(r.rows.map((x) => [x.response_id, Number(x.n)]));
}
