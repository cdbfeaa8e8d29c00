/**
 * Storage: migrations (apply, idempotent, refusals), pragmas, and a restart on the same file keeping every
 * response and counter.
 */
import { copyFileSync, mkdirSync, readFileSync, readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { buildApp } from '../../../server/http/app.js';
import { checksumOf, findMigrationsDir, loadMigrations, migrate, MigrationError, migrationsCurrent } from '../../../server/store/sqlite/migrate.js';
import { openDatabase } from '../../../server/store/sqlite/open.js';
import { openSqliteStore } from '../../../server/store/sqlite/store.js';
import { dumpTables, startTestApp, tempDir, testConfig, waterResponse, WATER_ID, type TestApp } from '../../helpers/app.js';

const cleanups: (() => unknown)[] = [];
afterEach(async () => {
  while (cleanups.length) await cleanups.pop()!();
});

/** A private copy of migrations/ that a test may edit. */
function copyMigrations(onlyFirst = false): string {
  const dir = join(tempDir('splitballot-mig-'), 'migrations');
  mkdirSync(dir);
  const src = findMigrationsDir();
  // onlyFirst: the ordering tests add their own numbered files after 0001 and run migrate() alone.
  for (const f of readdirSync(src).filter((name) => !onlyFirst || name === '0001_init.sql')) copyFileSync(join(src, f), join(dir, f));
  return dir;
}

describe('migrations', () => {
  it('apply on an empty file, record name/checksum/time, and are idempotent', () => {
    const db = openDatabase(join(tempDir(), 'm.db'));
    cleanups.push(() => void db.close());
    const migrations = loadMigrations();
    expect(migrations.map((m) => m.name)).toContain('0001_init.sql');
    const first = migrate(db, migrations);
    expect(first).toEqual({ applied: migrations.map((m) => m.name), alreadyApplied: 0 });
    const rows = db.prepare('SELECT name, checksum, applied_at FROM schema_migrations ORDER BY name').all() as { name: string; checksum: string; applied_at: string }[];
    expect(rows.map((r) => r.name)).toEqual(migrations.map((m) => m.name));
    expect(rows[0].checksum).toBe(checksumOf(readFileSync(join(findMigrationsDir(), '0001_init.sql'), 'utf8')));
    expect(rows[0].applied_at).toMatch(/^\d{4}-\d\d-\d\dT/);
    const tables = () => db.prepare(`SELECT name FROM sqlite_master WHERE type IN ('table', 'index') ORDER BY name`).pluck().all();
    const before = tables();
    expect(before).toEqual(expect.arrayContaining(['experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts', 'rejected_value_counts', 'api_keys', 'schema_migrations']));
    // Migration 0008: response_values is clustered in comparison order; no second index on it.
    expect(before).not.toContain('response_values_scan');
    expect(migrate(db, migrations)).toEqual({ applied: [], alreadyApplied: migrations.length });
    expect(tables()).toEqual(before);
    expect(migrationsCurrent(db, migrations)).toEqual({ ok: true });
  });

  it('refuse an applied migration that was edited, and change nothing', () => {
    const dir = copyMigrations();
    const dbPath = join(tempDir(), 'edited.db');
    const store = openSqliteStore(dbPath, { migrations: loadMigrations(dir) });
    store.db.close();
    writeFileSync(join(dir, '0001_init.sql'), `${readFileSync(join(dir, '0001_init.sql'), 'utf8')}\n-- a later edit\n`);
    let err: unknown;
    try {
      openSqliteStore(dbPath, { migrations: loadMigrations(dir) });
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(MigrationError);
    expect((err as Error).message).toMatch(
      /^migration 0001_init\.sql was edited after it was applied to this database \(checksum [0-9a-f]{12}… recorded, [0-9a-f]{12}… now\); revert the file and put the change in a new migration instead$/,
    );
  });

  it('line-ending changes alone are not an edit', () => {
    expect(checksumOf('a;\r\nb;\r\n')).toBe(checksumOf('a;\nb;\n'));
  });

  it('refuse a missing applied migration and a new one that sorts before an applied one', () => {
    const dir = copyMigrations(true);
    writeFileSync(join(dir, '0003_later.sql'), 'CREATE TABLE later_things (id INTEGER PRIMARY KEY) STRICT;\n');
    const dbPath = join(tempDir(), 'order.db');
    const db = openDatabase(dbPath);
    cleanups.push(() => void db.close());
    expect(migrate(db, loadMigrations(dir)).applied).toEqual(['0001_init.sql', '0003_later.sql']);

    writeFileSync(join(dir, '0002_between.sql'), 'CREATE TABLE between_things (id INTEGER PRIMARY KEY) STRICT;\n');
    expect(() => migrate(db, loadMigrations(dir))).toThrow(
      'migration 0002_between.sql is new but sorts before 0003_later.sql, which is already applied; rename it so that it sorts after every applied migration',
    );
    expect(db.prepare(`SELECT count(*) FROM sqlite_master WHERE name = 'between_things'`).pluck().get()).toBe(0);

    const withoutLater = loadMigrations(dir).filter((m) => m.name !== '0003_later.sql' && m.name !== '0002_between.sql');
    expect(() => migrate(db, withoutLater)).toThrow(
      'migration 0003_later.sql was applied to this database but its file is missing from migrations/; restore it (applied migrations are append-only) or run the Splitballot release that created this database',
    );
    expect(migrationsCurrent(db, withoutLater)).toMatchObject({ ok: false });
  });

  it('a failing migration is rolled back whole', () => {
    const dir = copyMigrations(true);
    writeFileSync(join(dir, '0002_broken.sql'), 'CREATE TABLE half_done (id INTEGER PRIMARY KEY);\nINSERT INTO nowhere VALUES (1);\n');
    const db = openDatabase(join(tempDir(), 'broken.db'));
    cleanups.push(() => void db.close());
    expect(() => migrate(db, loadMigrations(dir))).toThrow(/^migration 0002_broken\.sql failed and was rolled back: no such table: nowhere$/);
    expect(db.prepare(`SELECT count(*) FROM sqlite_master WHERE name = 'half_done'`).pluck().get()).toBe(0);
    expect(db.prepare(`SELECT name FROM schema_migrations`).pluck().all()).toEqual(['0001_init.sql']);
  });

  it('readyz answers 503 when the applied migrations no longer match the files', async () => {
    const dbPath = join(tempDir(), 'ready.db');
    const app = buildApp(testConfig(dbPath, { logLevel: 'silent' }));
    cleanups.push(() => app.close());
    await app.ready();
    expect((await app.inject({ method: 'GET', url: '/readyz' })).json()).toEqual({ status: 'ready', migrations: loadMigrations().length });
    // Someone swaps in a database whose history differs from the files this process runs with.
    (app.store as ReturnType<typeof openSqliteStore>).db.prepare(`UPDATE schema_migrations SET checksum = 'f00d' WHERE name = '0001_init.sql'`).run();
    const res = await app.inject({ method: 'GET', url: '/readyz' });
    expect(res.statusCode).toBe(503);
    expect(res.json()).toEqual({
      type: 'urn:splitballot:problem:unavailable',
      title: 'Service unavailable',
      status: 503,
      detail: expect.stringMatching(/^Not ready: migration 0001_init\.sql was edited after it was applied to this database/),
    });
    expect((await app.inject({ method: 'GET', url: '/healthz' })).json()).toEqual({ status: 'ok' });
  });
});

describe('pragmas', () => {
  it('WAL, synchronous=FULL, foreign_keys=ON and a busy timeout on every connection', () => {
    const db = openDatabase(join(tempDir(), 'p.db'));
    cleanups.push(() => void db.close());
    expect(db.pragma('journal_mode', { simple: true })).toBe('wal');
    expect(db.pragma('synchronous', { simple: true })).toBe(2); // FULL
    expect(db.pragma('foreign_keys', { simple: true })).toBe(1);
    expect(db.pragma('busy_timeout', { simple: true })).toBe(5000);
  });
});

describe('restart on the same file', () => {
  let t: TestApp;
  afterEach(async () => {
    await t.close();
  });

  it('keeps every response, value, count and key', async () => {
    t = await startTestApp();
    await t.createWater();
    const ingest = await t.key('ingest', WATER_ID);
    for (let i = 0; i < 30; i++) {
      const res = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, payload: waterResponse({ responseId: `r-${i}`, condition: i % 3 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11 }) });
      expect(res.statusCode).toBe(201);
    }
    await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, payload: waterResponse({}, { trust: 0 }) });
    const before = dumpTables(t.store);
    delete before.api_keys;
    const view = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json();
    await t.restart();
    const after = dumpTables(t.store);
    delete after.api_keys;
    expect(after).toEqual(before);
    expect(after.responses).toHaveLength(30);
    expect((await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json()).toEqual(view);
    // The keys still work, and a retry after the restart is still recognised.
    const retry = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses`, key: ingest, payload: waterResponse({ responseId: 'r-1', condition: 'bill-first' }, { satisfaction: 1 }) });
    expect(retry.statusCode).toBe(200);
    expect(t.store.migration).toEqual({ applied: [], alreadyApplied: loadMigrations().length });
  });
});
