/**
 * Backup, restore and check: the CLI commands and POST /v1/admin/backup.
 *  - check passes on a healthy database and fails (exit 1, one line per problem) on every broken invariant;
 *  - backup PATH writes a complete, checked copy; refuses an existing PATH;
 *  - the HTTP route writes only inside the backup folder, with a safe name (never a path from the network),
 *    never overwrites, files readable by the owner only;
 *  - restore refuses while the server lock is held and when the backup fails its check; otherwise it replaces
 *    the database and keeps the previous one aside.
 */
import { copyFileSync, existsSync, readdirSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { acquireServerLock } from '../../../server/store/sqlite/lock.js';
import { openDatabase } from '../../../server/store/sqlite/open.js';
import { cli, dumpTables, startTestApp, tempDir, waterResponse, WATER_ID, type TestApp } from '../../helpers/app.js';

let t: TestApp;
let backupDir: string;

beforeAll(async () => {
  backupDir = join(tempDir(), 'backups');
  t = await startTestApp({ config: { backupDir } });
  expect((await t.createWater()).statusCode).toBe(201);
  const responses = Array.from({ length: 60 }, (_, i) =>
    waterResponse({ responseId: `r-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11, trust: 1 + (i % 7), fair_price: i * 1.5 }),
  );
  expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
});
afterAll(async () => t.close());

describe('check', () => {
  it('passes on a healthy database with one summary line', async () => {
    const r = await cli(['check'], { SPLITBALLOT_DB: t.dbPath });
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(
      new RegExp(`^check ok: ${t.dbPath.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')}: integrity ok, counts match \\(1 experiment, 60 responses, 180 values, \\d+ value_counts rows, 2 conditions, \\d+ migrations?\\) in \\d+\\.\\d s\\n$`),
    );
    expect(r.stderr).toContain('check: integrity: PRAGMA integrity_check');
  });

  it('fails with exit 1 and names each broken invariant', async () => {
    const dir = tempDir();
    const copy = join(dir, 'broken.db');
    expect((await cli(['backup', copy], { SPLITBALLOT_DB: t.dbPath })).code).toBe(0);
    const db = openDatabase(copy);
    db.exec(
      `UPDATE value_counts SET count = count + 1
       WHERE (measure_id, condition_id, excluded, value) = (SELECT measure_id, condition_id, excluded, value FROM value_counts ORDER BY 1, 2, 3, 4 LIMIT 1)`,
    );
    db.exec(`UPDATE conditions SET response_count = response_count + 2 WHERE slug = 'bill-first'`);
    db.exec(`UPDATE response_values SET value = 42 WHERE measure_id = (SELECT id FROM measures WHERE slug = 'satisfaction') AND response_id = (SELECT min(response_id) FROM response_values)`);
    db.exec(`UPDATE experiments SET data_version = 0`);
    db.close();
    const r = await cli(['check', '--db', copy]);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/^check FAILED: .*broken\.db: \d+ problems \(/);
    expect(r.stderr).toMatch(/value_counts for measure \d+, condition \d+, excluded 0, value \d+: \d+ kept but \d+ stored values/);
    expect(r.stderr).toContain('condition water-bill-2027/bill-first: counters say 32 responses (0 excluded) but 30 are stored (0 excluded)');
    expect(r.stderr).toMatch(/values of measure satisfaction are outside its limits/);
    expect(r.stderr).toContain('experiment water-bill-2027 has data_version 0 although it has responses');
  });

  it('a file that is not a database fails its check', async () => {
    const junk = join(tempDir(), 'junk.db');
    writeFileSync(junk, 'this is not an SQLite file, just text that is long enough '.repeat(100));
    const r = await cli(['check', '--db', junk]);
    expect(r.code).toBe(1);
    const missing = await cli(['check', '--db', join(tempDir(), 'none.db')]);
    expect(missing).toMatchObject({ code: 1, stderr: expect.stringContaining('there is no database at') });
  });
});

describe('backup (CLI)', () => {
  it('writes a complete, checked copy and refuses an existing path', async () => {
    const path = join(tempDir(), 'copy.db');
    const r = await cli(['backup', path], { SPLITBALLOT_DB: t.dbPath });
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/^backup ok: .*copy\.db \(\d+\.\d MiB, \d+ pages, 60 responses in 1 experiment\) in \d+\.\d s; integrity and counts checked\n$/);
    expect(r.stderr).toMatch(/backup: 100% of \d+ pages/);
    const copy = openDatabase(path, { readonly: true });
    const live = t.store.db;
    for (const table of ['responses', 'response_values', 'value_counts', 'conditions', 'api_keys']) {
      expect(copy.prepare(`SELECT * FROM ${table} ORDER BY 1, 2`).all(), table).toEqual(live.prepare(`SELECT * FROM ${table} ORDER BY 1, 2`).all());
    }
    copy.close();
    expect(statSync(path).mode & 0o777).toBe(0o600);
    expect(readdirSync(join(path, '..')).filter((f) => f.includes('partial'))).toEqual([]);
    const again = await cli(['backup', path], { SPLITBALLOT_DB: t.dbPath });
    expect(again).toMatchObject({ code: 1, stderr: `splitballot: ${path} already exists; choose a new file name\n` });
  });
});

describe('POST /v1/admin/backup', () => {
  it('writes into the backup folder with a generated or given name; never overwrites', async () => {
    const res = await t.request({ method: 'POST', url: '/v1/admin/backup' });
    expect(res.statusCode, res.body).toBe(201);
    const body = res.json();
    expect(body.file).toMatch(/^splitballot-\d{8}T\d{9}Z\.db$/);
    expect(body).toMatchObject({ bytes: expect.any(Number), pages: expect.any(Number), durationMs: expect.any(Number) });
    const file = join(backupDir, body.file);
    expect(existsSync(file)).toBe(true);
    expect(statSync(file).size).toBe(body.bytes);
    expect(statSync(file).mode & 0o777).toBe(0o600);
    expect((await cli(['check', '--db', file])).code).toBe(0);

    const named = await t.request({ method: 'POST', url: '/v1/admin/backup', payload: { name: 'before-wave-2.db' } });
    expect(named.statusCode).toBe(201);
    expect(named.json().file).toBe('before-wave-2.db');
    const again = await t.request({ method: 'POST', url: '/v1/admin/backup', payload: { name: 'before-wave-2.db' } });
    expect(again.statusCode).toBe(409);
    expect(again.json().detail).toBe('A backup named before-wave-2.db already exists; choose another name.');
  });

  it('refuses paths, folders and odd names from the network (422; a U+0000 is refused by the body parser, 400) and writes nothing', async () => {
    const before = readdirSync(backupDir).sort();
    for (const payload of [
      { name: '../escape.db' },
      { name: '/tmp/abs.db' },
      { name: 'sub/dir.db' },
      { name: '.hidden.db' },
      { name: 'no-extension' },
      { name: 'a\u0000b.db' },
      { name: 'x'.repeat(200) + '.db' },
      { path: '/tmp/anything.db' },
    ]) {
      const res = await t.request({ method: 'POST', url: '/v1/admin/backup', payload });
      expect(res.statusCode, JSON.stringify(payload)).toBe(String(payload.name).includes('\u0000') ? 400 : 422);
      expect(res.headers['content-type']).toContain('application/problem+json');
    }
    expect(readdirSync(backupDir).sort()).toEqual(before);
    expect(existsSync(join(backupDir, '..', 'escape.db'))).toBe(false);
  });

  it('needs an admin key for every experiment', async () => {
    for (const [key, status] of [
      [await t.key('read'), 403],
      [await t.key('ingest'), 403],
      [await t.key('admin', WATER_ID), 403],
      [null, 401],
    ] as const) {
      expect((await t.request({ method: 'POST', url: '/v1/admin/backup', key, payload: {} })).statusCode).toBe(status);
    }
  });
});

describe('restore', () => {
  it('refuses while a server holds the lock, and refuses a backup that fails its check; nothing changes', async () => {
    const dir = tempDir();
    const target = join(dir, 'target.db');
    const backup = join(dir, 'good.db');
    expect((await cli(['backup', backup], { SPLITBALLOT_DB: t.dbPath })).code).toBe(0);
    expect((await cli(['backup', target], { SPLITBALLOT_DB: t.dbPath })).code).toBe(0);
    const targetBefore = statSync(target).mtimeMs;

    const lock = acquireServerLock(target);
    expect(lock).not.toBeNull();
    const refused = await cli(['restore', backup], { SPLITBALLOT_DB: target });
    expect(refused.code).toBe(1);
    expect(refused.stderr).toBe(
      `splitballot: restore refused: a splitballot server (or another restore) is using ${target}: its lock ${target}.lock is held. Stop the server first; nothing was changed\n`,
    );
    lock!.release();

    const bad = join(dir, 'bad.db');
    expect((await cli(['backup', bad], { SPLITBALLOT_DB: t.dbPath })).code).toBe(0);
    const db = openDatabase(bad);
    db.exec(`UPDATE conditions SET response_count = 999`);
    db.close();
    const badRestore = await cli(['restore', bad], { SPLITBALLOT_DB: target });
    expect(badRestore.code).toBe(1);
    expect(badRestore.stderr).toMatch(/\nsplitballot: restore refused: the backup .*bad\.db failed its check \(condition water-bill-2027\/bill-first: counters say 999/);
    expect(statSync(target).mtimeMs).toBe(targetBefore);
    expect(readdirSync(dir).filter((f) => f.includes('pre-restore') || f.includes('restoring'))).toEqual([]);
  });

  it('replaces the database by the backup and keeps the previous one (with its WAL) aside', async () => {
    const dir = tempDir();
    const backup = join(dir, 'snapshot.db');
    expect((await cli(['backup', backup], { SPLITBALLOT_DB: t.dbPath })).code).toBe(0);
    const expected = dumpTables(t.store);
    // A different database at the target, as a crash left it: content still only in its WAL.
    const other = await startTestApp({ dir: tempDir() });
    await other.app.close();
    const live = openDatabase(other.dbPath);
    live.pragma('wal_autocheckpoint = 0');
    live.exec(`UPDATE api_keys SET label = 'changed in the WAL'`);
    const otherDb = join(dir, 'splitballot.db');
    copyFileSync(other.dbPath, otherDb);
    copyFileSync(`${other.dbPath}-wal`, `${otherDb}-wal`);
    live.close();
    expect(statSync(`${otherDb}-wal`).size).toBeGreaterThan(0);
    const target = join(dir, 'never-created.db');
    const r = await cli(['restore', backup], { SPLITBALLOT_DB: otherDb });
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/^restore ok: .*splitballot\.db now holds .*snapshot\.db \(60 responses in 1 experiment; integrity and counts checked\); the previous database was kept as .*splitballot\.db\.pre-restore-\d{8}T\d{6}Z in \d+\.\d s\n$/);
    const restored = openDatabase(otherDb, { readonly: true });
    for (const table of ['responses', 'response_values', 'value_counts', 'conditions', 'experiments']) {
      expect(restored.prepare(`SELECT * FROM ${table} ORDER BY 1, 2`).all(), table).toEqual(expected[table]);
    }
    restored.close();
    const aside = readdirSync(dir).find((f) => /^splitballot\.db\.pre-restore-\d{8}T\d{6}Z$/.test(f));
    expect(aside).toBeDefined();
    const previous = openDatabase(join(dir, aside!), { readonly: true });
    expect(previous.prepare(`SELECT DISTINCT label FROM api_keys`).pluck().all()).toEqual(['changed in the WAL']);
    previous.close();
    expect(existsSync(`${otherDb}-wal`) && statSync(`${otherDb}-wal`).size > 0).toBe(false);
    expect(existsSync(target)).toBe(false);
  });
});
