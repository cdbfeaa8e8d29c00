/**
 * The primary outcome's changes in the audit trail (migration 0007), on both engines: a change once answers exist
 * writes one 'primary-change' row (from, to, who, when, the responses stored and the dataVersion) in the same
 * transaction as the definition update — a failing update leaves no row, a failing audit insert leaves the definition
 * as it was — and a database made by migrations 0001–0006 keeps every audit row (ids, actions, redaction), its
 * indexes and its other tables when 0007 rebuilds (SQLite) or alters (PostgreSQL) the audit table.
 * The PostgreSQL half needs the test server (skipped with a notice without it, failing with CI=true).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { contentHash } from '../../server/services/ingest/validate.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { checkDatabase } from '../../server/store/sqlite/check.js';
import { loadMigrations, migrate } from '../../server/store/sqlite/migrate.js';
import { closeDatabase, openDatabase } from '../../server/store/sqlite/open.js';
import { openSqliteStore, type SqliteStore } from '../../server/store/sqlite/store.js';
import { loadPostgresMigrations, migratePostgres } from '../../server/store/postgres/migrate.js';
import { createDatabase } from '../../server/store/postgres/pool.js';
import { openPostgresStore, type PostgresStore } from '../../server/store/postgres/store.js';
import type { ExperimentRecord, Store, ValidResponse } from '../../server/store/types.js';
import { createTestDatabase, postgresAvailable, type TestDatabase } from './postgres/pg-test-db.js';

const NOW = '2027-03-01T12:00:00.000Z';

interface Engine {
  name: string;
  /** A fresh, empty database: open(count) applies the first `count` migrations (all when omitted). */
  fresh(): Promise<{
    /**
     * The database as an older release left it: the first `count` migrations applied by the runner, then `sql` run on
     * it directly (the repositories of this release expect every migration, so they cannot write it).
     */
    older(count: number, sql: string): Promise<void>;
    open(count?: number): Promise<Store>;
    /** Run SQL that changes the schema or data behind the store's back (tampering, triggers). */
    exec(store: Store, sql: string): Promise<void>;
    rows(store: Store, sql: string): Promise<Record<string, unknown>[]>;
    indexes(store: Store, table: string): Promise<string[]>;
    check(store: Store): Promise<{ ok: boolean; problems: string[] }>;
    close(): Promise<void>;
  }>;
  /** SQL that makes every UPDATE of experiments fail, and the SQL that undoes it. */
  refuseUpdates(table: string, event: 'UPDATE' | 'INSERT'): { install: string; remove: string };
  migrationCount(): number;
  /** A 32-byte key hash literal. */
  bytes(hex: string): string;
}

const sqlite: Engine = {
  name: 'SQLite',
  async fresh() {
    const dir = mkdtempSync(join(tmpdir(), 'sb-primary-audit-'));
    const path = join(dir, 'store.db');
    const open: SqliteStore[] = [];
    const db = (s: Store) => (s as SqliteStore).db;
    return {
      async older(count, sql) {
        const raw = openDatabase(path);
        try {
          migrate(raw, loadMigrations().slice(0, count));
          raw.exec(sql);
        } finally {
          closeDatabase(raw);
        }
      },
      async open(count?: number) {
        const all = loadMigrations();
        const s = openSqliteStore(path, { migrations: count === undefined ? all : all.slice(0, count) });
        open.push(s);
        return s;
      },
      async exec(s, sql) {
        db(s).exec(sql);
      },
      async rows(s, sql) {
        return db(s).prepare(sql).all() as Record<string, unknown>[];
      },
      async indexes(s, table) {
        return (db(s).prepare(`SELECT name || ': ' || sql AS d FROM sqlite_schema WHERE type = 'index' AND tbl_name = ? AND sql IS NOT NULL ORDER BY name`).pluck().all(table) as string[]);
      },
      async check(s) {
        const r = checkDatabase(db(s));
        return { ok: r.ok, problems: r.problems };
      },
      async close() {
        for (const s of open.splice(0)) await s.close();
        rmSync(dir, { recursive: true, force: true });
      },
    };
  },
  refuseUpdates(table, event) {
    return {
      install: `CREATE TRIGGER refuse_for_test BEFORE ${event} ON ${table} BEGIN SELECT RAISE(ABORT, 'refused for the test'); END`,
      remove: `DROP TRIGGER refuse_for_test`,
    };
  },
  migrationCount: () => loadMigrations().length,
  bytes: (hex) => `X'${hex}'`,
};

