/**
 * Concurrency (issue 6, test 4): while 4 clients post single responses over HTTP, 2 pollers read
 * GET …/comparisons/{measure} (an integer measure, answered from the per-value counts, and a continuous one,
 * answered from the sorted values) and GET /v1/experiments/{id}, as fast as they can.
 *
 * Every single-response post stores exactly one response and moves dataVersion by exactly one, and every
 * measure is required, so at any committed state: responses = n0 + (dataVersion − v0), and each measure's group
 * sizes add up to that. A torn read (counts from one moment, values or dataVersion from another) breaks that
 * equation. Asserted for every poll: the equation holds, the per-condition sizes match the definition's counts
 * for the same dataVersion, and each poller's dataVersion never moves backwards.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startTestApp, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

const WRITERS = 4;
const PER_WRITER = 150;

let t: TestApp;
let base = '';
let readKey = '';
let ingestKey = '';

beforeAll(async () => {
  t = await startTestApp();
  expect((await t.createWater()).statusCode).toBe(201);
  const seed = Array.from({ length: 20 }, (_, i) => waterResponse({ condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11, fair_price: i * 3.25 }));
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: seed } })).statusCode).toBe(201);
  readKey = await t.key('read', WATER_ID, 'dashboard');
  ingestKey = await t.key('ingest', WATER_ID, 'form');
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  const a = t.app.server.address();
  base = `http://127.0.0.1:${typeof a === 'object' && a ? a.port : 0}/v1/experiments/${WATER_ID}`;
});
afterAll(async () => t.close());

interface Snapshot {
  dataVersion: number;
  byCondition: Record<string, number>;
}

describe('ingest and polls at the same time', () => {
  it('every poll is one consistent state and dataVersion only moves forward', async () => {
    const start = (await (await fetch(base, { headers: { authorization: `Bearer ${readKey}` } })).json()) as {
      dataVersion: number;
      counts: { responses: number };
    };
    const v0 = start.dataVersion;
    const n0 = start.counts.responses;
    let writing = true;
    const problems: string[] = [];
    const definitionAt = new Map<number, Record<string, number>>();
    const comparisonAt = new Map<number, Record<string, number>>();
    let polls = 0;
    const versionsSeen = new Set<number>();

    const writer = async (w: number) => {
      for (let i = 0; i < PER_WRITER; i++) {
        const r = await fetch(`${base}/responses`, {
          method: 'POST',
          headers: { authorization: `Bearer ${ingestKey}`, 'content-type': 'application/json' },
          body: JSON.stringify(waterResponse({ responseId: `w${w}-${i}`, condition: (w + i) % 3 ? 'bill-first' : 'service-first' }, { satisfaction: (w * 7 + i) % 11, fair_price: (i * 13) % 200 })),
        });
        if (r.status !== 201) problems.push(`write ${w}-${i}: ${r.status}`);
        await r.arrayBuffer();
      }
    };

    const poller = async (p: number) => {
      let last = -1;
      const see = (what: string, v: number) => {
        if (v < last) problems.push(`poller ${p}: ${what} dataVersion went back from ${last} to ${v}`);
        last = v;
        versionsSeen.add(v);
        polls++;
      };
      const measures = ['satisfaction', 'fair_price'];
      let k = 0;
      while (writing) {
        const measure = measures[k++ % 2];
        const c = await fetch(`${base}/comparisons/${measure}`, { headers: { authorization: `Bearer ${readKey}` } });
        if (c.status !== 200) {
          problems.push(`poller ${p}: comparison ${c.status} ${await c.text()}`);
          continue;
        }
        const cmp = (await c.json()) as { dataVersion: number; a: string; b: string; groups: { a: { n: number }; b: { n: number } } };
        see(`comparison ${measure}`, cmp.dataVersion);
        const total = cmp.groups.a.n + cmp.groups.b.n;
        if (total !== n0 + (cmp.dataVersion - v0)) {
          problems.push(`poller ${p}: ${measure} at dataVersion ${cmp.dataVersion} has ${total} answers, expected ${n0 + (cmp.dataVersion - v0)}`);
        }
        const sizes = { [cmp.a]: cmp.groups.a.n, [cmp.b]: cmp.groups.b.n };
        const seen = comparisonAt.get(cmp.dataVersion);
        if (seen && JSON.stringify(seen) !== JSON.stringify(sizes)) problems.push(`two comparisons at dataVersion ${cmp.dataVersion} disagree`);
        comparisonAt.set(cmp.dataVersion, sizes);

        const d = await fetch(base, { headers: { authorization: `Bearer ${readKey}` } });
        const def = (await d.json()) as { dataVersion: number; counts: { responses: number; byCondition: { condition: string; responses: number }[] } };
        see('definition', def.dataVersion);
        if (def.counts.responses !== n0 + (def.dataVersion - v0)) {
          problems.push(`poller ${p}: definition at dataVersion ${def.dataVersion} counts ${def.counts.responses} responses`);
        }
        definitionAt.set(def.dataVersion, Object.fromEntries(def.counts.byCondition.map((c) => [c.condition, c.responses])));
      }
    };

    const writers = Promise.all(Array.from({ length: WRITERS }, (_, w) => writer(w)));
    const pollers = Promise.all([poller(1), poller(2)]);
    await writers;
    writing = false;
    await pollers;

    // Per-condition sizes agree wherever a comparison and a definition were read at the same dataVersion.
    let matched = 0;
    for (const [v, sizes] of comparisonAt) {
      const def = definitionAt.get(v);
      if (!def) continue;
      matched++;
      for (const [cond, n] of Object.entries(sizes)) if (def[cond] !== n) problems.push(`dataVersion ${v}: comparison says ${cond} = ${n}, definition ${def[cond]}`);
    }
    expect(problems, problems.slice(0, 20).join('\n')).toEqual([]);
    expect(polls).toBeGreaterThan(40);
    expect(versionsSeen.size).toBeGreaterThan(5);
    expect(matched).toBeGreaterThan(0);
    const end = (await (await fetch(base, { headers: { authorization: `Bearer ${readKey}` } })).json()) as { dataVersion: number; counts: { responses: number } };
    expect(end.dataVersion).toBe(v0 + WRITERS * PER_WRITER);
    expect(end.counts.responses).toBe(n0 + WRITERS * PER_WRITER);
  }, 60_000);
});
