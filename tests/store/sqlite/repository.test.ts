/**
 * The read methods later features use: per-value counts, values in sorted order, consistent snapshots,
 * dataVersion, and the counters ingest maintains. Checked against brute-force answers computed in JS.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mergeSorted } from '../../../server/store/sqlite/responses.js';
import type { ExperimentRecord } from '../../../server/store/types.js';
import { startTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

let t: TestApp;
let e: ExperimentRecord;
const answers: { condition: string; satisfaction: number; trust: number; fair_price: number; excluded: boolean }[] = [];

/** Deterministic pseudo-random numbers (a small LCG), so the invented data is the same on every run. */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

beforeAll(async () => {
  t = await startTestApp();
  await t.createWater();
  const rand = lcg(2027);
  const items = [];
  for (let i = 0; i < 3000; i++) {
    const condition = rand() < 0.5 ? 'bill-first' : 'service-first';
    const a = { condition, satisfaction: Math.floor(rand() * 11), trust: 1 + Math.floor(rand() * 7), fair_price: Math.round(rand() * 20000) / 100, excluded: false };
    answers.push(a);
    items.push({ responseId: `r-${i}`, condition, values: { satisfaction: a.satisfaction, trust: a.trust, fair_price: a.fair_price } });
  }
  const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: items } });
  expect(res.statusCode).toBe(201);
  // Exclude every 10th response the way the exclusion feature will: flag on the response and its values,
  // counts moved from excluded = 0 to excluded = 1, condition counters, dataVersion + 1 — in one transaction.
  const db = t.store.db;
  db.transaction(() => {
    for (let i = 0; i < answers.length; i += 10) {
      answers[i].excluded = true;
      const id = db.prepare(`SELECT id, condition_id FROM responses WHERE response_id = ?`).get(`r-${i}`) as { id: number; condition_id: number };
      db.prepare(`UPDATE responses SET excluded = 1, excluded_reason = 'test' WHERE id = ?`).run(id.id);
      db.prepare(`UPDATE response_values SET excluded = 1 WHERE response_id = ?`).run(id.id);
      db.prepare(`UPDATE conditions SET excluded_count = excluded_count + 1 WHERE id = ?`).run(id.condition_id);
      for (const v of db.prepare(`SELECT v.measure_id, v.value FROM response_values v JOIN measures m ON m.id = v.measure_id WHERE v.response_id = ? AND m.is_integer = 1`).all(id.id) as { measure_id: number; value: number }[]) {
        db.prepare(`UPDATE value_counts SET count = count - 1 WHERE measure_id = ? AND condition_id = ? AND excluded = 0 AND value = ?`).run(v.measure_id, id.condition_id, v.value);
        db.prepare(
          `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (?, ?, 1, ?, 1)
           ON CONFLICT (measure_id, condition_id, excluded, value) DO UPDATE SET count = value_counts.count + 1`,
        ).run(v.measure_id, id.condition_id, v.value);
      }
    }
    db.prepare(`UPDATE experiments SET data_version = data_version + 1 WHERE slug = ?`).run(WATER_ID);
  })();
  e = (await t.store.experiments.getBySlug(WATER_ID))!;
});

afterAll(async () => {
  await t.close();
});

function keyOf(kind: 'measures' | 'conditions', id: string): number {
  return (e[kind] as { id: string; key: number }[]).find((x) => x.id === id)!.key;
}

function expectedCounts(measure: 'satisfaction' | 'trust', condition: string, includeExcluded: boolean, min: number, max: number): number[] {
  const out = new Array(max - min + 1).fill(0);
  for (const a of answers) if (a.condition === condition && (includeExcluded || !a.excluded)) out[a[measure] - min]++;
  return out;
}

function expectedSorted(measure: 'satisfaction' | 'trust' | 'fair_price', condition: string, includeExcluded: boolean): number[] {
  return answers.filter((a) => a.condition === condition && (includeExcluded || !a.excluded)).map((a) => a[measure]).sort((x, y) => x - y);
}

