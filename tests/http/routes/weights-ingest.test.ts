/**
 * Survey weights at ingest: the definition fields, the weight of a response in JSON, form posts and batches, the
 * refusals (422 naming `weight`, nothing stored, counted by reason), idempotency, the per-value weight sums kept by
 * ingest, exclusion and erasure, `check`, and migration 0005 on a database made by the schema before it.
 */
import { describe, expect, it } from 'vitest';
import { join } from 'node:path';
import { eachTestApp, tempDir, TEST_ENGINE, type TestApp } from '../../helpers/app.js';
import type { PostgresStore } from '../../../server/store/postgres/store.js';
import { openDatabase } from '../../../server/store/sqlite/open.js';
import { loadMigrations, migrate } from '../../../server/store/sqlite/migrate.js';
import { checkDatabase } from '../../../server/store/sqlite/check.js';

let t: TestApp;
eachTestApp((app) => (t = app), { water: false });

const ID = 'weighted-water';

function definition(weights: 'none' | 'optional' | 'required', extra: Record<string, unknown> = {}) {
  return {
    id: ID,
    title: 'Invented water-utility survey with design weights',
    conditions: [{ id: 'bill-first' }, { id: 'service-first' }],
    measures: [
      { id: 'prior_trust', min: 1, max: 7, integer: true, role: 'covariate' },
      { id: 'satisfaction', min: 0, max: 10, integer: true },
      { id: 'fair_price', min: 0, max: 200, required: false },
    ],
    weights,
    ...extra,
  };
}

async function create(weights: 'none' | 'optional' | 'required', extra: Record<string, unknown> = {}) {
  const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: definition(weights, extra) });
  expect(res.statusCode, res.body).toBe(201);
  return res.json();
}

function post(payload: unknown) {
  return t.request({ method: 'POST', url: `/v1/experiments/${ID}/responses`, payload: payload as Record<string, unknown> });
}

/** The satisfaction rows of value_counts (either engine). */
function sums() {
  return t.sql(
    `SELECT m.slug AS measure, c.slug AS condition, vc.excluded, vc.value, vc.count, vc.weighted_count AS weighted,
            vc.weight_sum AS sum, vc.weight_square_sum AS sq
     FROM value_counts vc JOIN measures m ON m.id = vc.measure_id JOIN conditions c ON c.id = vc.condition_id
     WHERE m.slug = 'satisfaction' ORDER BY c.slug, vc.excluded, vc.value`,
  );
}

/** `splitballot check` on the test app's database, whichever engine. */
async function checkProblems(): Promise<string[]> {
  if (TEST_ENGINE === 'postgres') return (await (t.store as unknown as PostgresStore).check()).problems;
  return checkDatabase(t.store.db).problems;
}

describe('definition', () => {
  it('declares weights, maxWeight and measure roles; the reply shows them', async () => {
    const body = await create('optional', { maxWeight: 50 });
    expect(body.weights).toBe('optional');
    expect(body.maxWeight).toBe(50);
    expect(body.measures.map((m: { role: string }) => m.role)).toEqual(['covariate', 'outcome', 'outcome']);
  });

  it('defaults: weights "none", maxWeight null, role "outcome"', async () => {
    const res = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: { id: 'plain', title: 'Plain', conditions: [{ id: 'a' }, { id: 'b' }], measures: [{ id: 'score', min: 0, max: 1 }] },
    });
    expect(res.json()).toMatchObject({ weights: 'none', maxWeight: null, measures: [{ role: 'outcome' }] });
  });

  it('a measure named "weight" is refused when the experiment takes weights; maxWeight needs weights', async () => {
    const named = definition('required');
    named.measures.push({ id: 'weight', min: 0, max: 1 } as never);
    const res = await t.request({ method: 'POST', url: '/v1/experiments', payload: named });
    expect(res.statusCode).toBe(422);
    expect(res.json().errors).toEqual([
      { path: 'measures[3].id', message: 'must not be "weight" in an experiment with weights (that name is the weight\'s field)' },
    ]);
    const limitOnly = await t.request({ method: 'POST', url: '/v1/experiments', payload: definition('none', { maxWeight: 10 }) });
    expect(limitOnly.statusCode).toBe(422);
    expect(limitOnly.json().errors).toEqual([{ path: 'maxWeight', message: 'needs weights "optional" or "required"' }]);
  });
});

