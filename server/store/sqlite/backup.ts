/**
 * Operations on the SQLite file itself: online backup, restore, the consistency check, and the lock that tells
 * a running server apart from a file at rest. (SQLite-specific like everything in server/store/sqlite/; the Store interface has no
 * backup because a PostgreSQL deployment would use its own tools.)
 *
 * Online backup: SQLite's backup API (better-sqlite3 `db.backup`), copying pages in steps and yielding to the
 * event loop between steps, so the service keeps ingesting. When the source is written through the SAME
 * connection (the HTTP route), SQLite updates the copy as it goes; when another process writes (the CLI backup
 * of a running service), SQLite restarts the copy, so after a restart the rest is copied in one step (a
 * consistent read snapshot; in WAL mode that does not block the writer). The copy is written to
 * "<file>.partial-<random>", fsync'ed, then renamed, so a file with the final name is always a complete backup.
 *
 * Check: PRAGMA integrity_check, PRAGMA foreign_key_check, and the invariants that ingest keeps in one
 * transaction (DEVELOPERS.md): value_counts = GROUP BY over response_values for integer measures; conditions'
 * response_count / excluded_count = their responses; response_values' condition and excluded flag = their
 * response's; every value inside its measure's limits (and whole on an integer measure); data_version ≥ 0 and
 * ≥ 1 once an experiment has responses. Cost: O(pages) for the integrity check, O(values) for the counts.
 *
 * Server lock: `serve` holds an exclusive SQLite lock on "<database>.lock" (locking_mode=EXCLUSIVE) for as long as
 * it runs. The operating system releases it when the process ends in any way (also SIGKILL or a power cut), so
 * a stale lock cannot exist; `restore` takes the same lock and refuses when it cannot. Limitation: POSIX locks
 * are not reliable on some network file systems (NFS without lock support); keep the database on a local disk.
 */
import { randomBytes } from 'node:crypto';
import { chmodSync, closeSync, existsSync, fsyncSync, openSync, renameSync, rmSync, statSync } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';
import { openDatabase, type SqliteDatabase } from './open.js';
import type { BackupResult } from '../types.js';
import { BackupError, checkFile, type CheckReport } from './check.js';
import { acquireServerLock, lockPathOf } from './lock.js';


export interface BackupProgress {
  totalPages: number;
  remainingPages: number;
}

/** Pages copied per step (4 KiB pages: 4 MiB) before yielding to the event loop. */
export const BACKUP_STEP_PAGES = 1024;
const ALL_PAGES = 0x7fffffff;

function fsyncPath(path: string): void {
  const fd = openSync(path, 'r');
  try {
    fsyncSync(fd);
  } finally {
    closeSync(fd);
  }
}

function fsyncDir(dir: string): void {
  try {
    fsyncPath(dir);
  } catch {
    // Some platforms cannot open a folder for fsync; the rename is still atomic.
  }
}

/**
 * Copy the database behind `db` to `destination` (which must not exist) with SQLite's online backup API.
 * The service keeps running: between steps the event loop serves requests.
 */
export async function backupDatabase(
  db: SqliteDatabase,
  destination: string,
  options: { onProgress?: (p: BackupProgress) => void; stepPages?: number } = {},
): Promise<BackupResult> {
  const target = resolve(destination);
  if (existsSync(target)) throw new BackupError(`${target} already exists; choose a new file name`);
  const partial = join(dirname(target), `.${basename(target)}.partial-${randomBytes(6).toString('hex')}`);
  const step = options.stepPages ?? BACKUP_STEP_PAGES;
  const started = Date.now();
  let restarts = 0;
  let lastRemaining = Number.POSITIVE_INFINITY;
  let singleStep = false;
  try {
    const result = await db.backup(partial, {
      progress: (p) => {
        if (p.remainingPages > lastRemaining) {
          restarts++;
          singleStep = true;
        }
        lastRemaining = p.remainingPages;
        options.onProgress?.(p);
        return singleStep ? ALL_PAGES : step;
      },
    });
    // A backup holds every answer and the key hashes: readable by the service's user only.
    chmodSync(partial, 0o600);
    fsyncPath(partial);
    renameSync(partial, target);
    fsyncDir(dirname(target));
    const bytes = statSync(target).size;
    return { path: target, pages: result.totalPages, bytes, durationMs: Date.now() - started, restarts };
  } catch (err) {
    rmSync(partial, { force: true });
    rmSync(`${partial}-journal`, { force: true });
    throw err;
  }
}