const postgres: Engine = {
  name: 'PostgreSQL',
  async fresh() {
    const test: TestDatabase = await createTestDatabase();
    const open: PostgresStore[] = [];
    const query = async (s: Store, sql: string) => (await (s as PostgresStore).database.query(sql)).rows as Record<string, unknown>[];
    return {
      async older(count, sql) {
        const raw = createDatabase(test.url, { poolSize: 1 });
        try {
          await migratePostgres(raw, loadPostgresMigrations().slice(0, count));
          await raw.query(sql);
        } finally {
          await raw.end();
        }
      },
      async open(count?: number) {
        const all = loadPostgresMigrations();
        const s = await openPostgresStore(test.url, { migrations: count === undefined ? all : all.slice(0, count), pool: { poolSize: 2 } });
        open.push(s);
        return s;
      },
      async exec(s, sql) {
        await query(s, sql);
      },
      async rows(s, sql) {
        // bigint columns as numbers, as the SQLite rows have them.
        return (await query(s, sql)).map((r) => Object.fromEntries(Object.entries(r).map(([k, v]) => [k, typeof v === 'string' && /^-?\d+$/.test(v) ? Number(v) : v])));
      },
      async indexes(s, table) {
        const r = await query(s, `SELECT indexname || ': ' || indexdef AS d FROM pg_indexes WHERE schemaname = current_schema() AND tablename = '${table}' ORDER BY indexname`);
        return r.map((x) => x.d as string);
      },
      async check(s) {
        const r = await (s as PostgresStore).check();
        return { ok: r.ok, problems: r.problems };
      },
      async close() {
        for (const s of open.splice(0)) await s.close();
        await test.drop();
      },
    };
  },
  refuseUpdates(table, event) {
    return {
      install:
        `CREATE FUNCTION refuse_for_test() RETURNS trigger LANGUAGE plpgsql AS $$ BEGIN RAISE EXCEPTION 'refused for the test'; END $$;` +
        `CREATE TRIGGER refuse_for_test BEFORE ${event} ON ${table} FOR EACH ROW EXECUTE FUNCTION refuse_for_test()`,
      remove: `DROP TRIGGER refuse_for_test ON ${table}; DROP FUNCTION refuse_for_test()`,
    };
  },
  migrationCount: () => loadPostgresMigrations().length,
  bytes: (hex) => `decode('${hex}', 'hex')`,
};

const postgresHere = await postgresAvailable('the primary-change audit tests on PostgreSQL');
const dirs: (() => Promise<void>)[] = [];
afterAll(async () => {
  for (const close of dirs.splice(0)) await close();
});

let slugCounter = 0;
async function createStudy(store: Store, primary: string | null): Promise<ExperimentRecord> {
  const r = await store.experiments.create({
    id: `water-primary-${++slugCounter}`,
    title: 'Invented water-utility survey: bill or service first',
    conditions: [
      { id: 'bill-first', label: 'Bill first' },
      { id: 'service-first', label: 'Service first' },
    ],
    measures: [
      { id: 'satisfaction', label: 'Satisfaction 0–10', min: 0, max: 10, integer: true, required: true },
      { id: 'trust', label: 'Trust 1–7', min: 1, max: 7, integer: true, required: true },
    ],
    plannedPerCondition: 100,
    alpha: 0.05,
    thankYouUrl: null,
    options: primary === null ? {} : { primaryMeasure: primary },
  });
  if (r.kind !== 'created') throw new Error('could not create the study');
  return r.experiment;
}

