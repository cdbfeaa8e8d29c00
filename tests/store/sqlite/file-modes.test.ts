/**
 * Files on disk: a new database, its WAL and shared-memory files and the server lock are readable by the owner only
 * (0600) in a new folder of mode 0700, as backups are; an existing folder keeps its mode.
 */
import { existsSync, mkdirSync, rmSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { acquireServerLock } from '../../../server/store/sqlite/lock.js';
import { openSqliteStore } from '../../../server/store/sqlite/store.js';
import { tempDir } from '../../helpers/app.js';

const dirs: string[] = [];
afterEach(() => {
  for (const d of dirs.splice(0)) rmSync(d, { recursive: true, force: true });
});

const mode = (path: string) => statSync(path).mode & 0o777;

describe('file modes', () => {
  it('database, WAL, shm and lock: 0600; the new folder: 0700', async () => {
    const root = tempDir();
    dirs.push(root);
    const folder = join(root, 'data', 'nested');
    const dbPath = join(folder, 'splitballot.db');
    const lock = acquireServerLock(dbPath);
    expect(lock).not.toBeNull();
    const store = openSqliteStore(dbPath);
    try {
      // Opening migrates the new database: the WAL and shared-memory files exist from then on.
      const files = [dbPath, `${dbPath}-wal`, `${dbPath}-shm`, `${dbPath}.lock`];
      for (const f of files) expect(existsSync(f), f).toBe(true);
      expect(files.map((f) => [f.slice(folder.length + 1), mode(f).toString(8)])).toEqual(files.map((f) => [f.slice(folder.length + 1), '600']));
      expect(mode(folder).toString(8)).toBe('700');
      expect(mode(join(root, 'data')).toString(8)).toBe('700');
    } finally {
      await store.close();
      lock!.release();
    }
  });

  it('an existing folder keeps its mode; the new file in it is still 0600', async () => {
    const root = tempDir();
    dirs.push(root);
    const folder = join(root, 'shared');
    mkdirSync(folder, { mode: 0o750 });
    const before = mode(folder);
    const store = openSqliteStore(join(folder, 'splitballot.db'));
    await store.close();
    expect(mode(folder)).toBe(before);
    expect(mode(join(folder, 'splitballot.db')).toString(8)).toBe('600');
  });
});
