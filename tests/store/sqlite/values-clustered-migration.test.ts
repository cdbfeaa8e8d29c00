/**
 * Migration 0008 (response_values clustered on (measure, condition, excluded, value, response), packed copies of each
 * response's values on its row) converts a database made by the earlier migrations in place: every value row, count,
 * counter and sorted run is the same after, `check` passes, and exclusion, restoration, erasure, idempotent retries
 * and new ingest work on the converted file and keep it checkable.
 *
 * The old database is filled with plain SQL in the old layout (the repositories of this version write the new one).
 */
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { checkDatabase } from '../../../server/store/sqlite/check.js';
import { loadMigrations, migrate } from '../../../server/store/sqlite/migrate.js';
import { openDatabase, type SqliteDatabase } from '../../../server/store/sqlite/open.js';
import { openSqliteStore, type SqliteStore } from '../../../server/store/sqlite/store.js';
import type { ValidResponse } from '../../../server/store/types.js';
import { tempDir } from '../../helpers/app.js';

const cleanups: (() => unknown)[] = [];
afterEach(async () => {
  while (cleanups.length) await cleanups.pop()!();
});

const BEFORE_0008 = (name: string) => name < '0008';

/** A small deterministic generator (the same data every run). */
function lcg(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

interface OldResponse {
  id: number;
  responseId: string;
  condition: 'a' | 'b';
  respondent: string | null;
  weight: number | null;
  excluded: 0 | 1;
  values: [string, number][];
}

const MEASURES = [
  { slug: 'sat', min: 0, max: 10, integer: 1, required: 1 },
  { slug: 'trust', min: 1, max: 7, integer: 1, required: 0 },
  { slug: 'price', min: 0, max: 200, integer: 0, required: 0 },
];

/** Fill a database migrated up to 0007 the way the earlier repositories did (old layout, foreign keys on). */
function fillOldDatabase(db: SqliteDatabase, n: number): { responses: OldResponse[]; measureKeys: Map<string, number>; conditionKeys: Map<string, number> } {
  const now = '2027-01-01T00:00:00.000Z';
  const rand = lcg(8);
  const responses: OldResponse[] = [];
  db.transaction(() => {
    db.prepare(
      `INSERT INTO experiments (id, slug, title, alpha, options, data_version, created_at, updated_at)
       VALUES (1, 'old-study', 'Old study', 0.05, '{"weights":"optional"}', 0, ?, ?)`,
    ).run(now, now);
    db.prepare(`INSERT INTO conditions (id, experiment_id, slug, label, position) VALUES (1, 1, 'a', 'A', 0), (2, 1, 'b', 'B', 1)`).run();
    MEASURES.forEach((m, i) =>
      db
        .prepare(`INSERT INTO measures (id, experiment_id, slug, label, min, max, is_integer, required, position) VALUES (?, 1, ?, ?, ?, ?, ?, ?, ?)`)
        .run(i + 1, m.slug, m.slug, m.min, m.max, m.integer, m.required, i),
    );
    const insertResponse = db.prepare(
      `INSERT INTO responses (id, experiment_id, response_id, condition_id, respondent, submitted_at, received_at, excluded, excluded_reason, content_hash, weight)
       VALUES (?, 1, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    const insertValue = db.prepare(`INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES (?, ?, ?, ?, ?)`);
    for (let i = 1; i <= n; i++) {
      const condition = rand() < 0.5 ? 'a' : 'b';
      const values: [string, number][] = [['sat', Math.floor(rand() * 11)]];
      if (rand() < 0.8) values.push(['trust', 1 + Math.floor(rand() * 7)]);
      // Continuous values with every kind of double: short decimals, long fractions, ties.
      if (rand() < 0.9) values.push(['price', i % 7 === 0 ? 50 : rand() < 0.5 ? Math.round(rand() * 2000) / 10 : rand() * 200]);
      const weight = rand() < 0.3 ? 0.25 + rand() * 3 : null;
      const respondent = i % 5 === 0 ? `p-${i % 40}` : null;
      const excluded = rand() < 0.1 ? 1 : 0;
      const r: OldResponse = { id: i, responseId: `old-${i}`, condition, respondent, weight, excluded, values };
      responses.push(r);
      insertResponse.run(i, r.responseId, condition === 'a' ? 1 : 2, respondent, now, now, excluded, excluded ? 'speeder' : null, Buffer.from(contentHash(condition, respondent, values, weight)), weight);
      for (const [slug, value] of values) insertValue.run(i, MEASURES.findIndex((m) => m.slug === slug) + 1, condition === 'a' ? 1 : 2, excluded, value);
    }
    db.prepare(
      `INSERT INTO value_counts (measure_id, condition_id, excluded, value, count, weighted_count, weight_sum, weight_square_sum)
       SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*), count(r.weight), coalesce(sum(r.weight), 0), coalesce(sum(r.weight * r.weight), 0)
       FROM response_values v JOIN responses r ON r.id = v.response_id JOIN measures m ON m.id = v.measure_id
       WHERE m.is_integer = 1 GROUP BY v.measure_id, v.condition_id, v.excluded, v.value`,
    ).run();
    db.prepare(
      `UPDATE conditions SET response_count = (SELECT count(*) FROM responses r WHERE r.condition_id = conditions.id),
         excluded_count = (SELECT count(*) FROM responses r WHERE r.condition_id = conditions.id AND r.excluded = 1)`,
    ).run();
    db.prepare(`UPDATE experiments SET data_version = 7 WHERE id = 1`).run();
  })();
  return { responses, measureKeys: new Map(MEASURES.map((m, i) => [m.slug, i + 1])), conditionKeys: new Map([['a', 1], ['b', 2]]) };
}

/** Everything a comparison or a count reads, straight from the tables. */
function readState(db: SqliteDatabase) {
  const runs: Record<string, number[]> = {};
  for (let m = 1; m <= 3; m++) {
    for (const c of [1, 2]) {
      for (const e of [0, 1]) {
        runs[`${m}/${c}/${e}`] = db
          .prepare(`SELECT value FROM response_values WHERE measure_id = ? AND condition_id = ? AND excluded = ? ORDER BY value`)
          .pluck()
          .all(m, c, e) as number[];
      }
    }
  }
  return {
    runs,
    values: db.prepare(`SELECT response_id, measure_id, condition_id, excluded, value FROM response_values ORDER BY response_id, measure_id`).raw().all(),
    valueCounts: db.prepare(`SELECT * FROM value_counts ORDER BY measure_id, condition_id, excluded, value`).raw().all(),
    conditions: db.prepare(`SELECT id, response_count, excluded_count FROM conditions ORDER BY id`).raw().all(),
    responses: db.prepare(`SELECT id, response_id, condition_id, respondent, excluded, excluded_reason, content_hash, weight FROM responses ORDER BY id`).raw().all(),
    dataVersion: db.prepare(`SELECT data_version FROM experiments WHERE id = 1`).pluck().get(),
  };
}

function item(r: { responseId: string; condition: 'a' | 'b'; respondent: string | null; weight: number | null; values: [string, number][] }, keys: Map<string, number>, conditionKeys: Map<string, number>): ValidResponse {
  return {
    responseId: r.responseId,
    generated: false,
    conditionKey: conditionKeys.get(r.condition)!,
    respondent: r.respondent,
    submittedAt: '2027-02-01T00:00:00.000Z',
    values: new Map(r.values.map(([slug, v]) => [keys.get(slug)!, v])),
    weight: r.weight,
    contentHash: contentHash(r.condition, r.respondent, r.values, r.weight),
  };
}

function expectCheckOk(store: SqliteStore): void {
  const report = checkDatabase(store.db);
  expect(report.problems).toEqual([]);
  expect(report.ok).toBe(true);
}

describe('migration 0008_values_clustered', () => {
  it('converts a database made by the earlier migrations: rows, counts, runs and stored responses unchanged; check passes', async () => {
    const path = join(tempDir('splitballot-0008-'), 'old.db');
    const old = openDatabase(path);
    const earlier = loadMigrations().filter((m) => BEFORE_0008(m.name));
    expect(earlier.map((m) => m.name)).toContain('0006_form_keys.sql');
    migrate(old, earlier);
    expect(old.prepare(`SELECT count(*) FROM sqlite_master WHERE name = 'response_values_scan'`).pluck().get()).toBe(1);
    const { responses, measureKeys, conditionKeys } = fillOldDatabase(old, 1500);
    const before = readState(old);
    const epochBefore = old.prepare(`SELECT epoch FROM values_epoch`).pluck().get() as number;
    old.close();

    const store = openSqliteStore(path);
    cleanups.push(() => store.close());
    expect(store.migration.applied).toContain('0008_values_clustered.sql');
    const after = readState(store.db);
    expect(after).toEqual(before);
    // The new layout: one clustered table, no second index, the epoch trigger again on the new table.
    const schema = store.db.prepare(`SELECT name, type, tbl_name FROM sqlite_master WHERE tbl_name = 'response_values' ORDER BY name`).raw().all();
    expect(schema).toEqual([
      ['response_values', 'table', 'response_values'],
      ['values_epoch_on_value_change', 'trigger', 'response_values'],
    ]);
    expect(store.db.prepare(`SELECT sql FROM sqlite_master WHERE name = 'response_values'`).pluck().get()).toMatch(/PRIMARY KEY \(measure_id, condition_id, excluded, value, response_id\)\s*\) STRICT, WITHOUT ROWID/);
    expect(store.db.prepare(`EXPLAIN QUERY PLAN SELECT value FROM response_values WHERE measure_id = 3 AND condition_id = 1 AND excluded = 0 ORDER BY value`).raw().all().map((r) => (r as unknown[])[3]))
      .toEqual(['SEARCH response_values USING PRIMARY KEY (measure_id=? AND condition_id=? AND excluded=?)']);
    expectCheckOk(store);

    // The reads comparisons use agree with the old rows.
    for (let m = 1; m <= 3; m++) {
      for (const c of [1, 2]) {
        const kept = before.runs[`${m}/${c}/0`];
        const all = [...kept, ...before.runs[`${m}/${c}/1`]].sort((x, y) => x - y);
        expect([...(await store.responses.getSortedValues(m, c, false))]).toEqual(kept);
        expect([...(await store.responses.getSortedValues(m, c, true))]).toEqual(all);
        if (m !== 3) {
          const dense = [...(await store.responses.getCounts(m, c, true))];
          const min = MEASURES[m - 1].min;
          const expected = new Array<number>(MEASURES[m - 1].max - min + 1).fill(0);
          for (const v of all) expected[v - min]++;
          expect(dense).toEqual(expected);
        }
      }
    }
    // Stored responses read back through the packed copies, with every double exact.
    for (const r of responses.filter((x) => x.id % 37 === 1)) {
      const stored = await store.responses.getStored(1, r.responseId);
      expect(stored?.values).toEqual(Object.fromEntries(r.values));
    }
    // The values epoch is not moved by the conversion itself (a reader's cache holds the same values).
    expect(store.db.prepare(`SELECT epoch FROM values_epoch`).pluck().get()).toBe(epochBefore);

    // Retrying an old response is recognised (same content hash); a changed one is a conflict.
    const retried = responses.slice(0, 20);
    const retry = await store.responses.ingest(1, retried.map((r) => item(r, measureKeys, conditionKeys)), '2027-02-01T00:00:00.000Z', null);
    expect(retry).toMatchObject({ kind: 'stored', created: 0, repeated: 20, dataVersion: 7 });
    const changed = { ...responses[3], values: [['sat', (responses[3].values[0][1] + 1) % 11] as [string, number]] };
    expect(await store.responses.ingest(1, [item(changed, measureKeys, conditionKeys)], '2027-02-01T00:00:00.000Z', null)).toMatchObject({ kind: 'conflict' });

    // Exclusion, restoration, clean-up, erasure and new ingest on the converted file keep check passing.
    const target = responses.find((r) => r.excluded === 0 && r.weight !== null && r.values.length === 3)!;
    expect(await store.responses.setExcluded(1, target.responseId, { excluded: true, reason: 'duplicate' }, null, '2027-02-02T00:00:00.000Z')).toMatchObject({ kind: 'changed', dataVersion: 8 });
    expectCheckOk(store);
    expect(await store.responses.setExcluded(1, target.responseId, { excluded: false, reason: null }, null, '2027-02-02T00:00:01.000Z')).toMatchObject({ kind: 'changed', dataVersion: 9 });
    expectCheckOk(store);
    expect(readState(store.db).runs).toEqual(before.runs);
    const erased = responses.filter((r) => r.respondent === 'p-5');
    expect(erased.length).toBeGreaterThan(1);
    expect(await store.responses.eraseRespondent(1, 'p-5', null, '2027-02-03T00:00:00.000Z')).toMatchObject({ kind: 'erased', erased: erased.length });
    expectCheckOk(store);
    expect(store.db.prepare(`SELECT count(*) FROM response_values WHERE response_id IN (${erased.map((r) => r.id).join(', ')})`).pluck().get()).toBe(0);
    const fresh = Array.from({ length: 300 }, (_, i) => ({
      responseId: `new-${i}`,
      condition: (i % 2 ? 'a' : 'b') as 'a' | 'b',
      respondent: null,
      weight: i % 3 === 0 ? 1.5 : null,
      values: [['sat', i % 11], ['price', i / 7]] as [string, number][],
    }));
    expect(await store.responses.ingest(1, fresh.map((r) => item(r, measureKeys, conditionKeys)), '2027-02-04T00:00:00.000Z', null)).toMatchObject({ kind: 'stored', created: 300 });
    expectCheckOk(store);
    const cleaned = await store.responses.cleanUp(1, { action: 'exclude', reason: 'late batch', dryRun: false, filter: { receivedFrom: '2027-02-04T00:00:00.000Z', receivedTo: null, apiKeyId: null } }, null, '2027-02-05T00:00:00.000Z');
    expect(cleaned).toMatchObject({ kind: 'done', changed: 300 });
    expectCheckOk(store);
  });

  it('check reports a packed copy that disagrees with the value rows, and a value row without its response', async () => {
    const path = join(tempDir('splitballot-0008-'), 'bad.db');
    const store = openSqliteStore(path);
    cleanups.push(() => store.close());
    const db = store.db;
    const made = await store.experiments.create({
      id: 'study',
      title: 'Study',
      conditions: [{ id: 'a', label: 'A' }, { id: 'b', label: 'B' }],
      measures: [{ id: 'sat', label: 'Sat', min: 0, max: 10, integer: true, required: true }],
      plannedPerCondition: null,
      alpha: 0.05,
      thankYouUrl: null,
    });
    expect(made.kind).toBe('created');
    const e = (await store.experiments.getBySlug('study'))!;
    const keys = new Map([['sat', e.measures[0].key]]);
    const conditions = new Map(e.conditions.map((c) => [c.id, c.key]));
    await store.responses.ingest(e.key, [0, 1, 2].map((i) => item({ responseId: `r${i}`, condition: 'a', respondent: null, weight: null, values: [['sat', i]] }, keys, conditions)), '2027-01-01T00:00:00.000Z', null);
    expectCheckOk(store);
    db.prepare(`UPDATE responses SET packed_values = ? WHERE response_id = 'r1'`).run(`${e.measures[0].key}=9`);
    const report = checkDatabase(db);
    expect(report.ok).toBe(false);
    expect(report.problems).toEqual([`response r1: its value 9 of measure ${e.measures[0].key} is not stored in response_values`]);
    db.prepare(`UPDATE responses SET packed_values = ? WHERE response_id = 'r1'`).run(`${e.measures[0].key}=1`);
    db.prepare(`INSERT INTO response_values (response_id, measure_id, condition_id, excluded, value) VALUES (999, ?, ?, 0, 5)`).run(e.measures[0].key, e.conditions[0].key);
    expect(checkDatabase(db).problems).toEqual([
      `value_counts for measure ${e.measures[0].key}, condition ${e.conditions[0].key}, excluded 0, value 5: 0 kept but 1 stored values`,
      '1 values belong to no stored response or to no measure',
      'the responses\' packed copies name 3 values but response_values holds 4',
    ]);
  });
});