describe('ResponseRepository reads', () => {
  it('getCounts: dense per-value counts from min to max, with and without excluded responses', async () => {
    for (const condition of ['bill-first', 'service-first']) {
      for (const includeExcluded of [false, true]) {
        const sat = await t.store.responses.getCounts(keyOf('measures', 'satisfaction'), keyOf('conditions', condition), includeExcluded);
        expect(sat).toBeInstanceOf(Float64Array);
        expect(Array.from(sat)).toEqual(expectedCounts('satisfaction', condition, includeExcluded, 0, 10));
        const trust = await t.store.responses.getCounts(keyOf('measures', 'trust'), keyOf('conditions', condition), includeExcluded);
        expect(Array.from(trust)).toEqual(expectedCounts('trust', condition, includeExcluded, 1, 7));
      }
    }
  });

  it('getValueCounts: only the values that occur, increasing', async () => {
    const r = await t.store.responses.getValueCounts(keyOf('measures', 'trust'), keyOf('conditions', 'bill-first'), false);
    const dense = expectedCounts('trust', 'bill-first', false, 1, 7);
    const values = dense.map((c, k) => [k + 1, c]).filter(([, c]) => c > 0);
    expect(Array.from(r.values)).toEqual(values.map(([v]) => v));
    expect(Array.from(r.counts)).toEqual(values.map(([, c]) => c));
  });

  it('getCounts refuses a continuous measure and an unknown key (RangeError)', async () => {
    await expect(t.store.responses.getCounts(keyOf('measures', 'fair_price'), keyOf('conditions', 'bill-first'), false)).rejects.toThrow(RangeError);
    await expect(t.store.responses.getCounts(99999, keyOf('conditions', 'bill-first'), false)).rejects.toThrow('measure key 99999 does not exist');
  });

  it('getSortedValues: every value in non-decreasing order, excluded ones merged in on request', async () => {
    for (const measure of ['satisfaction', 'fair_price'] as const) {
      for (const includeExcluded of [false, true]) {
        const v = await t.store.responses.getSortedValues(keyOf('measures', measure), keyOf('conditions', 'service-first'), includeExcluded);
        expect(v).toBeInstanceOf(Float64Array);
        expect(Array.from(v)).toEqual(expectedSorted(measure, 'service-first', includeExcluded));
      }
    }
  });

  it('snapshots read several conditions and the dataVersion together', async () => {
    const conditions = [keyOf('conditions', 'bill-first'), keyOf('conditions', 'service-first')];
    const sorted = await t.store.responses.getSortedValuesSnapshot(keyOf('measures', 'fair_price'), conditions, false);
    expect(sorted.dataVersion).toBe(2);
    expect(sorted.groups.map((g) => g.length)).toEqual(['bill-first', 'service-first'].map((c) => expectedSorted('fair_price', c, false).length));
    const counts = await t.store.responses.getCountsSnapshot(keyOf('measures', 'satisfaction'), conditions, true);
    expect(counts.dataVersion).toBe(2);
    expect(Array.from(counts.groups[1])).toEqual(expectedCounts('satisfaction', 'service-first', true, 0, 10));
  });

  it('dataVersion, per-condition counters and countValues agree with the data', async () => {
    expect(await t.store.experiments.getDataVersion(e.key)).toBe(2);
    expect(await t.store.experiments.getDataVersion(99999)).toBeNull();
    for (const c of e.conditions) {
      expect(c.responses).toBe(answers.filter((a) => a.condition === c.id).length);
      expect(c.excluded).toBe(answers.filter((a) => a.condition === c.id && a.excluded).length);
    }
    expect(await t.store.responses.countValues(keyOf('measures', 'trust'))).toBe(3000);
  });

  it('getStored returns a response with its values by measure id', async () => {
    const s = await t.store.responses.getStored(e.key, 'r-10');
    expect(s).toMatchObject({ responseId: 'r-10', condition: answers[10].condition, excluded: true, excludedReason: 'test', respondent: null });
    expect(s!.values).toEqual({ satisfaction: answers[10].satisfaction, trust: answers[10].trust, fair_price: answers[10].fair_price });
    expect(await t.store.responses.getStored(e.key, 'nope')).toBeNull();
  });
});

describe('mergeSorted', () => {
  it('merges two sorted runs, keeping ties', () => {
    const a = new Float64Array([1, 3, 3, 9]);
    const b = new Float64Array([0, 3, 10]);
    expect(Array.from(mergeSorted(a, b))).toEqual([0, 1, 3, 3, 3, 9, 10]);
    expect(mergeSorted(a, new Float64Array(0))).toBe(a);
    expect(mergeSorted(new Float64Array(0), b)).toBe(b);
  });
});