describe('weights at ingest', () => {
  it('stores a JSON weight, echoes it, and keeps Σw and Σw² per value', async () => {
    await create('optional');
    const res = await post({ responseId: 'r1', condition: 'bill-first', weight: 2.5, values: { prior_trust: 3, satisfaction: 7 } });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toMatchObject({ responseId: 'r1', weight: 2.5 });
    await post({ responseId: 'r2', condition: 'bill-first', weight: 4, values: { prior_trust: 3, satisfaction: 7 } });
    await post({ responseId: 'r3', condition: 'bill-first', values: { prior_trust: 3, satisfaction: 7 } });
    expect(await sums()).toEqual([{ measure: 'satisfaction', condition: 'bill-first', excluded: 0, value: 7, count: 3, weighted: 2, sum: 6.5, sq: 22.25 }]);
    const repeat = await post({ responseId: 'r1', condition: 'bill-first', weight: 2.5, values: { prior_trust: 3, satisfaction: 7 } });
    expect(repeat.statusCode).toBe(200);
    expect(repeat.json()).toMatchObject({ responseId: 'r1', weight: 2.5 });
  });

  it('idempotency includes the weight: the same id with another weight is a conflict (409)', async () => {
    await create('optional');
    await post({ responseId: 'r1', condition: 'bill-first', weight: 2, values: { prior_trust: 3, satisfaction: 7 } });
    const other = await post({ responseId: 'r1', condition: 'bill-first', weight: 3, values: { prior_trust: 3, satisfaction: 7 } });
    expect(other.statusCode).toBe(409);
    const none = await post({ responseId: 'r1', condition: 'bill-first', values: { prior_trust: 3, satisfaction: 7 } });
    expect(none.statusCode).toBe(409);
  });

  it('refuses bad weights with 422 naming weight, stores nothing, counts them by reason', async () => {
    await create('required', { maxWeight: 100 });
    const cases: [unknown, string, string][] = [
      [0, '0 is not a valid weight: a weight must be greater than 0 and at most 100', 'out_of_range'],
      [-1, '-1 is not a valid weight: a weight must be greater than 0 and at most 100', 'out_of_range'],
      [101, '101 is not a valid weight: a weight must be greater than 0 and at most 100', 'out_of_range'],
      ['2', 'must be a number, not a string', 'not_a_number'],
      [undefined, 'is required: this experiment needs a survey weight on every response', 'missing'],
    ];
    for (const [weight, message, _reason] of cases) {
      const res = await post({ condition: 'bill-first', ...(weight === undefined ? {} : { weight }), values: { prior_trust: 3, satisfaction: 7 } });
      expect(res.statusCode, JSON.stringify(weight)).toBe(422);
      expect(res.headers['content-type']).toContain('application/problem+json');
      const errors = res.json().errors as { path: string; message: string }[];
      expect(errors.map((e) => [e.path, e.message])).toEqual([['weight', message]]);
    }
    expect(await t.sql(`SELECT count(*) AS n FROM responses`)).toEqual([{ n: 0 }]);
    expect(await t.store.responses.getRejectedWeightCounts((await t.store.experiments.getBySlug(ID))!.key)).toEqual([
      { reason: 'missing', count: 1 },
      { reason: 'not_a_number', count: 1 },
      { reason: 'out_of_range', count: 3 },
    ]);
  });

  it('an experiment without weights refuses a weight (not_allowed)', async () => {
    await create('none');
    const res = await post({ condition: 'bill-first', weight: 1, values: { prior_trust: 3, satisfaction: 7 } });
    expect(res.statusCode).toBe(422);
    expect(res.json().errors).toEqual([{ path: 'weight', message: 'is not accepted: this experiment takes no survey weights', value: 1 }]);
    const ok = await post({ condition: 'bill-first', values: { prior_trust: 3, satisfaction: 7 } });
    expect(ok.statusCode).toBe(201);
    expect(ok.json()).not.toHaveProperty('weight');
  });

  it('a form post carries the weight in the field "weight"; a bad one is refused like a bad value', async () => {
    await create('required');
    const form = (weight: string) =>
      t.request({
        method: 'POST',
        url: `/v1/experiments/${ID}/responses`,
        headers: { 'content-type': 'application/x-www-form-urlencoded', accept: 'application/json' },
        payload: `condition=service-first&prior_trust=2&satisfaction=4&weight=${weight}`,
      });
    const good = await form('1.75');
    expect(good.statusCode).toBe(201);
    expect(good.json().weight).toBe(1.75);
    const bad = await form('1e999');
    expect(bad.statusCode).toBe(422);
    expect(bad.json().errors).toEqual([{ path: 'weight', message: '"1e999" is too large to be a finite number', value: '1e999' }]);
  });

  it('a batch: every bad weight listed by index; all or nothing', async () => {
    await create('required');
    const res = await t.request({
      method: 'POST',
      url: `/v1/experiments/${ID}/responses/batch`,
      payload: {
        responses: [
          { condition: 'bill-first', weight: 1, values: { prior_trust: 3, satisfaction: 7 } },
          { condition: 'bill-first', weight: null, values: { prior_trust: 3, satisfaction: 7 } },
          { condition: 'bill-first', weight: 1e7, values: { prior_trust: 3, satisfaction: 7 } },
        ],
      },
    });
    expect(res.statusCode).toBe(422);
    expect((res.json().errors as { path: string }[]).map((e) => e.path)).toEqual(['responses[1].weight', 'responses[2].weight']);
    expect(await t.sql(`SELECT count(*) AS n FROM responses`)).toEqual([{ n: 0 }]);
  });
});

