/** The server lock: one process (serve or restore) at a time owns a database file (a lock file beside it). */
import { resolve } from 'node:path';
import Database from 'better-sqlite3';
import { ownerOnlyFile } from './open.js';

// ---------------------------------------------------------------------------------------------------------------
// Server lock

export interface ServerLock {
  readonly path: string;
  release(): void;
}

export function lockPathOf(dbPath: string): string {
  return `${resolve(dbPath)}.lock`;
}

/**
 * Take the server lock of `dbPath` (see the header). Returns null when another process (or another lock in this
 * process) holds it.
 */
export function acquireServerLock(dbPath: string, holder = 'serve'): ServerLock | null {
  const path = lockPathOf(dbPath);
  // On a first start the database folder (./data by default) does not exist yet: create it (0700) with the lock file
  // (0600), as opening the store would.
  ownerOnlyFile(path);
  const db = new Database(path);
  try {
    db.pragma('busy_timeout = 0');
    db.pragma('locking_mode = EXCLUSIVE');
    db.pragma('journal_mode = MEMORY');
    db.exec(`BEGIN EXCLUSIVE`);
    db.exec(`CREATE TABLE IF NOT EXISTS holder (pid INTEGER NOT NULL, what TEXT NOT NULL, since TEXT NOT NULL)`);
    db.prepare(`DELETE FROM holder`).run();
    db.prepare(`INSERT INTO holder (pid, what, since) VALUES (?, ?, ?)`).run(process.pid, holder, new Date().toISOString());
    db.exec(`COMMIT`);
  } catch (err) {
    db.close();
    if ((err as { code?: string }).code === 'SQLITE_BUSY' || (err as { code?: string }).code === 'SQLITE_LOCKED') return null;
    throw err;
  }
  let released = false;
  return {
    path,
    release() {
      if (released) return;
      released = true;
      db.close();
    },
  };
}
