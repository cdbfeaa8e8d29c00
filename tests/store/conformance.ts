/**
 * One conformance suite for every Store implementation: the same scenarios, the same expected answers, run
 * against SQLite (tests/store/sqlite-conformance.test.ts) and PostgreSQL (tests/store/postgres/conformance.test.ts).
 * Expected values are computed here by brute force over the answers the test itself sent (invented data of the
 * water-utility survey), never read back from the store under test.
 *
 * An engine supplies an EngineHarness: fresh databases, and the few operations the Store port does not (yet)
 * cover — check, tampering with a count, export pages, bulk import, migrations.
 */
import { afterAll, describe, expect, it } from 'vitest';
import type { AssignmentPlan } from '../../server/store/monitoring-types.js';
import type { ExperimentRecord, IngestOutcome, Store, ValidResponse } from '../../server/store/types.js';
import { contentHash } from '../../server/services/ingest/validate.js';
import { Rng } from '../helpers/rng.js';

export interface EngineMigration {
  name: string;
  sql: string;
  checksum: string;
}

export interface ExportedRow {
  responseId: string;
  excluded: boolean;
  values: (number | null)[];
}

/** One fresh, empty database of the engine; stores opened on it share its data (two "nodes"). */
export interface EngineDatabase {
  open(migrations?: EngineMigration[]): Promise<Store>;
  migrations(): EngineMigration[];
  checksum(sql: string): string;
  check(store: Store): Promise<{ ok: boolean; problems: string[] }>;
  /** Add 1 to one stored per-value count, behind the store's back. */
  tamperCount(store: Store, measureKey: number, conditionKey: number, value: number): Promise<void>;
  exportPages(store: Store, experimentKey: number, measureKeys: number[], pageSize: number): AsyncGenerator<ExportedRow[]>;
  /** Import the chunks in one transaction; commit when `commit`, else roll back. */
  importChunks(store: Store, experimentKey: number, chunks: ValidResponse[][], receivedAt: string, commit: boolean): Promise<IngestOutcome[]>;
  drop(): Promise<void>;
}

export interface EngineHarness {
  name: string;
  newDatabase(): Promise<EngineDatabase>;
}

const NOW = '2027-03-01T12:00:00.000Z';
let slugCounter = 0;

async function createWater(store: Store, options: { slug?: string } = {}): Promise<ExperimentRecord> {
  const slug = options.slug ?? `water-${++slugCounter}`;
  const r = await store.experiments.create({
    id: slug,
    title: 'Invented water-utility survey: bill or service first',
    conditions: [
      { id: 'bill-first', label: 'Bill first' },
      { id: 'service-first', label: 'Service first' },
    ],
    measures: [
      { id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true },
      { id: 'fair_price', label: 'Fair monthly price', min: 0, max: 500, integer: false, required: false },
    ],
    plannedPerCondition: 100,
    alpha: 0.05,
    thankYouUrl: null,
  });
  if (r.kind !== 'created') throw new Error(`could not create ${slug}`);
  return r.experiment;
}

interface Answer {
  id: string;
  condition: 'bill-first' | 'service-first';
  respondent: string | null;
  satisfaction: number;
  fairPrice: number | null;
}

function toItem(e: ExperimentRecord, a: Answer, generated = false): ValidResponse {
  const c = e.conditions.find((x) => x.id === a.condition)!;
  const sat = e.measures.find((m) => m.id === 'satisfaction')!;
  const price = e.measures.find((m) => m.id === 'fair_price')!;
  const values = new Map<number, number>([[sat.key, a.satisfaction]]);
  const canonical: [string, number][] = [['satisfaction', a.satisfaction]];
  if (a.fairPrice !== null) {
    values.set(price.key, a.fairPrice);
    canonical.push(['fair_price', a.fairPrice]);
  }
  return { responseId: a.id, generated, conditionKey: c.key, respondent: a.respondent, submittedAt: NOW, values, weight: null, contentHash: contentHash(a.condition, a.respondent, canonical) };
}

function answers(n: number, seed: number, prefix: string): Answer[] {
  const rng = new Rng(seed);
  return Array.from({ length: n }, (_, i) => ({
    id: `${prefix}-${i}`,
    condition: rng.uniform() < 0.5 ? 'bill-first' : 'service-first',
    respondent: `resp-${prefix}-${i % Math.max(1, Math.floor(n / 2))}`,
    satisfaction: Math.floor(rng.uniform() * 11),
    fairPrice: rng.uniform() < 0.8 ? Math.round(rng.uniform() * 40000) / 100 : null,
  }));
}

function denseCounts(list: Answer[], condition: string): number[] {
  const out = new Array<number>(11).fill(0);
  for (const a of list) if (a.condition === condition) out[a.satisfaction]++;
  return out;
}

function sortedPrices(list: Answer[], condition: string): number[] {
  return list
    .filter((a) => a.condition === condition && a.fairPrice !== null)
    .map((a) => a.fairPrice as number)
    .sort((x, y) => x - y);
}

