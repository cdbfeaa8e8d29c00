/**
 * Balanced assignment: permuted blocks keep every prefix within one block of the planned ratio (equal and 1:2),
 * assignments are sticky, concurrent requests never break a block, the summary shows drop-out, and every 4xx is
 * problem+json.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import type { ExperimentRecord } from '../../../server/store/types.js';
import { blockPlan, secureShuffle } from '../../../server/services/assignment.js';
import { startTestApp, TEST_ENGINE, waterResponse, WATER_ID, type TestApp } from '../../helpers/app.js';

const ASSIGN = `/v1/experiments/${WATER_ID}/assignments`;
const SUMMARY = `/v1/experiments/${WATER_ID}/assignments/summary`;

let t: TestApp;
beforeEach(async () => {
  t = await startTestApp();
});
afterEach(async () => {
  await t.close();
});

async function water(overrides: Record<string, unknown> = {}): Promise<ExperimentRecord> {
  expect((await t.createWater(overrides)).statusCode).toBe(201);
  return (await t.store.experiments.getBySlug(WATER_ID)) as ExperimentRecord;
}

/**
 * 10,000 assignments straight through the repository (the route adds only parsing). Durability is not under test
 * here, so the test database skips the per-commit fsync (synchronous = OFF) to keep the run short.
 */
async function assignMany(e: ExperimentRecord, count: number): Promise<number[]> {
  if (TEST_ENGINE === 'sqlite') t.store.db.pragma('synchronous = OFF');
  const plan = blockPlan(e);
  if (!plan.ok) throw new Error(plan.reason);
  const out: number[] = [];
  for (let i = 0; i < count; i++) {
    const r = await t.store.assignments.assign(e.key, `resp-${i}`, { template: plan.template, shuffle: secureShuffle }, new Date().toISOString(), null);
    if (r.kind !== 'assigned') throw new Error(r.kind);
    out.push(r.conditionKey);
  }
  return out;
}

/** At every prefix, each condition's count is within one block's share of its planned share. */
function checkBalance(e: ExperimentRecord, sequence: number[], weights: number[]): { worst: number } {
  const plan = blockPlan(e);
  if (!plan.ok) throw new Error(plan.reason);
  const total = weights.reduce((s, w) => s + w, 0);
  const perBlock = weights.map((w) => (w / total) * plan.blockSize);
  const counts = weights.map(() => 0);
  let worst = 0;
  sequence.forEach((key, k) => {
    counts[e.conditions.findIndex((c) => c.key === key)] += 1;
    const n = k + 1;
    counts.forEach((c, i) => {
      const dev = Math.abs(c - (n * weights[i]) / total);
      worst = Math.max(worst, dev);
      expect(dev, `after ${n} assignments condition ${i} has ${c}`).toBeLessThanOrEqual(perBlock[i]);
    });
    if (n % plan.blockSize === 0) counts.forEach((c, i) => expect(c).toBe((n / plan.blockSize) * perBlock[i])); // exact at block ends
  });
  return { worst };
}

// On PostgreSQL each of the 10,000 assignments is its own committed transaction (with its fsync): allow 2 minutes.
describe('balance of 10,000 assignments', { timeout: TEST_ENGINE === 'postgres' ? 120_000 : 30_000 }, () => {
  it('equal allocation: blocks of 4, every prefix within one block of 1:1, exact at each block end', async () => {
    const e = await water();
    const plan = blockPlan(e);
    expect(plan).toMatchObject({ ok: true, weights: [1, 1], multiplier: 2, blockSize: 4 });
    const seq = await assignMany(e, 10_000);
    const { worst } = checkBalance(e, seq, [1, 1]);
    expect(worst).toBeLessThanOrEqual(2);
    // The blocks are drawn at random: among the first 100 blocks more than one of the 6 orders of [a, a, b, b] occurs
    // (all the same would have probability 6^-99).
    const orders = new Set<string>();
    for (let b = 0; b < 100; b++) orders.add(seq.slice(4 * b, 4 * b + 4).join(','));
    expect(orders.size).toBeGreaterThan(1);
    const blocks = await t.store.assignments.listWithBlocks(e.key);
    expect(blocks.length).toBe(10_000);
    expect(blocks[9_999].blockNumber).toBe(2_500);
  });

  it('1:2 allocation: blocks of 6 (2 + 4), every prefix within one block of 1:2', async () => {
    const e = await water({ allocation: { 'bill-first': 1, 'service-first': 2 } });
    expect(blockPlan(e)).toMatchObject({ ok: true, weights: [1, 2], multiplier: 2, blockSize: 6 });
    const seq = await assignMany(e, 10_000);
    checkBalance(e, seq, [1, 2]);
    const first = seq.filter((k) => k === e.conditions[0].key).length;
    expect(Math.abs(first - 10_000 / 3)).toBeLessThanOrEqual(2);
  });

  it('decimal weights are reduced to whole numbers: 0.25/0.75 → 1:3, blocks of 4; 2:3 → blocks of 5', async () => {
    const e = await water({ allocation: { 'bill-first': 0.25, 'service-first': 0.75 } });
    expect(blockPlan(e)).toMatchObject({ ok: true, weights: [1, 3], multiplier: 1, blockSize: 4 });
    expect(blockPlan({ ...e, options: { allocation: { 'bill-first': 20, 'service-first': 30 } } })).toMatchObject({ ok: true, weights: [2, 3], blockSize: 5 });
    expect(blockPlan({ ...e, options: { allocation: { 'bill-first': 0.3333, 'service-first': 1 } } })).toMatchObject({ ok: false });
    expect(blockPlan({ ...e, options: { allocation: { 'bill-first': 999, 'service-first': 1000 } } })).toMatchObject({ ok: false, reason: /1999/ });
  });
});

