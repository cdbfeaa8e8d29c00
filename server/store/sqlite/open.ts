/**
 * Open the SQLite database file with the pragmas the service relies on.
 *
 *  - journal_mode = WAL: readers never block the writer and the writer never blocks readers.
 *  - synchronous = FULL: every commit is fsync'ed before it returns, so an acknowledged response survives a
 *    process crash and a power loss (with NORMAL, WAL mode may lose the last commits on power loss).
 *  - foreign_keys = ON: SQLite leaves them off unless asked, per connection.
 *  - busy_timeout: wait (up to 5 s) for another connection's write lock, e.g. the `splitballot keys` CLI,
 *    instead of failing at once with SQLITE_BUSY.
 *  - cache_size = -65536 (64 MiB of page cache) for the writing connection: ingest inserts into indexes in value
 *    order (response_values_scan), i.e. at random places; with SQLite's default 2 MiB a large database re-reads
 *    index pages from the OS for most inserts. Read-only connections (the comparison workers) scan in order and
 *    keep the default.
 *
 * The folder of the file is created if missing. ":memory:" works (journal_mode then stays "memory"), but the
 * service and the tests use files.
 *
 * File modes: the database holds every answer and the key hashes, so a new database file is created readable and
 * writable by its owner only (0600) in a new folder of mode 0700 (`ownerOnlyFile`), as backups are. SQLite gives its
 * -wal and -shm files the mode of the database file. An existing file or folder keeps the mode it has.
 */
import { closeSync, existsSync, mkdirSync, openSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import Database from 'better-sqlite3';

export type SqliteDatabase = Database.Database;

export const BUSY_TIMEOUT_MS = 5000;
/** Page cache of the writing connection, KiB (see the header). */
export const WRITER_CACHE_KIB = 65536;

/** Folder mode and file mode of new database, WAL and lock files. */
export const OWNER_ONLY_DIR_MODE = 0o700;
export const OWNER_ONLY_FILE_MODE = 0o600;

/** Create the folder of `path` (0700) and an empty `path` (0600) unless they exist. */
export function ownerOnlyFile(path: string): void {
  mkdirSync(dirname(resolve(path)), { recursive: true, mode: OWNER_ONLY_DIR_MODE });
  if (!existsSync(path)) {
    try {
      closeSync(openSync(path, 'wx', OWNER_ONLY_FILE_MODE));
    } catch (err) {
      // Made by another process between the check and the open: it is there, which is all we need.
      if ((err as { code?: string }).code !== 'EEXIST') throw err;
    }
  }
}

export function openDatabase(path: string, options: { readonly?: boolean } = {}): SqliteDatabase {
  const inMemory = path === ':memory:';
  if (!inMemory && !options.readonly) ownerOnlyFile(path);
  const db = new Database(path, { readonly: options.readonly ?? false, fileMustExist: options.readonly ?? false });
  try {
    db.pragma(`busy_timeout = ${BUSY_TIMEOUT_MS}`);
    if (!options.readonly) {
      const mode = db.pragma('journal_mode = WAL', { simple: true });
      if (!inMemory && mode !== 'wal') throw new Error(`could not switch ${path} to WAL mode (got ${String(mode)})`);
    }
    if (!options.readonly) db.pragma(`cache_size = -${WRITER_CACHE_KIB}`);
    db.pragma('synchronous = FULL');
    db.pragma('foreign_keys = ON');
  } catch (err) {
    db.close();
    throw err;
  }
  return db;
}

/** Checkpoint the WAL into the main file and close. Used on graceful shutdown. */
export function closeDatabase(db: SqliteDatabase): void {
  if (!db.open) return;
  try {
    if (!db.readonly && db.name !== ':memory:') db.pragma('wal_checkpoint(TRUNCATE)');
  } finally {
    db.close();
  }
}