describe('exclusion, erasure and check keep the weight sums', () => {
  it('moves and removes Σw, Σw² with the answer; check agrees with the rows', async () => {
    await create('optional');
    await post({ responseId: 'a', respondent: 'p1', condition: 'bill-first', weight: 1.5, values: { prior_trust: 3, satisfaction: 7 } });
    await post({ responseId: 'b', respondent: 'p2', condition: 'bill-first', weight: 0.5, values: { prior_trust: 3, satisfaction: 7 } });
    await post({ responseId: 'c', respondent: 'p3', condition: 'bill-first', values: { prior_trust: 3, satisfaction: 7 } });
    const ex = await t.request({ method: 'POST', url: `/v1/experiments/${ID}/responses/a/exclusion`, payload: { reason: 'speeder' } });
    expect(ex.statusCode, ex.body).toBe(200);
    expect(await sums()).toEqual([
      { measure: 'satisfaction', condition: 'bill-first', excluded: 0, value: 7, count: 2, weighted: 1, sum: 0.5, sq: 0.25 },
      { measure: 'satisfaction', condition: 'bill-first', excluded: 1, value: 7, count: 1, weighted: 1, sum: 1.5, sq: 2.25 },
    ]);
    expect(await checkProblems()).toEqual([]);
    const erase = await t.request({ method: 'DELETE', url: `/v1/experiments/${ID}/respondents/p2` });
    expect(erase.statusCode, erase.body).toBe(200);
    expect(await sums()).toEqual([
      // the last weighted answer left the row: its sums are exactly 0, not a rounding residue
      { measure: 'satisfaction', condition: 'bill-first', excluded: 0, value: 7, count: 1, weighted: 0, sum: 0, sq: 0 },
      { measure: 'satisfaction', condition: 'bill-first', excluded: 1, value: 7, count: 1, weighted: 1, sum: 1.5, sq: 2.25 },
    ]);
    expect(await checkProblems()).toEqual([]);
  });

  it('check reports weight sums that disagree with the rows', async () => {
    await create('optional');
    await post({ condition: 'bill-first', weight: 2, values: { prior_trust: 3, satisfaction: 7 } });
    const tamper = `UPDATE value_counts SET weight_sum = 3 WHERE weighted_count = 1 AND value = 7`;
    if (TEST_ENGINE === 'postgres') await t.sql(tamper);
    else t.store.db.prepare(tamper).run();
    const problems = await checkProblems();
    expect(problems).toHaveLength(1);
    expect(problems[0]).toMatch(/^value_counts weights for measure \d+, condition \d+, excluded 0, value 7: 1 weighted answers, Σw 3, Σw² 4 kept but 1, 2, 4 stored$/);
  });
});

// An older SQLite file converted by migration 0005 (PostgreSQL's 0005 is applied by the store conformance suite).
describe.skipIf(TEST_ENGINE === 'postgres')('migration 0005 on a database made by the schema before it', () => {
  it('adds the weight column and zero sums; existing data stay consistent', () => {
    const dir = tempDir();
    const db = openDatabase(join(dir, 'old.db'));
    const all = loadMigrations();
    const before = all.filter((m) => m.name < '0005');
    migrate(db, before);
    const now = '2027-01-01T00:00:00.000Z';
    db.prepare(`INSERT INTO experiments (slug, title, alpha, created_at, updated_at) VALUES ('old', 'Old', 0.05, ?, ?)`).run(now, now);
    db.prepare(`INSERT INTO conditions (experiment_id, slug, label, position, response_count) VALUES (1, 'a', 'a', 0, 1), (1, 'b', 'b', 1, 0)`).run();
    db.prepare(`INSERT INTO measures (experiment_id, slug, label, min, max, is_integer, required, position) VALUES (1, 's', 's', 0, 10, 1, 1, 0)`).run();
    db.prepare(`INSERT INTO responses (experiment_id, response_id, condition_id, submitted_at, received_at, content_hash) VALUES (1, 'x', 1, ?, ?, zeroblob(32))`).run(now, now);
    db.prepare(`INSERT INTO response_values (response_id, measure_id, condition_id, value) VALUES (1, 1, 1, 4)`).run();
    db.prepare(`INSERT INTO value_counts (measure_id, condition_id, excluded, value, count) VALUES (1, 1, 0, 4, 1)`).run();
    db.prepare(`UPDATE experiments SET data_version = 1`).run();
    expect(migrate(db, all.filter((m) => m.name < '0006')).applied).toEqual(['0005_weights.sql']);
    expect(db.prepare(`SELECT weight FROM responses`).pluck().all()).toEqual([null]);
    expect(db.prepare(`SELECT count, weighted_count, weight_sum, weight_square_sum FROM value_counts`).raw().all()).toEqual([[1, 0, 0, 0]]);
    expect(db.prepare(`SELECT role FROM measures`).pluck().all()).toEqual(['outcome']);
    expect(checkDatabase(db).problems).toEqual([]);
    db.close();
  });
});