function keyOf(e: ExperimentRecord, id: string): number {
  const c = e.conditions.find((x) => x.id === id) ?? e.measures.find((x) => x.id === id);
  if (!c) throw new Error(`no ${id}`);
  return c.key;
}

async function ingestAll(store: Store, e: ExperimentRecord, list: Answer[], batchSize = 100): Promise<void> {
  for (let i = 0; i < list.length; i += batchSize) {
    const out = await store.responses.ingest(e.key, list.slice(i, i + batchSize).map((a) => toItem(e, a)), NOW, null);
    expect(out.kind).toBe('stored');
  }
}

/** A block plan over the two conditions with weights 2:1 and a seeded shuffle. */
function planFor(e: ExperimentRecord, seed: number): AssignmentPlan {
  const [a, b] = e.conditions.map((c) => c.key);
  const rng = new Rng(seed);
  return {
    template: [a, a, b].sort((x, y) => x - y),
    shuffle: (slots) => {
      const out = [...slots];
      for (let i = out.length - 1; i > 0; i--) {
        const j = Math.floor(rng.uniform() * (i + 1));
        [out[i], out[j]] = [out[j], out[i]];
      }
      return out;
    },
  };
}

export function defineStoreConformance(harness: EngineHarness): void {
  describe(`Store conformance: ${harness.name}`, () => {
    let db: EngineDatabase;
    let store: Store;

    afterAll(async () => {
      if (!db) return;
      await store.close();
      await db.drop();
    });

    // One database for the file; every test makes its own experiment.
    const setup = async () => {
      if (!db) {
        db = await harness.newDatabase();
        store = await db.open();
      }
    };

    it('creates, reads, lists and updates experiments (duplicate slug, locked and invalid limits, options merge)', async () => {
      await setup();
      const e = await createWater(store, { slug: 'def-water' });
      expect(await store.experiments.create({ ...baseDef('def-water') })).toEqual({ kind: 'duplicate' });
      const read = await store.experiments.getBySlug('def-water');
      expect(read).toEqual(e);
      expect(e.conditions.map((c) => [c.id, c.position, c.responses, c.excluded])).toEqual([
        ['bill-first', 0, 0, 0],
        ['service-first', 1, 0, 0],
      ]);
      expect(e.measures.map((m) => [m.id, m.integer, m.required, m.min, m.max])).toEqual([
        ['satisfaction', true, true, 0, 10],
        ['fair_price', false, false, 0, 500],
      ]);
      expect((await store.experiments.list(e.key)).map((x) => x.id)).toEqual(['def-water']);
      expect((await store.experiments.list()).some((x) => x.id === 'def-water')).toBe(true);
      expect(await store.experiments.getBySlug('no-such')).toBeNull();

      const u1 = await store.experiments.update(e.key, { title: 'New title', options: { flagThresholds: { minPerCondition: 5 }, note: 'x' } }, NOW);
      expect(u1.kind).toBe('updated');
      const u2 = await store.experiments.update(e.key, { options: { note: null } }, NOW);
      expect(u2.kind === 'updated' && u2.experiment.options).toEqual({ flagThresholds: { minPerCondition: 5 } });
      expect(await store.experiments.update(e.key, { measures: [{ id: 'satisfaction', min: 10 }] }, NOW)).toEqual({
        kind: 'invalid-limits',
        measures: [{ id: 'satisfaction', message: 'min (10) must be smaller than max (10)' }],
      });
      await ingestAll(store, e, answers(3, 1, 'def'));
      expect(await store.experiments.update(e.key, { measures: [{ id: 'satisfaction', max: 11 }] }, NOW)).toEqual({
        kind: 'limits-locked',
        measures: [{ id: 'satisfaction', values: 3 }],
      });
      expect(await store.experiments.update(999_999, { title: 'x' }, NOW)).toEqual({ kind: 'not-found' });
      expect(await store.experiments.getDataVersion(e.key)).toBe(1);
      expect(await store.experiments.getDataVersion(999_999)).toBeNull();
    });

    it('ingests single responses and batches: idempotent repeats, conflicts (all or nothing), closed and unknown experiments', async () => {
      await setup();
      const e = await createWater(store);
      const [a0, a1, a2, a3] = answers(4, 2, 'ing');
      const first = await store.responses.ingest(e.key, [toItem(e, a0)], NOW, null);
      expect(first).toEqual({ kind: 'stored', items: [{ responseId: a0.id, created: true }], created: 1, repeated: 0, dataVersion: 1 });
      const repeat = await store.responses.ingest(e.key, [toItem(e, a0)], NOW, null);
      expect(repeat).toEqual({ kind: 'stored', items: [{ responseId: a0.id, created: false }], created: 0, repeated: 1, dataVersion: 1 });
      const changed = toItem(e, { ...a0, satisfaction: (a0.satisfaction + 1) % 11 });
      expect(await store.responses.ingest(e.key, [changed], NOW, null)).toEqual({ kind: 'conflict', conflicts: [{ index: 0, responseId: a0.id }] });

      // A batch with a repeat inside it (same content twice) and one stored before.
      const batch = await store.responses.ingest(e.key, [toItem(e, a1), toItem(e, a2), toItem(e, a1), toItem(e, a0)], NOW, null);
      expect(batch).toEqual({
        kind: 'stored',
        items: [
          { responseId: a1.id, created: true },
          { responseId: a2.id, created: true },
          { responseId: a1.id, created: false },
          { responseId: a0.id, created: false },
        ],
        created: 2,
        repeated: 2,
        dataVersion: 2,
      });
      // A conflict anywhere stores nothing of the batch.
      const bad = await store.responses.ingest(e.key, [toItem(e, a3), changed], NOW, null);
      expect(bad).toEqual({ kind: 'conflict', conflicts: [{ index: 1, responseId: a0.id }] });
      expect(await store.responses.getStored(e.key, a3.id)).toBeNull();
      expect(await store.experiments.getDataVersion(e.key)).toBe(2);

      const stored = await store.responses.getStored(e.key, a1.id);
      const expectedValues: Record<string, number> = { satisfaction: a1.satisfaction };
      if (a1.fairPrice !== null) expectedValues.fair_price = a1.fairPrice;
      expect(stored).toEqual({
        responseId: a1.id,
        condition: a1.condition,
        respondent: a1.respondent,
        values: expectedValues,
        submittedAt: NOW,
        receivedAt: NOW,
        excluded: false,
        excludedReason: null,
        weight: null,
      });

      const gen = await store.responses.ingest(e.key, [toItem(e, { ...a3, id: 'generated-1' }, true)], NOW, null);
      expect(gen.kind === 'stored' && gen.created).toBe(1);

      await store.experiments.update(e.key, { status: 'closed' }, NOW);
      expect(await store.responses.ingest(e.key, [toItem(e, a3)], NOW, null)).toEqual({ kind: 'closed' });
      expect(await store.responses.ingest(e.key, [toItem(e, a3), toItem(e, a2)], NOW, null)).toEqual({ kind: 'closed' });
      expect(await store.responses.ingest(999_999, [toItem(e, a3)], NOW, null)).toEqual({ kind: 'not-found' });
      const final = (await store.experiments.getBySlug(e.id))!;
      expect(final.dataVersion).toBe(3);
      expect(final.conditions.reduce((s, c) => s + c.responses, 0)).toBe(4);
    });

    it('group commit: 60 concurrent single responses are all committed, dataVersion moves by exactly one each', async () => {
      await setup();
      const e = await createWater(store);
      const list = answers(60, 3, 'grp');
      const outs = await Promise.all(list.map((a) => store.responses.ingest(e.key, [toItem(e, a)], NOW, null)));
      const versions = outs.map((o) => (o.kind === 'stored' ? o.dataVersion : -1)).sort((x, y) => x - y);
      expect(versions).toEqual(Array.from({ length: 60 }, (_, i) => i + 1));
      // Repeats in the same turn as their originals: one created, the rest repeated, one version move.
      const again = answers(1, 4, 'grp-dup')[0];
      const dup = await Promise.all([1, 2, 3].map(() => store.responses.ingest(e.key, [toItem(e, again)], NOW, null)));
      expect(dup.map((o) => (o.kind === 'stored' ? o.created : -1)).sort()).toEqual([0, 0, 1]);
      expect(await store.experiments.getDataVersion(e.key)).toBe(61);
      // A request that fails inside a group (a condition key that does not exist) is rolled back alone.
      const [good1, broken, good2] = answers(3, 13, 'grp-err');
      const settled = await Promise.allSettled([
        store.responses.ingest(e.key, [toItem(e, good1)], NOW, null),
        store.responses.ingest(e.key, [{ ...toItem(e, broken), conditionKey: 987_654 }], NOW, null),
        store.responses.ingest(e.key, [toItem(e, good2)], NOW, null),
      ]);
      expect(settled.map((s) => s.status)).toEqual(['fulfilled', 'rejected', 'fulfilled']);
      expect(await store.responses.getStored(e.key, broken.id)).toBeNull();
      expect(await store.responses.getStored(e.key, good2.id)).not.toBeNull();
      expect(await store.experiments.getDataVersion(e.key)).toBe(63);
      list.push(good1, good2);
      expect(await store.responses.getCounts(keyOf(e, 'satisfaction'), keyOf(e, 'bill-first'), false)).toEqual(
        Float64Array.from(denseCounts([...list, again], 'bill-first')),
      );
    });

    it('per-value counts, sorted values and snapshots match brute force; includeExcluded merges both runs', async () => {
      await setup();
      const e = await createWater(store);
      const list = answers(400, 5, 'cnt');
      await ingestAll(store, e, list, 150);
      const sat = keyOf(e, 'satisfaction');
      const price = keyOf(e, 'fair_price');
      const bill = keyOf(e, 'bill-first');
      const service = keyOf(e, 'service-first');
      expect(await store.responses.getCounts(sat, bill, false)).toEqual(Float64Array.from(denseCounts(list, 'bill-first')));
      const sparse = await store.responses.getValueCounts(sat, service, true);
      const dense = denseCounts(list, 'service-first');
      expect([...sparse.values]).toEqual(dense.map((n, v) => (n > 0 ? v : -1)).filter((v) => v >= 0));
      expect([...sparse.counts]).toEqual(dense.filter((n) => n > 0));
      expect([...(await store.responses.getSortedValues(price, bill, false))]).toEqual(sortedPrices(list, 'bill-first'));
      await expect(store.responses.getCounts(price, bill, false)).rejects.toThrow(RangeError);
      expect(await store.responses.countValues(sat)).toBe(400);

      // Exclude some responses, then compare both views.
      const excludedIds = new Set<string>();
      for (let i = 0; i < list.length; i += 9) {
        const out = await store.responses.setExcluded(e.key, list[i].id, { excluded: true, reason: 'speeder' }, null, NOW);
        expect(out.kind).toBe('changed');
        excludedIds.add(list[i].id);
      }
      const kept = list.filter((a) => !excludedIds.has(a.id));
      const snap = await store.responses.getSortedValuesSnapshot(price, [service, bill], false);
      expect(snap.dataVersion).toBe(3 + excludedIds.size);
      expect(snap.groups.map((g) => [...g])).toEqual([sortedPrices(kept, 'service-first'), sortedPrices(kept, 'bill-first')]);
      expect(snap.conditions).toEqual([
        { key: bill, responses: list.filter((a) => a.condition === 'bill-first').length, excluded: list.filter((a) => a.condition === 'bill-first' && excludedIds.has(a.id)).length },
        { key: service, responses: list.filter((a) => a.condition === 'service-first').length, excluded: list.filter((a) => a.condition === 'service-first' && excludedIds.has(a.id)).length },
      ]);
      const all = await store.responses.getSortedValuesSnapshot(price, [bill], true);
      expect([...all.groups[0]]).toEqual(sortedPrices(list, 'bill-first'));
      const counts = await store.responses.getCountsSnapshot(sat, [bill, service], false);
      expect(counts.groups).toEqual([Float64Array.from(denseCounts(kept, 'bill-first')), Float64Array.from(denseCounts(kept, 'service-first'))]);
      const countsAll = await store.responses.getCountsSnapshot(sat, [bill], true);
      expect(countsAll.groups[0]).toEqual(Float64Array.from(denseCounts(list, 'bill-first')));
      expect((await db.check(store)).ok).toBe(true);
    });

    it('a second store on the same database never answers from stale data (sorted-values cache validated per read)', async () => {
      await setup();
      const other = await db.open();
      try {
        const e = await createWater(store);
        const price = keyOf(e, 'fair_price');
        const bill = keyOf(e, 'bill-first');
        const first = answers(50, 6, 'stale-a');
        await ingestAll(store, e, first);
        expect([...(await other.responses.getSortedValuesSnapshot(price, [bill], false)).groups[0]]).toEqual(sortedPrices(first, 'bill-first'));
        // New responses written by the first store: the second merges them.
        const more = answers(30, 7, 'stale-b');
        await ingestAll(store, e, more);
        const s2 = await other.responses.getSortedValuesSnapshot(price, [bill], false);
        expect(s2.dataVersion).toBe(2);
        expect([...s2.groups[0]]).toEqual(sortedPrices([...first, ...more], 'bill-first'));
        // An exclusion and an erasure move the values epoch: the second store reads again.
        const target = [...first, ...more].find((a) => a.condition === 'bill-first' && a.fairPrice !== null)!;
        await store.responses.setExcluded(e.key, target.id, { excluded: true, reason: 'duplicate' }, null, NOW);
        const s3 = await other.responses.getSortedValuesSnapshot(price, [bill], false);
        expect([...s3.groups[0]]).toEqual(sortedPrices([...first, ...more].filter((a) => a.id !== target.id), 'bill-first'));
        const resp = first[1].respondent!;
        await store.responses.eraseRespondent(e.key, resp, null, NOW);
        const left = [...first, ...more].filter((a) => a.id !== target.id && a.respondent !== resp);
        const s4 = await other.responses.getSortedValuesSnapshot(price, [bill], false);
        expect([...s4.groups[0]]).toEqual(sortedPrices(left, 'bill-first'));
        expect(await other.responses.getComparisonStamp(e.key)).toEqual({ dataVersion: 4, rejectedTotal: 0, looks: 0 });
      } finally {
        await other.close();
      }
    });

    it('counts refused values per measure and reason; the stamp and the snapshot carry them', async () => {
      await setup();
      const e = await createWater(store);
      const sat = keyOf(e, 'satisfaction');
      const price = keyOf(e, 'fair_price');
      await store.responses.recordRejected(e.key, [
        { measureKey: sat, reason: 'out_of_range', count: 2 },
        { measureKey: sat, reason: 'not_integer', count: 1 },
        { measureKey: sat, reason: 'out_of_range', count: 1 },
      ]);
      await store.responses.recordRejected(e.key, [{ measureKey: price, reason: 'not_finite', count: 4 }]);
      await store.responses.recordRejected(e.key, []);
      expect(await store.responses.getRejectedCounts(e.key)).toEqual([
        { measure: 'satisfaction', reason: 'not_integer', count: 1 },
        { measure: 'satisfaction', reason: 'out_of_range', count: 3 },
        { measure: 'fair_price', reason: 'not_finite', count: 4 },
      ]);
      expect(await store.responses.getComparisonStamp(e.key)).toEqual({ dataVersion: 0, rejectedTotal: 8, looks: 0 });
      const snap = await store.responses.getCountsSnapshot(sat, [keyOf(e, 'bill-first'), keyOf(e, 'service-first')], false);
      expect(snap.rejected).toEqual([
        { reason: 'not_integer', count: 1 },
        { reason: 'out_of_range', count: 3 },
      ]);
      expect(snap.rejectedTotal).toBe(8);
      expect(await store.responses.getComparisonStamp(999_999)).toBeNull();
    });

    it('exclusion, restoration and erasure keep counts, counters, dataVersion and the audit trail', async () => {
      await setup();
      const e = await createWater(store);
      const list: Answer[] = [
        { id: 'x-1', condition: 'bill-first', respondent: 'erin', satisfaction: 3, fairPrice: 10 },
        { id: 'x-2', condition: 'service-first', respondent: 'erin', satisfaction: 7, fairPrice: null },
        { id: 'x-3', condition: 'bill-first', respondent: 'omar', satisfaction: 3, fairPrice: 20 },
      ];
      await ingestAll(store, e, list);
      const sat = keyOf(e, 'satisfaction');
      const bill = keyOf(e, 'bill-first');
      const ex = await store.responses.setExcluded(e.key, 'x-1', { excluded: true, reason: 'straight-lining' }, null, '2027-03-02T00:00:00.000Z');
      expect(ex).toEqual({ kind: 'changed', responseId: 'x-1', condition: 'bill-first', excluded: true, reason: 'straight-lining', dataVersion: 2 });
      expect((await store.responses.setExcluded(e.key, 'x-1', { excluded: true, reason: 'other' }, null, NOW)).kind).toBe('unchanged');
      expect(await store.responses.setExcluded(e.key, 'nope', { excluded: true, reason: 'r' }, null, NOW)).toEqual({ kind: 'not-found' });
      expect((await store.responses.getCounts(sat, bill, false))[3]).toBe(1);
      expect((await store.responses.getCounts(sat, bill, true))[3]).toBe(2);
      expect((await store.experiments.getBySlug(e.id))!.conditions[0]).toMatchObject({ responses: 2, excluded: 1 });
      const stored = await store.responses.getStored(e.key, 'x-1');
      expect(stored).toMatchObject({ excluded: true, excludedReason: 'straight-lining' });
      const back = await store.responses.setExcluded(e.key, 'x-1', { excluded: false, reason: null }, null, '2027-03-03T00:00:00.000Z');
      expect(back).toEqual({ kind: 'changed', responseId: 'x-1', condition: 'bill-first', excluded: false, reason: null, dataVersion: 3 });
      await store.responses.setExcluded(e.key, 'x-2', { excluded: true, reason: 'speeder' }, null, NOW);

      const erased = await store.responses.eraseRespondent(e.key, 'erin', null, '2027-03-04T00:00:00.000Z');
      expect(erased).toEqual({ kind: 'erased', erased: 2, dataVersion: 5 });
      expect(await store.responses.eraseRespondent(e.key, 'nobody', null, NOW)).toEqual({ kind: 'erased', erased: 0, dataVersion: 5 });
      expect(await store.responses.eraseRespondent(999_999, 'erin', null, NOW)).toEqual({ kind: 'not-found' });
      expect(await store.responses.getStored(e.key, 'x-1')).toBeNull();
      expect(await store.responses.getCounts(sat, bill, true)).toEqual(Float64Array.from([0, 0, 0, 1, 0, 0, 0, 0, 0, 0, 0]));
      expect((await store.experiments.getBySlug(e.id))!.conditions.map((c) => [c.responses, c.excluded])).toEqual([
        [1, 0],
        [0, 0],
      ]);
      const audit = await store.audit.list(e.key);
      expect(audit.map((a) => [a.action, a.responseId, a.reason, a.count, a.dataVersion, a.redacted])).toEqual([
        ['erase', null, null, 0, 5, false],
        ['erase', null, null, 2, 5, false],
        ['exclude', null, 'speeder', 1, 4, true],
        ['restore', null, 'straight-lining', 1, 3, true],
        ['exclude', null, 'straight-lining', 1, 2, true],
      ]);
      expect((await store.audit.list(e.key, 2)).length).toBe(2);
      expect((await db.check(store)).ok).toBe(true);
    });

    it('API keys: create, find by hash, list, revoke, touch, admin count, environment key sync', async () => {
      await setup();
      const e = await createWater(store);
      const hash = (n: number) => new Uint8Array(32).fill(n);
      const before = await store.apiKeys.countActiveAdmin();
      const admin = await store.apiKeys.create({ hash: hash(1), scope: 'admin', experimentKey: null, label: 'ops', origin: 'cli', createdAt: NOW });
      const ingestKey = await store.apiKeys.create({ hash: hash(2), scope: 'ingest', experimentKey: e.key, label: 'form', origin: 'cli', createdAt: NOW });
      expect(ingestKey).toMatchObject({ scope: 'ingest', experiment: e.id, experimentKey: e.key, label: 'form', revokedAt: null, lastUsedAt: null });
      const found = await store.apiKeys.findByHash(hash(2));
      expect(found?.id).toBe(ingestKey.id);
      expect([...found!.hash]).toEqual([...hash(2)]);
      expect(await store.apiKeys.findByHash(hash(9))).toBeNull();
      expect(await store.apiKeys.countActiveAdmin()).toBe(before + 1);
      await store.apiKeys.touch(ingestKey.id, '2027-03-05T00:00:00.000Z');
      expect((await store.apiKeys.list()).find((k) => k.id === ingestKey.id)?.lastUsedAt).toBe('2027-03-05T00:00:00.000Z');
      expect(await store.apiKeys.revoke(admin.id, NOW)).toBe('revoked');
      expect(await store.apiKeys.revoke(admin.id, NOW)).toBe('already-revoked');
      expect(await store.apiKeys.revoke(999_999, NOW)).toBe('not-found');
      await store.apiKeys.syncEnvironmentKey(hash(3), NOW);
      await store.apiKeys.syncEnvironmentKey(hash(3), NOW);
      const env = (await store.apiKeys.list()).filter((k) => k.origin === 'environment' && k.revokedAt === null);
      expect(env.map((k) => k.label)).toEqual(['SPLITBALLOT_ADMIN_KEY']);
      await store.apiKeys.syncEnvironmentKey(hash(4), NOW);
      expect((await store.apiKeys.findByHash(hash(3)))?.revokedAt).toBe(NOW);
      await store.apiKeys.syncEnvironmentKey(null, NOW);
      expect((await store.apiKeys.list()).filter((k) => k.origin === 'environment' && k.revokedAt === null)).toEqual([]);
    });

    it('interim looks: numbered per sequence, raced when another was stored, signed for a − b as asked, serialised across stores', async () => {
      await setup();
      const other = await db.open();
      try {
        const e = await createWater(store);
        const sat = keyOf(e, 'satisfaction');
        const [a, b] = e.conditions.map((c) => c.key);
        const look = {
          conditionKeys: [b, a] as [number, number],
          measureKey: sat,
          recordedAt: NOW,
          dataVersion: 0,
          fraction: 0.5,
          nA: 40,
          nB: 60,
          plannedPerCondition: 100,
          spending: 'obrien-fleming' as const,
          alpha: 0.05,
          cumulativeAlpha: 0.0056,
          alphaSpent: 0.0056,
          boundaryZ: 2.77,
          welchT: 1.5,
          welchDf: 97.3,
          observedZ: 1.49,
        };
        const r1 = await store.looks.record(e.key, look, 0, null);
        expect(r1).toEqual({ kind: 'recorded', look: { ...look, number: 1 } });
        expect(await store.looks.record(e.key, look, 0, null)).toEqual({ kind: 'raced', looks: 1 });
        const asAB = await store.looks.list(e.key, sat, [a, b]);
        expect(asAB.map((l) => [l.number, l.conditionKeys, l.nA, l.nB, l.welchT, l.observedZ, l.boundaryZ])).toEqual([[1, [a, b], 60, 40, -1.5, -1.49, 2.77]]);
        expect(await store.looks.list(e.key, sat, [b, a])).toEqual([{ ...look, number: 1 }]);
        // Two stores race for look 2: exactly one wins.
        const outs = await Promise.all([store.looks.record(e.key, { ...look, fraction: 0.75 }, 1, null), other.looks.record(e.key, { ...look, fraction: 0.8 }, 1, null)]);
        expect(outs.map((o) => o.kind).sort()).toEqual(['raced', 'recorded']);
        expect(await store.looks.count(e.key)).toBe(2);
        expect((await other.looks.listAll(e.key)).map((l) => l.number)).toEqual([1, 2]);
        expect((await store.responses.getComparisonStamp(e.key))?.looks).toBe(2);
      } finally {
        await other.close();
      }
    });

    it('arrival order and the anytime-valid history (one point per dataVersion, running minimum and intersection)', async () => {
      await setup();
      const e = await createWater(store);
      const list = answers(20, 8, 'arr');
      await ingestAll(store, e, list.slice(0, 10));
      await ingestAll(store, e, list.slice(10));
      const sat = keyOf(e, 'satisfaction');
      const [a, b] = e.conditions.map((c) => c.key);
      await store.responses.setExcluded(e.key, list[0].id, { excluded: true, reason: 'r' }, null, NOW);
      const arrival = await store.looks.getArrivalValues(sat, [b, a]);
      const kept = list.slice(1);
      expect(arrival.dataVersion).toBe(3);
      expect([...arrival.values]).toEqual(kept.map((x) => x.satisfaction));
      expect([...arrival.group]).toEqual(kept.map((x) => (x.condition === 'service-first' ? 0 : 1)));

      const key = { experimentKey: e.key, measureKey: sat, conditionKeys: [a, b] as [number, number], alpha: 0.05, targetPerCondition: 100 };
      await store.looks.recordAnytime(key, { dataVersion: 1, nA: 5, nB: 5, p: 0.4, lower: -2, upper: 3 }, NOW);
      await store.looks.recordAnytime(key, { dataVersion: 1, nA: 5, nB: 5, p: 0.01, lower: -9, upper: 9 }, NOW); // ignored: same version
      await store.looks.recordAnytime({ ...key, conditionKeys: [b, a] }, { dataVersion: 2, nA: 10, nB: 9, p: 0.2, lower: -1, upper: 2.5 }, NOW);
      await store.looks.recordAnytime(key, { dataVersion: 3, nA: 2, nB: 20, p: 0.001, lower: 0, upper: 0.1 }, NOW);
      expect(await store.looks.runningAnytime(key, 5)).toEqual({ p: 0.2, lower: -2, upper: 1, points: 2, firstDataVersion: 1, lastDataVersion: 2 });
      expect(await store.looks.runningAnytime({ ...key, conditionKeys: [b, a] }, 5)).toEqual({ p: 0.2, lower: -1, upper: 2, points: 2, firstDataVersion: 1, lastDataVersion: 2 });
      expect(await store.looks.runningAnytime(key, 50)).toBeNull();
    });

    it('assignment: 240 concurrent calls over two stores never break a block; sticky; closed refuses', async () => {
      await setup();
      const other = await db.open();
      try {
        const e = await createWater(store);
        const plan = planFor(e, 9);
        const calls = Array.from({ length: 240 }, (_, i) => (i % 2 === 0 ? store : other).assignments.assign(e.key, `person-${i}`, plan, NOW, null));
        const outs = await Promise.all(calls);
        expect(outs.every((o) => o.kind === 'assigned' && o.created)).toBe(true);
        const blocks = await store.assignments.listWithBlocks(e.key);
        expect(blocks.length).toBe(240);
        const byBlock = new Map<number, number[]>();
        for (const x of blocks) byBlock.set(x.blockNumber, [...(byBlock.get(x.blockNumber) ?? []), x.conditionKey]);
        expect([...byBlock.keys()].sort((p, q) => p - q)).toEqual(Array.from({ length: 80 }, (_, i) => i + 1));
        for (const [n, conds] of byBlock) expect([n, [...conds].sort((p, q) => p - q)]).toEqual([n, plan.template]);
        // Blocks are consecutive in assignment order.
        expect(blocks.map((x) => x.blockNumber)).toEqual(Array.from({ length: 240 }, (_, i) => Math.floor(i / 3) + 1));
        const again = await other.assignments.assign(e.key, 'person-7', plan, NOW, null);
        expect(again).toEqual({ kind: 'assigned', conditionKey: (outs[7] as { conditionKey: number }).conditionKey, created: false });

        const [a] = e.conditions;
        const answered = outs.findIndex((o) => o.kind === 'assigned' && o.conditionKey === a.key);
        await store.responses.ingest(
          e.key,
          [toItem(e, { id: 'asg-1', condition: 'bill-first', respondent: `person-${answered}`, satisfaction: 5, fairPrice: null }), toItem(e, { id: 'asg-2', condition: 'bill-first', respondent: 'walk-in', satisfaction: 5, fairPrice: null })],
          NOW,
          null,
        );
        const summary = await store.assignments.summary(e.key);
        expect(summary.reduce((s, x) => s + x.assigned, 0)).toBe(240);
        expect(summary.find((x) => x.conditionKey === a.key)).toMatchObject({ assigned: 160, answered: 1, answeredOtherCondition: 0 });
        expect(await store.assignments.unassignedResponses(e.key)).toEqual([{ conditionKey: a.key, responses: 1 }]);
        await store.experiments.update(e.key, { status: 'closed' }, NOW);
        expect(await store.assignments.assign(e.key, 'person-7', plan, NOW, null)).toEqual({ kind: 'closed' });
        expect(await store.assignments.assign(999_999, 'x', plan, NOW, null)).toEqual({ kind: 'not-found' });
      } finally {
        await other.close();
      }
    });

    it('exports every response in storage order, page by page, values aligned with the measures asked for', async () => {
      await setup();
      const e = await createWater(store);
      const list = answers(25, 10, 'exp');
      await ingestAll(store, e, list, 7);
      await store.responses.setExcluded(e.key, list[4].id, { excluded: true, reason: 'r' }, null, NOW);
      const pages: ExportedRow[][] = [];
      for await (const page of db.exportPages(store, e.key, [keyOf(e, 'fair_price'), keyOf(e, 'satisfaction')], 10)) pages.push(page);
      expect(pages.map((p) => p.length)).toEqual([10, 10, 5]);
      expect(pages.flat()).toEqual(list.map((a, i) => ({ responseId: a.id, excluded: i === 4, values: [a.fairPrice, a.satisfaction] })));
    });

    it('imports are all or nothing: a rolled-back import leaves nothing, a committed one moves dataVersion once per chunk', async () => {
      await setup();
      const e = await createWater(store);
      const list = answers(30, 11, 'imp');
      const chunks = [list.slice(0, 12), list.slice(12, 24), list.slice(24)].map((c) => c.map((a) => toItem(e, a)));
      const rolled = await db.importChunks(store, e.key, chunks, NOW, false);
      expect(rolled.map((o) => o.kind)).toEqual(['stored', 'stored', 'stored']);
      expect(await store.experiments.getDataVersion(e.key)).toBe(0);
      expect(await store.responses.getStored(e.key, list[0].id)).toBeNull();
      const done = await db.importChunks(store, e.key, chunks, NOW, true);
      expect(done.map((o) => (o.kind === 'stored' ? o.dataVersion : -1))).toEqual([1, 2, 3]);
      expect(await store.responses.getCounts(keyOf(e, 'satisfaction'), keyOf(e, 'bill-first'), false)).toEqual(Float64Array.from(denseCounts(list, 'bill-first')));
      expect((await db.check(store)).ok).toBe(true);
    });

    it('check finds a tampered per-value count', async () => {
      await setup();
      const e = await createWater(store);
      await ingestAll(store, e, answers(10, 12, 'tamper'));
      expect(await db.check(store)).toEqual({ ok: true, problems: [] });
      await db.tamperCount(store, keyOf(e, 'satisfaction'), keyOf(e, 'bill-first'), 99);
      const report = await db.check(store);
      expect(report.ok).toBe(false);
      expect(report.problems).toEqual([
        `value_counts for measure ${keyOf(e, 'satisfaction')}, condition ${keyOf(e, 'bill-first')}, excluded 0, value 99: 1 kept but 0 stored values`,
      ]);
      expect(await store.readiness()).toEqual({ ready: true, migrations: db.migrations().length });
    });

    it('migrations: an edited, a missing or a reordered file is refused with a message saying what to do', async () => {
      const fresh = await harness.newDatabase();
      try {
        const files = fresh.migrations();
        const s = await fresh.open(files);
        await s.close();
        const edited = files.map((m, i) => (i === 1 ? { ...m, sql: `${m.sql}\n-- edited`, checksum: fresh.checksum(`${m.sql}\n-- edited`) } : m));
        await expect(fresh.open(edited)).rejects.toThrow(/0002_exclusions_audit\.sql was edited after it was applied/);
        await expect(fresh.open(files.slice(0, 3))).rejects.toThrow(/0004_values_epoch\.sql was applied to this database but its file is missing/);
        const early = { name: '0003_a_late_idea.sql', sql: 'SELECT 1;', checksum: fresh.checksum('SELECT 1;') };
        await expect(fresh.open([...files, early].sort((x, y) => (x.name < y.name ? -1 : 1)))).rejects.toThrow(new RegExp(`0003_a_late_idea\\.sql is new but sorts before ${files[files.length - 1].name.replace('.', '\\.')}`));
        const s2 = await fresh.open(files);
        expect(await s2.readiness()).toEqual({ ready: true, migrations: files.length });
        await s2.close();
      } finally {
        await fresh.drop();
      }
    });

  });
}

function baseDef(slug: string) {
  return {
    id: slug,
    title: 'Duplicate',
    conditions: [
      { id: 'a', label: 'A' },
      { id: 'b', label: 'B' },
    ],
    measures: [{ id: 'm', label: 'M', min: 0, max: 1, integer: true, required: true }],
    plannedPerCondition: null,
    alpha: 0.05,
    thankYouUrl: null,
  };
}