describe('POST /v1/experiments/{id}/assignments', () => {
  it('is sticky: the same respondent gets the same condition (201 new, then 200 with new: false)', async () => {
    await water();
    const first = await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'r-7f3a9c' } });
    expect(first.statusCode).toBe(201);
    const body = first.json();
    expect(body).toEqual({ condition: expect.stringMatching(/^(bill-first|service-first)$/), respondent: 'r-7f3a9c', new: true });
    for (let i = 0; i < 5; i++) {
      const again = await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'r-7f3a9c' } });
      expect(again.statusCode).toBe(200);
      expect(again.json()).toEqual({ condition: body.condition, respondent: 'r-7f3a9c', new: false });
    }
    // The block state is never part of an answer.
    expect(Object.keys(body).sort()).toEqual(['condition', 'new', 'respondent']);
  });

  it('concurrent requests (Promise.all of 240 injects) never break a block', async () => {
    const e = await water({ allocation: { 'bill-first': 1, 'service-first': 2 } });
    const ingest = await t.key('ingest', WATER_ID);
    const results = await Promise.all(
      Array.from({ length: 240 }, (_, i) => t.request({ method: 'POST', url: ASSIGN, payload: { respondent: `c-${i % 200}` }, key: ingest })),
    );
    // 200 distinct respondents, 40 of them sent twice at the same time: 200 assignments, each repeat answered consistently.
    const byRespondent = new Map<string, string>();
    for (const r of results) {
      expect([200, 201]).toContain(r.statusCode);
      const b = r.json();
      const seen = byRespondent.get(b.respondent);
      if (seen) expect(b.condition).toBe(seen);
      else byRespondent.set(b.respondent, b.condition);
    }
    expect(byRespondent.size).toBe(200);
    expect(results.filter((r) => r.statusCode === 201).length).toBe(200);
    const rows = await t.store.assignments.listWithBlocks(e.key);
    expect(rows.length).toBe(200);
    const blocks = new Map<number, number[]>();
    for (const r of rows) blocks.set(r.blockNumber, [...(blocks.get(r.blockNumber) ?? []), r.conditionKey]);
    const numbers = [...blocks.keys()].sort((a, b) => a - b);
    expect(numbers).toEqual(Array.from({ length: Math.ceil(200 / 6) }, (_, i) => i + 1)); // consecutive blocks
    for (const n of numbers.slice(0, -1)) {
      const members = blocks.get(n) as number[];
      expect(members.filter((k) => k === e.conditions[0].key).length, `block ${n}`).toBe(2);
      expect(members.filter((k) => k === e.conditions[1].key).length, `block ${n}`).toBe(4);
    }
    const lastBlock = blocks.get(numbers[numbers.length - 1]) as number[];
    expect(lastBlock.length).toBe(200 - 6 * (numbers.length - 1));
    expect(lastBlock.filter((k) => k === e.conditions[0].key).length).toBeLessThanOrEqual(2);
  });

  it('a closed experiment → 409; also for a respondent assigned before', async () => {
    await water();
    expect((await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'early' } })).statusCode).toBe(201);
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { status: 'closed' } });
    for (const respondent of ['late', 'early']) {
      const res = await t.request({ method: 'POST', url: ASSIGN, payload: { respondent } });
      expect(res.statusCode).toBe(409);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      expect(res.json()).toEqual({
        type: 'urn:splitballot:problem:experiment-closed',
        title: 'Experiment closed',
        status: 409,
        detail: 'Experiment water-bill-2027 is closed and assigns no more respondents.',
      });
    }
  });

  it('unknown experiment → 404; bad respondent → 422 with the field; unusable allocation → 409', async () => {
    await water();
    const missing = await t.request({ method: 'POST', url: '/v1/experiments/nope/assignments', payload: { respondent: 'x' } });
    expect(missing.statusCode).toBe(404);
    expect(missing.json()).toMatchObject({ type: 'urn:splitballot:problem:not-found', detail: 'There is no experiment "nope".' });
    const cases: [unknown, string, string][] = [
      [{}, 'respondent', ''],
      [{ respondent: '' }, 'respondent', 'must not be empty'],
      [{ respondent: 'a\nb' }, 'respondent', 'must not contain control characters'],
      [{ respondent: 'x'.repeat(257) }, 'respondent', 'must be at most 256 characters'],
      [{ respondent: 'x', condition: 'bill-first' }, 'condition', 'is not a known field'],
    ];
    for (const [payload, path, message] of cases) {
      const res = await t.request({ method: 'POST', url: ASSIGN, payload: payload as Record<string, unknown> });
      expect(res.statusCode, JSON.stringify(payload)).toBe(422);
      expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
      const body = res.json();
      expect(body).toMatchObject({ type: 'urn:splitballot:problem:validation-failed', status: 422 });
      expect(body.errors[0].path).toBe(path);
      if (message) expect(body.errors[0].message).toBe(message);
    }
    await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'odd', title: 'Odd weights', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 's', min: 0, max: 1 }], allocation: { a: 0.3333, b: 1 } } });
    const odd = await t.request({ method: 'POST', url: '/v1/experiments/odd/assignments', payload: { respondent: 'x' } });
    expect(odd.statusCode).toBe(409);
    expect(odd.json()).toMatchObject({ type: 'urn:splitballot:problem:allocation-unusable', title: 'Allocation unusable', status: 409, detail: /three decimals/ });
  });

  it('who may assign: ingest and admin keys; not read keys, not keys for another experiment, not anonymous', async () => {
    await water();
    await t.request({ method: 'POST', url: '/v1/experiments', payload: { id: 'other', title: 'Other', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 's', min: 0, max: 1 }] } });
    expect((await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'i' }, key: await t.key('ingest') })).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'j' }, key: await t.key('ingest', WATER_ID) })).statusCode).toBe(201);
    const read = await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'k' }, key: await t.key('read') });
    expect(read.statusCode).toBe(403);
    expect(read.json()).toMatchObject({ type: 'urn:splitballot:problem:forbidden' });
    expect((await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'l' }, key: await t.key('ingest', 'other') })).statusCode).toBe(403);
    expect((await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: 'm' }, key: null })).statusCode).toBe(401);
  });
});