describe('a random sequence of ingests, exclusions, restorations and erasures', () => {
  it('keeps the weight sums equal to the rows (check) and the weighted block equal to stats/ on the remaining answers', async () => {
    const { Rng } = await import('../../helpers/rng.js');
    const { compareWeighted } = await import('../../../stats/weighted-comparison.js');
    const { weightedFromPairs } = await import('../../../stats/weighted-sample.js');
    await create('optional', { maxWeight: 1e4 });
    const rng = new Rng(20271203);
    const live = new Map<string, { respondent: string; condition: string; weight: number | null; satisfaction: number; excluded: boolean }>();
    let next = 0;
    for (let step = 0; step < 120; step++) {
      const r = rng.uniform();
      if (r < 0.6 || live.size < 5) {
        const id = `r${next++}`;
        const respondent = `p${Math.floor(rng.uniform() * 40)}`;
        const condition = rng.uniform() < 0.5 ? 'bill-first' : 'service-first';
        // weights spread over five orders of magnitude, so rounding in the sums would show
        const weight = rng.uniform() < 0.15 ? null : Math.exp(rng.uniform() * 11.5 - 2.3);
        const satisfaction = Math.floor(rng.uniform() * 11);
        const res = await post({ responseId: id, respondent, condition, ...(weight === null ? {} : { weight }), values: { prior_trust: 4, satisfaction } });
        expect(res.statusCode, res.body).toBe(201);
        live.set(id, { respondent, condition, weight, satisfaction, excluded: false });
      } else if (r < 0.85) {
        const ids = [...live.keys()];
        const id = ids[Math.floor(rng.uniform() * ids.length)];
        const row = live.get(id)!;
        const res = row.excluded
          ? await t.request({ method: 'DELETE', url: `/v1/experiments/${ID}/responses/${id}/exclusion` })
          : await t.request({ method: 'POST', url: `/v1/experiments/${ID}/responses/${id}/exclusion`, payload: { reason: 'random check' } });
        expect(res.statusCode, res.body).toBe(200);
        row.excluded = !row.excluded;
      } else {
        const ids = [...live.keys()];
        const respondent = live.get(ids[Math.floor(rng.uniform() * ids.length)])!.respondent;
        const res = await t.request({ method: 'DELETE', url: `/v1/experiments/${ID}/respondents/${respondent}` });
        expect(res.statusCode, res.body).toBe(200);
        for (const [id, row] of [...live]) if (row.respondent === respondent) live.delete(id);
      }
    }
    expect(await checkProblems()).toEqual([]);
    const res = await t.request({ method: 'GET', url: `/v1/experiments/${ID}/comparisons/satisfaction` });
    expect(res.statusCode, res.body).toBe(200);
    const w = res.json().weighted;
    const kept = [...live.values()].filter((x) => !x.excluded && x.weight !== null);
    const group = (c: string) => {
      const rows = kept.filter((x) => x.condition === c);
      return weightedFromPairs(rows.map((x) => x.satisfaction), rows.map((x) => x.weight as number));
    };
    const direct = compareWeighted(group('bill-first'), group('service-first'));
    // The stored sums were added and subtracted in another order than the raw pairs: relative 1e-9.
    for (const k of ['meanDifference', 'se', 't'] as const) {
      const expected = direct.tTest[k] as number;
      const rel = Math.abs(w.tTest[k] - expected) / Math.abs(expected);
      expect(rel, `${k}: expected ${expected}, actual ${w.tTest[k]}, tolerance 1e-9 (relative)`).toBeLessThanOrEqual(1e-9);
    }
    expect(w.groups.a.n).toBe(direct.groups.a.n);
    expect(w.groups.b.n).toBe(direct.groups.b.n);
    const withoutWeight = [...live.values()].filter((x) => !x.excluded && x.weight === null && x.condition === 'bill-first').length;
    expect(w.groups.a.withoutWeight).toBe(withoutWeight);
  });
});