/** Open `sourcePath` (read-only) and back it up to `destination`; for the CLI, also while a server writes to it. */
export async function backupFile(
  sourcePath: string,
  destination: string,
  options: { onProgress?: (p: BackupProgress) => void } = {},
): Promise<BackupResult> {
  if (!existsSync(sourcePath)) throw new BackupError(`there is no database at ${sourcePath}`);
  const db = openDatabase(sourcePath, { readonly: true });
  try {
    return await backupDatabase(db, destination, options);
  } finally {
    db.close();
  }
}


// ---------------------------------------------------------------------------------------------------------------
// Restore

export interface RestoreResult {
  target: string;
  /** Where the database that was replaced now is (null when there was none). */
  previous: string | null;
  report: CheckReport;
  durationMs: number;
}

/**
 * Replace `dbPath` by the backup at `backupPath`:
 *  1. take the server lock (refuse when a server runs on dbPath);
 *  2. check the backup (integrity and counts; refuse when anything is wrong);
 *  3. copy it with the backup API next to the target, fsync;
 *  4. move the current database and its -wal aside to "<db>.pre-restore-<time>" (nothing is deleted; the stale
 *     -shm is removed), rename the copy into place, fsync the folder;
 *  5. release the lock.
 */
export async function restoreDatabase(
  backupPath: string,
  dbPath: string,
  options: { onStage?: (stage: string) => void; onProgress?: (p: BackupProgress) => void; now?: Date } = {},
): Promise<RestoreResult> {
  const started = Date.now();
  const target = resolve(dbPath);
  const source = resolve(backupPath);
  if (source === target) throw new BackupError('the backup and the database are the same file');
  if (!existsSync(source)) throw new BackupError(`there is no backup at ${source}`);
  const lock = acquireServerLock(target, 'restore');
  if (lock === null) {
    throw new BackupError(
      `a splitballot server (or another restore) is using ${target}: its lock ${lockPathOf(target)} is held. ` +
        `Stop the server first; nothing was changed`,
    );
  }
  try {
    options.onStage?.(`checking the backup ${source}`);
    const report = checkFile(source, options.onStage);
    if (!report.ok) {
      const first = report.integrity[0] ?? report.problems[0] ?? 'unknown problem';
      throw new BackupError(`the backup ${source} failed its check (${first}); nothing was changed`);
    }
    const dir = dirname(target);
    const copy = join(dir, `.${basename(target)}.restoring-${randomBytes(6).toString('hex')}`);
    options.onStage?.(`copying into ${dir}`);
    const src = openDatabase(source, { readonly: true });
    try {
      await backupDatabase(src, copy, { onProgress: options.onProgress });
    } finally {
      src.close();
    }
    let previous: string | null = null;
    try {
      if (existsSync(target)) {
        const stamp = (options.now ?? new Date()).toISOString().replace(/[-:]/g, '').replace(/\.\d+Z$/, 'Z');
        previous = `${target}.pre-restore-${stamp}`;
        if (existsSync(previous)) previous = `${previous}-${randomBytes(3).toString('hex')}`;
        renameSync(target, previous);
        if (existsSync(`${target}-wal`)) renameSync(`${target}-wal`, `${previous}-wal`);
        if (existsSync(`${target}-journal`)) renameSync(`${target}-journal`, `${previous}-journal`);
      }
      rmSync(`${target}-shm`, { force: true });
      renameSync(copy, target);
      fsyncDir(dir);
    } catch (err) {
      rmSync(copy, { force: true });
      throw err;
    }
    return { target, previous, report, durationMs: Date.now() - started };
  } finally {
    lock.release();
  }
}
