/**
 * Conformance scenarios for what the Store port gained after the first engine-neutral suite (tests/store/conformance.ts):
 * survey weights (ingest, the weighted snapshot as sums and as pairs, the adjustment rows, refused weights, the
 * weighted columns through exclusion, restoration, erasure and clean-up), measure roles, form keys, bulk clean-up,
 * and the optional reads of the researcher's page (answers received since, answers behind a flag). The same
 * scenarios and expected answers run against SQLite and PostgreSQL; every expectation is computed here by brute
 * force from the answers the test sent (invented data of the water-utility survey), never read back from the store.
 */
import { createHash } from 'node:crypto';
import { afterAll, describe, expect, it } from 'vitest';
import type { ExperimentRecord, Store, ValidResponse } from '../../server/store/types.js';
import { contentHash } from '../../server/services/ingest/validate.js';
import { Rng } from '../helpers/rng.js';
import type { EngineDatabase, EngineHarness } from './conformance.js';

const T0 = Date.parse('2027-03-01T12:00:00.000Z');
const at = (minutes: number) => new Date(T0 + minutes * 60_000).toISOString();

interface WAnswer {
  id: string;
  condition: 'bill-first' | 'service-first';
  respondent: string;
  satisfaction: number;
  fairPrice: number | null;
  /** Pre-treatment covariate (household size), or null when not answered. */
  household: number | null;
  weight: number | null;
}

let slugCounter = 0;