/** n answers (invented), alternating conditions, respondents resp-0, resp-1, … */
function items(e: ExperimentRecord, n: number, prefix: string): ValidResponse[] {
  const [sat, trust] = e.measures;
  return Array.from({ length: n }, (_, i) => {
    const condition = e.conditions[i % 2];
    const s = (i * 7) % 11;
    const t = 1 + ((i * 3) % 7);
    return {
      responseId: `${prefix}-${i}`,
      generated: false,
      conditionKey: condition.key,
      respondent: `resp-${i}`,
      submittedAt: NOW,
      values: new Map([
        [sat.key, s],
        [trust.key, t],
      ]),
      weight: null,
      contentHash: contentHash(condition.id, `resp-${i}`, [
        ['satisfaction', s],
        ['trust', t],
      ]),
    };
  });
}

async function adminKey(store: Store): Promise<number> {
  const k = await store.apiKeys.create({ hash: hashSecret(generateSecret()), scope: 'admin', experimentKey: null, label: 'test admin', origin: 'cli', createdAt: NOW });
  return k.id;
}

async function reread(store: Store, e: ExperimentRecord): Promise<ExperimentRecord> {
  const now = await store.experiments.getBySlug(e.id);
  if (!now) throw new Error('the study vanished');
  return now;
}