describe('GET /v1/experiments/{id}/assignments/summary', () => {
  it('assigned, answered, not answered (drop-out), answered in another condition, responses without assignment', async () => {
    await water();
    const assigned = new Map<string, string>();
    for (const r of ['r1', 'r2', 'r3', 'r4', 'r5', 'r6', 'r7', 'r8']) {
      assigned.set(r, (await t.request({ method: 'POST', url: ASSIGN, payload: { respondent: r } })).json().condition);
    }
    const other = (c: string) => (c === 'bill-first' ? 'service-first' : 'bill-first');
    const answers = [
      waterResponse({ respondent: 'r1', condition: assigned.get('r1') }),
      waterResponse({ respondent: 'r2', condition: assigned.get('r2') }),
      waterResponse({ respondent: 'r3', condition: other(assigned.get('r3') as string) }),
      waterResponse({ respondent: 'stranger', condition: 'bill-first' }),
      waterResponse({ condition: 'service-first' }),
    ];
    const batch = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: answers } });
    expect(batch.statusCode).toBe(201);
    const res = await t.request({ method: 'GET', url: SUMMARY, key: await t.key('read', WATER_ID) });
    expect(res.statusCode).toBe(200);
    const expected = ['bill-first', 'service-first'].map((c) => {
      const mine = [...assigned].filter(([, v]) => v === c).map(([k]) => k);
      const answered = mine.filter((r) => ['r1', 'r2', 'r3'].includes(r)).length;
      return {
        condition: c,
        assigned: mine.length,
        answered,
        notAnswered: mine.length - answered,
        answeredOtherCondition: mine.includes('r3') ? 1 : 0,
        responsesWithoutAssignment: 1,
      };
    });
    expect(res.json()).toEqual({
      experiment: WATER_ID,
      allocation: { weights: { 'bill-first': 1, 'service-first': 1 }, blockSize: 4 },
      byCondition: expected,
      totals: { assigned: 8, answered: 3, notAnswered: 5 },
    });
    // 8 assignments = two full blocks of 4: exactly 4 per condition.
    expect(expected.map((x) => x.assigned)).toEqual([4, 4]);
  });

  it('an ingest key can assign but not read the summary; unknown experiment → 404', async () => {
    await water();
    const ingest = await t.key('ingest', WATER_ID);
    const res = await t.request({ method: 'GET', url: SUMMARY, key: ingest });
    expect(res.statusCode).toBe(403);
    expect(res.headers['content-type']).toMatch(/^application\/problem\+json/);
    expect((await t.request({ method: 'GET', url: '/v1/experiments/nope/assignments/summary' })).statusCode).toBe(404);
  });
});
