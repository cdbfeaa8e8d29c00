/**
 * The overview's "answers today / this week" count (ResponseRepository.countReceivedSince) reads a range of the index
 * responses_by_received_at (migration 0007) on both engines instead of every response of the study: the query plan
 * of the count names the index (SQLite: EXPLAIN QUERY PLAN; PostgreSQL: EXPLAIN after ANALYZE, on 30 days of
 * invented arrivals), and the counts equal a count made here from the arrival times the test wrote.
 *
 * The SQL below is the count as the repositories send it (server/store/sqlite/responses-reads.ts and
 * server/store/postgres/responses.ts, "receivedSince"); if those change, change it here too.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { openSqliteStore, type SqliteStore } from '../../server/store/sqlite/store.js';
import { openPostgresStore, type PostgresStore } from '../../server/store/postgres/store.js';
import type { Store } from '../../server/store/types.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from './postgres/pg-test-db.js';

const SQLITE_COUNT = `SELECT count(*) FROM responses WHERE experiment_id = ? AND received_at >= ?`;
const POSTGRES_COUNT = `SELECT count(*) AS n FROM responses WHERE experiment_id = $1 AND received_at >= $2 COLLATE "C"`;

const DAYS = 30;
const PER_DAY = 400;
/** The last day of the invented arrivals; "today" in the counts below. */
const TODAY = '2027-03-30T00:00:00.000Z';
const WEEK = '2027-03-29T00:00:00.000Z';
const dayStart = (d: number) => new Date(Date.parse('2027-03-01T00:00:00.000Z') + d * 86_400_000).toISOString();
/** Arrival time of response i of a study: PER_DAY a day over DAYS days, spread over each day. */
const arrival = (i: number) => new Date(Date.parse(dayStart(Math.floor(i / PER_DAY))) + (i % PER_DAY) * 200_000).toISOString();

function expectedSince(n: number, since: string): number {
  let count = 0;
  for (let i = 0; i < n; i++) if (arrival(i) >= since) count++;
  return count;
}

async function twoStudies(store: Store): Promise<number[]> {
  const keys: number[] = [];
  for (const slug of ['water-arrivals-a', 'water-arrivals-b']) {
    const r = await store.experiments.create({
      id: slug,
      title: 'Invented water-utility survey',
      conditions: [
        { id: 'bill-first', label: 'Bill first' },
        { id: 'service-first', label: 'Service first' },
      ],
      measures: [{ id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true }],
      plannedPerCondition: null,
      alpha: 0.05,
      thankYouUrl: null,
    });
    if (r.kind !== 'created') throw new Error('not created');
    keys.push(r.experiment.key);
  }
  return keys;
}

const N = DAYS * PER_DAY;

describe('responses_by_received_at (SQLite)', () => {
  const dir = mkdtempSync(join(tmpdir(), 'sb-received-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('the count since a time searches the index; the counts are right', async () => {
    const store: SqliteStore = openSqliteStore(join(dir, 'store.db'));
    try {
      const keys = await twoStudies(store);
      const insert = store.db.prepare(
        `INSERT INTO responses (experiment_id, response_id, condition_id, submitted_at, received_at, content_hash)
         VALUES (?, ?, (SELECT id FROM conditions WHERE experiment_id = ? AND position = 0), ?, ?, randomblob(32))`,
      );
      store.db.transaction(() => {
        for (const key of keys) for (let i = 0; i < N; i++) insert.run(key, `r-${i}`, key, arrival(i), arrival(i));
      })();
      const plan = store.db.prepare(`EXPLAIN QUERY PLAN ${SQLITE_COUNT}`).all(keys[0], TODAY) as { detail: string }[];
      expect(plan.map((p) => p.detail)).toEqual(['SEARCH responses USING COVERING INDEX responses_by_received_at (experiment_id=? AND received_at>?)']);
      // The bulk clean-up's time window reads the same index.
      const window = store.db
        .prepare(`EXPLAIN QUERY PLAN SELECT id FROM responses WHERE experiment_id = ? AND received_at >= ? AND received_at <= ?`)
        .all(keys[0], WEEK, TODAY) as { detail: string }[];
      expect(window.map((p) => p.detail)).toEqual(['SEARCH responses USING COVERING INDEX responses_by_received_at (experiment_id=? AND received_at>? AND received_at<?)']);
      expect(await store.responses.countReceivedSince!(keys[0], [TODAY, WEEK])).toEqual([expectedSince(N, TODAY), expectedSince(N, WEEK)]);
      expect(expectedSince(N, TODAY)).toBe(PER_DAY);
    } finally {
      await store.close();
    }
  });
});

const postgresHere = await postgresAvailable('the received_at index plan on PostgreSQL');

describe.skipIf(!postgresHere)('responses_by_received_at (PostgreSQL)', () => {
  let test: TestDatabase | undefined;
  afterAll(async () => {
    await test?.drop();
  });

  it('the count since a time reads the index (COLLATE "C" as the query); the counts are right', async () => {
    test = await createTestDatabase();
    const store: PostgresStore = await openPostgresStore(test.url, { pool: { poolSize: 2 } });
    try {
      const keys = await twoStudies(store);
      const start = Date.parse('2027-03-01T00:00:00.000Z');
      for (const key of keys) {
        // Same arrivals as arrival(i), made by the server: i / PER_DAY days plus (i % PER_DAY) · 200 s.
        await store.database.query(
          `INSERT INTO responses (experiment_id, response_id, condition_id, submitted_at, received_at, content_hash)
           SELECT $1, 'r-' || i, (SELECT id FROM conditions WHERE experiment_id = $1 AND position = 0), t, t, sha256(('r-' || i)::bytea)
           FROM generate_series(0, $2 - 1) AS i,
                LATERAL (SELECT to_char(to_timestamp($3 / 1000.0 + (i / $4) * 86400 + (i % $4) * 200) AT TIME ZONE 'UTC', 'YYYY-MM-DD"T"HH24:MI:SS.MS"Z"') AS t) x`,
          [key, N, start, PER_DAY],
        );
      }
      const sample = await store.database.query<{ received_at: string }>(`SELECT received_at FROM responses WHERE experiment_id = $1 AND response_id = 'r-4321'`, [keys[0]]);
      expect(sample.rows[0].received_at).toBe(arrival(4321));
      await store.database.query(`ANALYZE responses`);
      const explain = await store.database.query<{ 'QUERY PLAN': unknown }>(`EXPLAIN (FORMAT JSON) ${POSTGRES_COUNT}`, [keys[0], TODAY]);
      const indexes = indexNames(explain.rows[0]['QUERY PLAN']);
      expect(indexes).toEqual(['responses_by_received_at']);
      expect(await store.responses.countReceivedSince!(keys[0], [TODAY, WEEK])).toEqual([expectedSince(N, TODAY), expectedSince(N, WEEK)]);
    } finally {
      await store.close();
    }
  });
});

/** Every "Index Name" in a JSON plan. */
function indexNames(plan: unknown): string[] {
  const out: string[] = [];
  const walk = (node: unknown) => {
    if (Array.isArray(node)) node.forEach(walk);
    else if (node && typeof node === 'object') {
      for (const [k, v] of Object.entries(node)) {
        if (k === 'Index Name' && typeof v === 'string') out.push(v);
        else walk(v);
      }
    }
  };
  walk(plan);
  return out;
}
