/**
 * The per-value counts an ingest transaction adds (server/store/sqlite/responses-ingest.ts): typed-array tallies for
 * narrow integer scales, a map for wide ones or a single response on a wide table, weighted columns included. Every
 * path must leave value_counts equal to a GROUP BY over the stored rows (check) and to brute force.
 */
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { contentHash } from '../../../server/services/ingest/validate.js';
import { checkDatabase } from '../../../server/store/sqlite/check.js';
import { openSqliteStore } from '../../../server/store/sqlite/store.js';
import type { ExperimentRecord, ValidResponse } from '../../../server/store/types.js';
import { tempDir } from '../../helpers/app.js';

const cleanups: (() => unknown)[] = [];
afterEach(async () => {
  while (cleanups.length) await cleanups.pop()!();
});

describe('ingest tallies', () => {
  it('narrow and wide integer scales, weighted or not, batch and single: counts equal brute force and check passes', async () => {
    const store = openSqliteStore(join(tempDir('splitballot-tally-'), 't.db'));
    cleanups.push(() => store.close());
    const made = await store.experiments.create({
      id: 'tally',
      title: 'Tallies',
      conditions: Array.from({ length: 5 }, (_, i) => ({ id: `c${i}`, label: `C${i}` })),
      measures: [
        { id: 'narrow', label: 'Narrow', min: -3, max: 7, integer: true, required: true },
        { id: 'mid', label: 'Mid', min: 0, max: 3000, integer: true, required: false },
        { id: 'wide', label: 'Wide', min: 0, max: 1_000_000, integer: true, required: false },
        { id: 'cont', label: 'Continuous', min: 0, max: 1, integer: false, required: false },
      ],
      plannedPerCondition: null,
      alpha: 0.05,
      thankYouUrl: null,
      options: { weights: 'optional' },
    });
    expect(made.kind).toBe('created');
    const e = (await store.experiments.getBySlug('tally')) as ExperimentRecord;
    let n = 0;
    const make = (i: number): ValidResponse => {
      const c = e.conditions[i % 5];
      const pairs: [string, number][] = [['narrow', (i % 11) - 3]];
      if (i % 3 !== 0) pairs.push(['mid', (i * 37) % 3001]);
      if (i % 4 !== 0) pairs.push(['wide', (i * 7919) % 1_000_001]);
      if (i % 2 === 0) pairs.push(['cont', (i % 97) / 97]);
      const weight = i % 5 === 1 ? 0.5 + (i % 7) : null;
      return {
        responseId: `r${n++}`,
        generated: false,
        conditionKey: c.key,
        respondent: null,
        submittedAt: '2027-01-01T00:00:00.000Z',
        values: new Map(pairs.map(([id, v]) => [e.measures.find((m) => m.id === id)!.key, v])),
        weight,
        contentHash: contentHash(c.id, null, pairs, weight),
      };
    };
    const all: ValidResponse[] = [];
    const batch = Array.from({ length: 2000 }, (_, i) => make(i));
    all.push(...batch);
    expect(await store.responses.ingest(e.key, batch, '2027-01-01T00:00:00.000Z', null)).toMatchObject({ kind: 'stored', created: 2000 });
    const singles = Array.from({ length: 40 }, (_, i) => make(5000 + i));
    all.push(...singles);
    const outcomes = await Promise.all(singles.map((s) => store.responses.ingest(e.key, [s], '2027-01-01T00:00:01.000Z', null)));
    expect(outcomes.every((o) => o.kind === 'stored' && o.created === 1)).toBe(true);
    const report = checkDatabase(store.db);
    expect(report.problems).toEqual([]);
    for (const m of e.measures.filter((x) => x.integer)) {
      for (const c of e.conditions) {
        const expected = new Map<number, { n: number; wn: number; ws: number }>();
        for (const r of all) {
          const v = r.values.get(m.key);
          if (v === undefined || r.conditionKey !== c.key) continue;
          const x = expected.get(v) ?? { n: 0, wn: 0, ws: 0 };
          x.n++;
          if (r.weight !== null) {
            x.wn++;
            x.ws += r.weight;
          }
          expected.set(v, x);
        }
        const stored = store.db
          .prepare(`SELECT value, count, weighted_count, weight_sum FROM value_counts WHERE measure_id = ? AND condition_id = ? AND excluded = 0 ORDER BY value`)
          .raw()
          .all(m.key, c.key) as [number, number, number, number][];
        const want = [...expected].sort((a, b) => a[0] - b[0]);
        expect(stored.map(([v, cnt, wn]) => [v, cnt, wn])).toEqual(want.map(([v, x]) => [v, x.n, x.wn]));
        stored.forEach(([, , , ws], i) => expect(ws).toBeCloseTo(want[i][1].ws, 9));
      }
    }
  });
});