for (const engine of [sqlite, postgres]) {
  describe.skipIf(engine === postgres && !postgresHere)(`primary-outcome changes in the audit trail (${engine.name})`, () => {
    async function fresh() {
      const db = await engine.fresh();
      dirs.push(() => db.close());
      return db;
    }

    it('a change before answers writes no audit row; after answers one row with from, to, who, when, count and dataVersion', async () => {
      const db = await fresh();
      const store = await db.open();
      const key = await adminKey(store);
      let e = await createStudy(store, 'satisfaction');
      const before = await store.experiments.update(e.key, { primary: { measure: 'trust', apiKeyId: key } }, '2027-03-01T09:00:00.000Z');
      expect(before.kind).toBe('updated');
      e = await reread(store, e);
      expect(e.options.primaryMeasure).toBe('trust');
      expect(e.options.primaryChanges).toBeUndefined();
      expect(await store.audit.list(e.key)).toEqual([]);

      const stored = await store.responses.ingest(e.key, items(e, 5, 'r'), NOW, key);
      expect(stored).toMatchObject({ kind: 'stored', dataVersion: 1 });
      const excluded = await store.responses.setExcluded(e.key, 'r-0', { excluded: true, reason: 'failed attention check' }, key, NOW);
      expect(excluded).toMatchObject({ kind: 'changed', dataVersion: 2 });

      // Asking for the primary outcome it already has changes nothing and writes nothing.
      await store.experiments.update(e.key, { primary: { measure: 'trust', apiKeyId: key } }, '2027-03-01T12:30:00.000Z');
      expect((await store.audit.list(e.key)).map((a) => a.action)).toEqual(['exclude']);

      const at = '2027-03-01T13:00:00.000Z';
      const after = await store.experiments.update(e.key, { title: 'Renamed', primary: { measure: 'satisfaction', apiKeyId: key } }, at);
      expect(after.kind).toBe('updated');
      const audit = await store.audit.list(e.key);
      expect(audit).toHaveLength(2);
      expect(audit[0]).toEqual({
        id: audit[1].id + 1,
        action: 'primary-change',
        responseId: null,
        reason: null,
        count: 5,
        apiKeyId: key,
        at,
        dataVersion: 2,
        redacted: false,
        fromMeasure: 'trust',
        toMeasure: 'satisfaction',
      });
      e = await reread(store, e);
      expect(e.title).toBe('Renamed');
      expect(e.dataVersion).toBe(2);
      expect(e.options.primaryMeasure).toBe('satisfaction');
      expect(e.options.primaryChanges).toEqual([{ from: 'trust', to: 'satisfaction', at, dataVersion: 2, apiKeyId: key }]);

      // No primary outcome at all, then one again: each change is a row (null stands for "none").
      await store.experiments.update(e.key, { primary: { measure: null, apiKeyId: null } }, '2027-03-01T14:00:00.000Z');
      await store.experiments.update(e.key, { primary: { measure: 'trust', apiKeyId: key } }, '2027-03-01T15:00:00.000Z');
      const last = await store.audit.list(e.key);
      expect(last.slice(0, 2).map((a) => [a.action, a.fromMeasure, a.toMeasure, a.apiKeyId, a.at])).toEqual([
        ['primary-change', null, 'trust', key, '2027-03-01T15:00:00.000Z'],
        ['primary-change', 'satisfaction', null, null, '2027-03-01T14:00:00.000Z'],
      ]);
      e = await reread(store, e);
      expect(e.options.primaryMeasure).toBe('trust');
      expect((e.options.primaryChanges as unknown[]).length).toBe(3);
      // The audit table itself refuses a primary-change row that changes nothing or names a response.
      await expect(
        db.exec(store, `INSERT INTO audit_log (experiment_id, action, count, at, data_version, from_measure, to_measure) VALUES (${e.key}, 'primary-change', 0, '${NOW}', 2, 'trust', 'trust')`),
      ).rejects.toThrow(/CHECK constraint failed|violates check constraint/);
      await expect(
        db.exec(store, `INSERT INTO audit_log (experiment_id, action, response_id, count, at, data_version, from_measure) VALUES (${e.key}, 'exclude', 'r-1', 1, '${NOW}', 2, 'trust')`),
      ).rejects.toThrow(/CHECK constraint failed|violates check constraint/);
      expect(await db.check(store)).toEqual({ ok: true, problems: [] });
    });

    it('one transaction: a failing definition update writes no audit row, a failing audit insert changes no definition', async () => {
      const db = await fresh();
      const store = await db.open();
      const key = await adminKey(store);
      let e = await createStudy(store, 'satisfaction');
      expect(await store.responses.ingest(e.key, items(e, 4, 'r'), NOW, key)).toMatchObject({ kind: 'stored', dataVersion: 1 });

      // The experiments row refuses the update (after the audit row was written inside the transaction).
      const refuseExperiments = engine.refuseUpdates('experiments', 'UPDATE');
      await db.exec(store, refuseExperiments.install);
      await expect(store.experiments.update(e.key, { primary: { measure: 'trust', apiKeyId: key } }, '2027-03-02T10:00:00.000Z')).rejects.toThrow(
        /refused for the test/,
      );
      await db.exec(store, refuseExperiments.remove);
      expect(await store.audit.list(e.key)).toEqual([]);
      expect(await db.rows(store, `SELECT count(*) AS n FROM audit_log`)).toEqual([{ n: 0 }]);
      e = await reread(store, e);
      expect(e.options.primaryMeasure).toBe('satisfaction');

      // The audit table refuses the row: the definition (primary, title, options) stays as it was.
      const refuseAudit = engine.refuseUpdates('audit_log', 'INSERT');
      await db.exec(store, refuseAudit.install);
      await expect(store.experiments.update(e.key, { title: 'Renamed', primary: { measure: 'trust', apiKeyId: key } }, '2027-03-02T11:00:00.000Z')).rejects.toThrow(
        /refused for the test/,
      );
      // A change that needs no audit row (before or without a primary change) still goes through.
      expect((await store.experiments.update(e.key, { alpha: 0.01 }, '2027-03-02T11:30:00.000Z')).kind).toBe('updated');
      await db.exec(store, refuseAudit.remove);
      const unchanged = await reread(store, e);
      expect(unchanged.title).toBe(e.title);
      expect(unchanged.alpha).toBe(0.01);
      expect(unchanged.options.primaryMeasure).toBe('satisfaction');
      expect(unchanged.options.primaryChanges).toBeUndefined();

      // With both gone, the same change commits with its row.
      expect((await store.experiments.update(e.key, { primary: { measure: 'trust', apiKeyId: key } }, '2027-03-02T12:00:00.000Z')).kind).toBe('updated');
      expect((await store.audit.list(e.key)).map((a) => [a.action, a.fromMeasure, a.toMeasure, a.count, a.dataVersion])).toEqual([
        ['primary-change', 'satisfaction', 'trust', 4, 1],
      ]);
    });

    it('a database made by migrations 0001–0006 keeps its audit rows, ids, indexes and data through 0007', async () => {
      const db = await fresh();
      expect(engine.migrationCount()).toBeGreaterThanOrEqual(7);
      // Two studies, a key, and the audit rows an older release wrote: exclude, restore, exclude, a row redacted by an
      // erasure, the erasure, an erasure of nobody, on both studies.
      const study = (slug: string, primary: string) =>
        `INSERT INTO experiments (slug, title, alpha, options, data_version, created_at, updated_at)
           VALUES ('${slug}', 'Invented water-utility survey', 0.05, '{"primaryMeasure":"${primary}"}', 6, '${NOW}', '${NOW}');
         INSERT INTO conditions (experiment_id, slug, label, position) SELECT id, 'bill-first', 'Bill first', 0 FROM experiments WHERE slug = '${slug}';
         INSERT INTO conditions (experiment_id, slug, label, position) SELECT id, 'service-first', 'Service first', 1 FROM experiments WHERE slug = '${slug}';
         INSERT INTO measures (experiment_id, slug, label, min, max, is_integer, required, position)
           SELECT id, 'satisfaction', 'Satisfaction 0–10', 0, 10, TRUE, TRUE, 0 FROM experiments WHERE slug = '${slug}';
         INSERT INTO measures (experiment_id, slug, label, min, max, is_integer, required, position)
           SELECT id, 'trust', 'Trust 1–7', 1, 7, TRUE, TRUE, 1 FROM experiments WHERE slug = '${slug}';`;
      const audit = (slug: string, action: string, responseId: string | null, reason: string | null, count: number, minute: number, redacted: boolean) =>
        `INSERT INTO audit_log (experiment_id, action, response_id, reason, count, api_key_id, at, data_version, redacted)
           SELECT e.id, '${action}', ${responseId === null ? 'NULL' : `'${responseId}'`}, ${reason === null ? 'NULL' : `'${reason}'`}, ${count},
                  (SELECT id FROM api_keys WHERE label = 'old admin'), '2027-03-01T12:0${minute}:00.000Z', ${minute}, ${redacted ? 'TRUE' : 'FALSE'}
           FROM experiments e WHERE e.slug = '${slug}';`;
      await db.older(
        6,
        [
          study('water-old-a', 'satisfaction'),
          study('water-old-b', 'trust'),
          `INSERT INTO api_keys (hash, scope, label, origin, created_at) VALUES (${engine.bytes('ab'.repeat(32))}, 'admin', 'old admin', 'cli', '${NOW}');`,
          audit('water-old-a', 'exclude', 'r-1', 'speeder', 1, 1, false),
          audit('water-old-a', 'restore', 'r-1', 'speeder', 1, 2, false),
          audit('water-old-b', 'exclude', 'r-7', 'straight-liner', 1, 3, false),
          audit('water-old-a', 'exclude', null, 'duplicate', 1, 4, true),
          audit('water-old-a', 'erase', null, null, 2, 5, false),
          audit('water-old-b', 'erase', null, null, 0, 6, false),
        ].join('\n'),
      );
      const columns = 'id, experiment_id, action, response_id, reason, count, api_key_id, at, data_version, redacted';
      const now = await db.open();
      expect((now as Store & { migration: unknown }).migration).toMatchObject({ applied: [expect.stringMatching(/^0007_/), ...Array(engine.migrationCount() - 7).fill(expect.any(String))], alreadyApplied: 6 });
      const rows = await db.rows(now, `SELECT ${columns}, from_measure, to_measure FROM audit_log ORDER BY id`);
      const [a, b] = [await reread(now, { id: 'water-old-a' } as ExperimentRecord), await reread(now, { id: 'water-old-b' } as ExperimentRecord)];
      const keyId = (await db.rows(now, `SELECT id FROM api_keys WHERE label = 'old admin'`))[0].id;
      const flag = (x: boolean) => (engine === sqlite ? (x ? 1 : 0) : x);
      const expected = [
        [a.key, 'exclude', 'r-1', 'speeder', 1, 1, false],
        [a.key, 'restore', 'r-1', 'speeder', 1, 2, false],
        [b.key, 'exclude', 'r-7', 'straight-liner', 1, 3, false],
        [a.key, 'exclude', null, 'duplicate', 1, 4, true],
        [a.key, 'erase', null, null, 2, 5, false],
        [b.key, 'erase', null, null, 0, 6, false],
      ].map(([experiment, action, responseId, reason, count, minute, redacted], i) => ({
        id: i + 1,
        experiment_id: experiment,
        action,
        response_id: responseId,
        reason,
        count,
        api_key_id: keyId,
        at: `2027-03-01T12:0${minute}:00.000Z`,
        data_version: minute,
        redacted: flag(redacted as boolean),
        from_measure: null,
        to_measure: null,
      }));
      expect(rows).toEqual(expected);
      expect((await now.audit.list(a.key)).map((x) => [x.id, x.action, x.responseId, x.redacted, x.fromMeasure, x.toMeasure])).toEqual([
        [5, 'erase', null, false, null, null],
        [4, 'exclude', null, true, null, null],
        [2, 'restore', 'r-1', false, null, null],
        [1, 'exclude', 'r-1', false, null, null],
      ]);
      // Both indexes of 0002 under their names, and the new one on responses.
      const indexes = await db.indexes(now, 'audit_log');
      expect(indexes.map((d) => d.split(':')[0]).filter((n) => n.startsWith('audit_log_by'))).toEqual(['audit_log_by_experiment', 'audit_log_by_response']);
      expect(indexes.find((d) => d.startsWith('audit_log_by_response'))).toMatch(/WHERE \(?response_id IS NOT NULL\)?/);
      expect((await db.indexes(now, 'responses')).some((d) => d.startsWith('responses_by_received_at: '))).toBe(true);
      expect(await db.check(now)).toEqual({ ok: true, problems: [] });

      // The new action is accepted and continues the ids; the other actions still are.
      expect(a.dataVersion).toBe(6);
      expect((await now.experiments.update(a.key, { primary: { measure: 'trust', apiKeyId: keyId as number } }, '2027-03-01T13:00:00.000Z')).kind).toBe('updated');
      expect((await now.audit.list(a.key))[0]).toMatchObject({ id: 7, action: 'primary-change', fromMeasure: 'satisfaction', toMeasure: 'trust', dataVersion: 6 });
      expect((await now.responses.eraseRespondent(a.key, 'nobody', keyId as number, '2027-03-01T13:01:00.000Z')).kind).toBe('erased');
      expect((await now.audit.list(a.key))[0]).toMatchObject({ id: 8, action: 'erase', fromMeasure: null, toMeasure: null });
      // Deleting a study still takes its audit rows with it (the foreign key survived the rebuild).
      await db.exec(now, `DELETE FROM experiments WHERE id = ${b.key}`);
      expect(await db.rows(now, `SELECT count(*) AS n FROM audit_log WHERE experiment_id = ${b.key}`)).toEqual([{ n: 0 }]);
      expect(await db.rows(now, `SELECT count(*) AS n FROM audit_log`)).toEqual([{ n: 6 }]);
    });
  });
}