async function createWeighted(store: Store): Promise<ExperimentRecord> {
  const slug = `wwater-${++slugCounter}`;
  const r = await store.experiments.create({
    id: slug,
    title: 'Invented water-utility survey with survey weights',
    conditions: [
      { id: 'bill-first', label: 'Bill first' },
      { id: 'service-first', label: 'Service first' },
    ],
    measures: [
      { id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true },
      { id: 'fair_price', label: 'Fair monthly price', min: 0, max: 500, integer: false, required: false },
      { id: 'household', label: 'People in the household', min: 1, max: 12, integer: true, required: false, role: 'covariate' },
    ],
    plannedPerCondition: 100,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (r.kind !== 'created') throw new Error(`could not create ${slug}`);
  return r.experiment;
}

function key(e: ExperimentRecord, id: string): number {
  const x = e.conditions.find((c) => c.id === id) ?? e.measures.find((m) => m.id === id);
  if (!x) throw new Error(`no ${id}`);
  return x.key;
}

function toItem(e: ExperimentRecord, a: WAnswer): ValidResponse {
  const values = new Map<number, number>([[key(e, 'satisfaction'), a.satisfaction]]);
  const canonical: [string, number][] = [['satisfaction', a.satisfaction]];
  if (a.fairPrice !== null) {
    values.set(key(e, 'fair_price'), a.fairPrice);
    canonical.push(['fair_price', a.fairPrice]);
  }
  if (a.household !== null) {
    values.set(key(e, 'household'), a.household);
    canonical.push(['household', a.household]);
  }
  return {
    responseId: a.id,
    generated: false,
    conditionKey: key(e, a.condition),
    respondent: a.respondent,
    submittedAt: at(0),
    values,
    weight: a.weight,
    contentHash: contentHash(a.condition, a.respondent, canonical, a.weight),
  };
}

function weightedAnswers(n: number, seed: number, prefix: string): WAnswer[] {
  const rng = new Rng(seed);
  return Array.from({ length: n }, (_, i) => {
    const u = rng.uniform();
    // Mostly moderate weights, some missing, a few very large ones (a subtraction would leave a residue).
    const weight = u < 0.15 ? null : u < 0.2 ? 1e4 * (1 + rng.uniform()) : Math.round((0.2 + rng.uniform() * 3) * 1000) / 1000;
    return {
      id: `${prefix}-${i}`,
      condition: rng.uniform() < 0.5 ? 'bill-first' : 'service-first',
      respondent: `wresp-${prefix}-${i % 7}`,
      satisfaction: Math.floor(rng.uniform() * 11),
      fairPrice: rng.uniform() < 0.8 ? Math.round(rng.uniform() * 40000) / 100 : null,
      household: rng.uniform() < 0.9 ? 1 + Math.floor(rng.uniform() * 6) : null,
      weight,
    };
  });
}

/** Relative closeness for sums accumulated in another order (n ≤ 200 terms: 200 · EPSILON is ample). */
function expectClose(actual: number, expected: number, what: string): void {
  const tol = 200 * Number.EPSILON * Math.max(1, Math.abs(expected));
  expect(Math.abs(actual - expected) <= tol, `${what}: expected ${expected}, actual ${actual}, tolerance ${tol}`).toBe(true);
}

/** Brute-force weighted sums of satisfaction per value for one condition over the answers still kept. */
function bruteSums(list: WAnswer[], condition: string): { counts: number[]; s1: number[]; s2: number[]; unweighted: number } {
  const counts = new Array<number>(11).fill(0);
  const s1 = new Array<number>(11).fill(0);
  const s2 = new Array<number>(11).fill(0);
  let unweighted = 0;
  for (const a of list) {
    if (a.condition !== condition) continue;
    if (a.weight === null) {
      unweighted++;
      continue;
    }
    counts[a.satisfaction]++;
    s1[a.satisfaction] += a.weight;
    s2[a.satisfaction] += a.weight * a.weight;
  }
  return { counts, s1, s2, unweighted };
}

async function expectSnapshotMatches(store: Store, e: ExperimentRecord, kept: WAnswer[], all: WAnswer[]): Promise<void> {
  const conds = [key(e, 'bill-first'), key(e, 'service-first')];
  for (const [includeExcluded, list] of [
    [false, kept],
    [true, all],
  ] as const) {
    const snap = await store.responses.getWeightedSnapshot(key(e, 'satisfaction'), conds, includeExcluded, 'sums');
    expect(snap.dataVersion).toBe(await store.experiments.getDataVersion(e.key));
    snap.groups.forEach((g, i) => {
      if (g.kind !== 'sums') throw new Error('expected sums');
      const b = bruteSums(list, i === 0 ? 'bill-first' : 'service-first');
      expect([...g.counts]).toEqual(b.counts);
      expect(g.unweighted).toBe(b.unweighted);
      for (let k = 0; k < 11; k++) {
        expectClose(g.weightSums[k], b.s1[k], `Σw value ${k} group ${i} includeExcluded ${includeExcluded}`);
        expectClose(g.weightSquareSums[k], b.s2[k], `Σw² value ${k} group ${i} includeExcluded ${includeExcluded}`);
      }
    });
    const pairs = await store.responses.getWeightedSnapshot(key(e, 'fair_price'), conds, includeExcluded, 'pairs');
    pairs.groups.forEach((g, i) => {
      if (g.kind !== 'pairs') throw new Error('expected pairs');
      const mine = list.filter((a) => a.condition === (i === 0 ? 'bill-first' : 'service-first') && a.fairPrice !== null);
      const expected = mine.filter((a) => a.weight !== null).map((a) => [a.fairPrice, a.weight]);
      const got = [...g.values].map((v, j) => [v, g.weights[j]]);
      const order = (x: (number | null)[], y: (number | null)[]) => (x[0]! - y[0]!) || (x[1]! - y[1]!);
      expect(got.sort(order)).toEqual(expected.sort(order));
      expect(g.unweighted).toBe(mine.filter((a) => a.weight === null).length);
    });
  }
}

export function defineWeightsConformance(harness: EngineHarness): void {
  describe(`Store conformance (weights, roles, form keys, clean-up): ${harness.name}`, () => {
    let db: EngineDatabase;
    let store: Store;

    afterAll(async () => {
      if (!db) return;
      await store.close();
      await db.drop();
    });

    const setup = async () => {
      if (!db) {
        db = await harness.newDatabase();
        store = await db.open();
      }
    };

    it('measure roles are stored at creation and read back (default outcome)', async () => {
      await setup();
      const e = await createWeighted(store);
      expect(e.measures.map((m) => [m.id, m.role])).toEqual([
        ['satisfaction', 'outcome'],
        ['fair_price', 'outcome'],
        ['household', 'covariate'],
      ]);
      expect((await store.experiments.getBySlug(e.id))?.measures.map((m) => m.role)).toEqual(['outcome', 'outcome', 'covariate']);
    });

    it('weights: ingest keeps weighted counts, Σw and Σw²; exclusion, restoration and erasure recompute them; check agrees', async () => {
      await setup();
      const e = await createWeighted(store);
      const all = weightedAnswers(160, 77, 'w');
      for (let i = 0; i < all.length; i += 40) expect((await store.responses.ingest(e.key, all.slice(i, i + 40).map((a) => toItem(e, a)), at(1), null)).kind).toBe('stored');
      // One single response too (the group-commit path).
      const single: WAnswer = { id: 'w-single', condition: 'bill-first', respondent: 'wresp-single', satisfaction: 4, fairPrice: 12.5, household: 2, weight: 2.5 };
      expect((await store.responses.ingest(e.key, [toItem(e, single)], at(1), null)).kind).toBe('stored');
      all.push(single);
      await expectSnapshotMatches(store, e, all, all);
      const stored = await store.responses.getStored(e.key, 'w-single');
      expect(stored?.weight).toBe(2.5);
      const none = all.find((a) => a.weight === null)!;
      expect((await store.responses.getStored(e.key, none.id))?.weight).toBeNull();

      // Exclude the heavy ones (weights around 1e4), restore one, erase one respondent.
      const heavy = all.filter((a) => a.weight !== null && a.weight > 1000);
      expect(heavy.length).toBeGreaterThan(2);
      for (const a of heavy) expect((await store.responses.setExcluded(e.key, a.id, { excluded: true, reason: 'too heavy' }, null, at(2))).kind).toBe('changed');
      expect((await store.responses.setExcluded(e.key, heavy[0].id, { excluded: false, reason: null }, null, at(3))).kind).toBe('changed');
      const excluded = new Set(heavy.slice(1).map((a) => a.id));
      await expectSnapshotMatches(store, e, all.filter((a) => !excluded.has(a.id)), all);
      const gone = 'wresp-w-3';
      const erased = await store.responses.eraseRespondent(e.key, gone, null, at(4));
      expect(erased.kind === 'erased' && erased.erased).toBe(all.filter((a) => a.respondent === gone).length);
      const left = all.filter((a) => a.respondent !== gone);
      await expectSnapshotMatches(store, e, left.filter((a) => !excluded.has(a.id)), left);
      expect(await db.check(store)).toEqual({ ok: true, problems: [] });

      // The export carries the weight.
      const byId = new Map(left.map((a) => [a.id, a.weight]));
      let exported = 0;
      for await (const page of store.bulk.exportResponsePages(e.key, [key(e, 'satisfaction')], 50)) {
        for (const row of page) {
          expect(row.weight, row.responseId).toBe(byId.get(row.responseId));
          exported++;
        }
      }
      expect(exported).toBe(left.length);
    });

    it('adjustment rows: the outcome of two conditions in response order with covariates aligned (null when not answered)', async () => {
      await setup();
      const e = await createWeighted(store);
      const all = weightedAnswers(60, 5, 'adj');
      await store.responses.ingest(e.key, all.map((a) => toItem(e, a)), at(1), null);
      await store.responses.setExcluded(e.key, all[0].id, { excluded: true, reason: 'test' }, null, at(2));
      for (const includeExcluded of [false, true]) {
        const rows = await store.responses.getAdjustmentRows(key(e, 'satisfaction'), [key(e, 'household'), key(e, 'fair_price')], [key(e, 'service-first'), key(e, 'bill-first')], includeExcluded);
        const list = includeExcluded ? all : all.slice(1);
        expect([...rows.outcome]).toEqual(list.map((a) => a.satisfaction));
        expect([...rows.inA]).toEqual(list.map((a) => (a.condition === 'service-first' ? 1 : 0)));
        expect(rows.covariates).toEqual([list.map((a) => a.household), list.map((a) => a.fairPrice)]);
        expect(rows.dataVersion).toBe(2);
      }
      await expect(store.responses.getWeightedSnapshot(key(e, 'fair_price'), [key(e, 'bill-first')], false, 'sums')).rejects.toThrow(RangeError);
      await expect(store.responses.getWeightedSnapshot(999_999, [key(e, 'bill-first')], false, 'pairs')).rejects.toThrow(RangeError);
    });

    it('refused weights are counted per experiment and reason', async () => {
      await setup();
      const e = await createWeighted(store);
      expect(await store.responses.getRejectedWeightCounts(e.key)).toEqual([]);
      await store.responses.recordRejectedWeights(e.key, [
        { reason: 'not_allowed', count: 2 },
        { reason: 'out_of_range', count: 1 },
      ]);
      await store.responses.recordRejectedWeights(e.key, [
        { reason: 'out_of_range', count: 3 },
        { reason: 'missing', count: 0 },
      ]);
      expect(await store.responses.getRejectedWeightCounts(e.key)).toEqual([
        { reason: 'not_allowed', count: 2 },
        { reason: 'out_of_range', count: 4 },
      ]);
    });

    it('bulk clean-up: dry run, exclusion of a time window (one audit row each), erasure by key (one audit row), dataVersion once', async () => {
      await setup();
      const e = await createWeighted(store);
      const hash = createHash('sha256').update(`cleanup-key-${e.id}`).digest();
      const k = await store.apiKeys.create({ hash, scope: 'ingest', experimentKey: e.key, label: 'panel', origin: 'cli', createdAt: at(0) });
      const all = weightedAnswers(30, 9, 'cu');
      // Minute 10: ten responses without a key; minute 20: ten through the key; minute 30: ten without a key.
      await store.responses.ingest(e.key, all.slice(0, 10).map((a) => toItem(e, a)), at(10), null);
      await store.responses.ingest(e.key, all.slice(10, 20).map((a) => toItem(e, a)), at(20), k.id);
      await store.responses.ingest(e.key, all.slice(20).map((a) => toItem(e, a)), at(30), null);
      await store.responses.setExcluded(e.key, all[0].id, { excluded: true, reason: 'earlier' }, null, at(31));
      const v0 = (await store.experiments.getDataVersion(e.key))!;
      const window = { receivedFrom: at(10), receivedTo: at(20), apiKeyId: null };

      const dry = await store.responses.cleanUp(e.key, { action: 'exclude', reason: 'bot wave', filter: window, dryRun: true }, null, at(40));
      expect(dry).toEqual({ kind: 'done', matched: 20, changed: 19, dataVersion: v0 });
      expect(await store.experiments.getDataVersion(e.key)).toBe(v0);

      const auditBefore = (await store.audit.list(e.key)).length;
      const done = await store.responses.cleanUp(e.key, { action: 'exclude', reason: 'bot wave', filter: window, dryRun: false }, null, at(41));
      expect(done).toEqual({ kind: 'done', matched: 20, changed: 19, dataVersion: v0 + 1 });
      const audit = await store.audit.list(e.key);
      expect(audit.length - auditBefore).toBe(19);
      expect(audit.slice(0, 19).every((x) => x.action === 'exclude' && x.reason === 'bot wave' && x.count === 1 && x.dataVersion === v0 + 1)).toBe(true);
      expect(new Set(audit.slice(0, 19).map((x) => x.responseId))).toEqual(new Set(all.slice(1, 20).map((a) => a.id)));
      const kept = all.slice(20);
      await expectSnapshotMatches(store, e, kept, all);
      const counters = (await store.experiments.getBySlug(e.id))!.conditions;
      expect(counters.map((c) => c.excluded)).toEqual(['bill-first', 'service-first'].map((c) => all.slice(0, 20).filter((a) => a.condition === c).length));
      // Again: nothing left to exclude, nothing changes.
      expect(await store.responses.cleanUp(e.key, { action: 'exclude', reason: 'again', filter: window, dryRun: false }, null, at(42))).toEqual({
        kind: 'done', matched: 20, changed: 0, dataVersion: v0 + 1,
      });

      const byKey = { receivedFrom: null, receivedTo: null, apiKeyId: k.id };
      const erased = await store.responses.cleanUp(e.key, { action: 'erase', reason: 'key leaked', filter: byKey, dryRun: false }, null, at(43));
      expect(erased).toEqual({ kind: 'done', matched: 10, changed: 10, dataVersion: v0 + 2 });
      const last = (await store.audit.list(e.key))[0];
      expect(last).toMatchObject({ action: 'erase', responseId: null, reason: 'key leaked', count: 10, dataVersion: v0 + 2 });
      const left = [...all.slice(0, 10), ...all.slice(20)];
      await expectSnapshotMatches(store, e, kept, left);
      for (const a of all.slice(10, 20)) expect(await store.responses.getStored(e.key, a.id)).toBeNull();
      expect(await db.check(store)).toEqual({ ok: true, problems: [] });
      expect(await store.responses.cleanUp(999_999, { action: 'erase', reason: 'x', filter: byKey, dryRun: false }, null, at(44))).toEqual({ kind: 'not-found' });
    });

    it('form keys: created with scope form, found and listed as form', async () => {
      await setup();
      const e = await createWeighted(store);
      const hash = createHash('sha256').update(`form-key-${e.id}`).digest();
      const k = await store.apiKeys.create({ hash, scope: 'form', experimentKey: e.key, label: 'public page', origin: 'cli', createdAt: at(0) });
      expect(k).toMatchObject({ scope: 'form', experiment: e.id, experimentKey: e.key, label: 'public page' });
      expect((await store.apiKeys.findByHash(hash))?.scope).toBe('form');
      expect((await store.apiKeys.list()).find((x) => x.id === k.id)?.scope).toBe('form');
      const ingest = await store.apiKeys.create({ hash: createHash('sha256').update(`ingest-key-${e.id}`).digest(), scope: 'ingest', experimentKey: e.key, label: '', origin: 'cli', createdAt: at(0) });
      expect(ingest.scope).toBe('ingest');
    });

    it("the researcher's reads: answers received since each time, the answers behind flagged values (oldest first, limited)", async () => {
      await setup();
      const e = await createWeighted(store);
      const all = weightedAnswers(24, 13, 'rr');
      for (let i = 0; i < all.length; i += 6) await store.responses.ingest(e.key, all.slice(i, i + 6).map((a) => toItem(e, a)), at(i), null);
      expect(await store.responses.countReceivedSince!(e.key, [at(0), at(6), at(13), at(100)])).toEqual([24, 18, 6, 0]);
      await store.responses.setExcluded(e.key, all[1].id, { excluded: true, reason: 'x' }, null, at(50));
      const cond = all[1].condition;
      const values = [all[1].satisfaction, (all[1].satisfaction + 5) % 11];
      for (const includeExcluded of [false, true]) {
        const got = await store.responses.getAnswersWithValues!(key(e, 'satisfaction'), key(e, cond), values, includeExcluded, 100);
        const expected = values.flatMap((v) =>
          [0, ...(includeExcluded ? [1] : [])].flatMap((x) =>
            all
              .map((a, i) => ({ a, i }))
              .filter(({ a }) => a.condition === cond && a.satisfaction === v && (a.id === all[1].id ? 1 : 0) === x)
              .map(({ a, i }) => ({ responseId: a.id, value: v, receivedAt: at(Math.floor(i / 6) * 6), excluded: x === 1 })),
          ),
        );
        expect(got).toEqual(expected);
        expect(await store.responses.getAnswersWithValues!(key(e, 'satisfaction'), key(e, cond), values, includeExcluded, 1)).toEqual(expected.slice(0, 1));
      }
    });
  });
}
