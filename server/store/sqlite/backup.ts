/**
 * Operations on the SQLite file itself: online backup, restore, the consistency check, and the lock that tells
 * a running server apart from a file at rest. (SQLite-specific like server/db/; the Store interface has no
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
import { chmodSync, closeSync, existsSync, fsyncSync, mkdirSync, openSync, renameSync, rmSync, statSync } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';
import Database from 'better-sqlite3';
import { openDatabase, type SqliteDatabase } from './open.js';

export interface BackupProgress {
  totalPages: number;
  remainingPages: number;
}

export interface BackupResult {
  /** Absolute path of the finished backup. */
  path: string;
  pages: number;
  bytes: number;
  durationMs: number;
  /** How many times SQLite restarted the copy because another connection wrote meanwhile. */
  restarts: number;
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

export class BackupError extends Error {
  override name = 'BackupError';
}

// ---------------------------------------------------------------------------------------------------------------
// Check

export interface CheckReport {
  ok: boolean;
  /** Lines of PRAGMA integrity_check other than "ok" (at most 20). */
  integrity: string[];
  /** Every invariant that does not hold, one sentence each (at most 50). */
  problems: string[];
  counts: { experiments: number; responses: number; values: number; valueCountRows: number; conditions: number; migrations: number };
  durationMs: number;
}

const MAX_PROBLEMS = 50;

function tableExists(db: SqliteDatabase, name: string): boolean {
  return db.prepare(`SELECT 1 FROM sqlite_schema WHERE type = 'table' AND name = ?`).pluck().get(name) !== undefined;
}

/**
 * Verify the file and the counts the service keeps. Reads only (runs inside one read transaction, so a server
 * writing meanwhile is seen at one consistent moment).
 */
export function checkDatabase(db: SqliteDatabase, onStage: (stage: string) => void = () => undefined): CheckReport {
  const started = Date.now();
  const problems: string[] = [];
  const add = (p: string) => {
    if (problems.length < MAX_PROBLEMS) problems.push(p);
  };

  onStage('integrity: PRAGMA integrity_check');
  const integrity = (db.prepare(`PRAGMA integrity_check(20)`).pluck().all() as string[]).filter((l) => l !== 'ok');
  const counts = { experiments: 0, responses: 0, values: 0, valueCountRows: 0, conditions: 0, migrations: 0 };
  if (integrity.length > 0) {
    return { ok: false, integrity, problems, counts, durationMs: Date.now() - started };
  }

  const required = ['schema_migrations', 'experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts'];
  const missing = required.filter((t) => !tableExists(db, t));
  if (missing.length > 0) {
    add(`not a splitballot database: table${missing.length === 1 ? '' : 's'} ${missing.join(', ')} missing`);
    return { ok: false, integrity, problems, counts, durationMs: Date.now() - started };
  }

  const read = db.transaction(() => {
    onStage('foreign keys: PRAGMA foreign_key_check');
    const fk = db.prepare(`PRAGMA foreign_key_check`).all() as { table: string; rowid: number; parent: string }[];
    for (const r of fk.slice(0, 10)) add(`${r.table} row ${r.rowid} refers to a missing ${r.parent} row`);
    if (fk.length > 10) add(`… and ${fk.length - 10} more foreign-key violations`);

    onStage('counts: value_counts, per-condition counters, values, data versions');
    counts.migrations = db.prepare(`SELECT count(*) FROM schema_migrations`).pluck().get() as number;
    counts.experiments = db.prepare(`SELECT count(*) FROM experiments`).pluck().get() as number;
    counts.conditions = db.prepare(`SELECT count(*) FROM conditions`).pluck().get() as number;
    counts.responses = db.prepare(`SELECT count(*) FROM responses`).pluck().get() as number;
    counts.values = db.prepare(`SELECT count(*) FROM response_values`).pluck().get() as number;
    counts.valueCountRows = db.prepare(`SELECT count(*) FROM value_counts`).pluck().get() as number;

    const valueCountMismatches = db
      .prepare(
        `WITH raw AS (
           SELECT v.measure_id, v.condition_id, v.excluded, v.value, count(*) AS n
           FROM response_values v JOIN measures m ON m.id = v.measure_id
           WHERE m.is_integer = 1
           GROUP BY v.measure_id, v.condition_id, v.excluded, v.value),
         kept AS (SELECT measure_id, condition_id, excluded, value, count AS n FROM value_counts WHERE count > 0)
         SELECT coalesce(raw.measure_id, kept.measure_id) AS measure_id, coalesce(raw.condition_id, kept.condition_id) AS condition_id,
                coalesce(raw.excluded, kept.excluded) AS excluded, coalesce(raw.value, kept.value) AS value,
                coalesce(raw.n, 0) AS counted, coalesce(kept.n, 0) AS kept
         FROM raw FULL OUTER JOIN kept
           ON raw.measure_id = kept.measure_id AND raw.condition_id = kept.condition_id
          AND raw.excluded = kept.excluded AND raw.value = kept.value
         WHERE raw.n IS NULL OR kept.n IS NULL OR raw.n != kept.n
         LIMIT 20`,
      )
      .all() as { measure_id: number; condition_id: number; excluded: number; value: number; counted: number; kept: number }[];
    for (const r of valueCountMismatches) {
      add(
        `value_counts for measure ${r.measure_id}, condition ${r.condition_id}, excluded ${r.excluded}, value ${r.value}: ` +
          `${r.kept} kept but ${r.counted} stored values`,
      );
    }
    const strayCounts = db
      .prepare(
        `SELECT count(*) FROM value_counts vc JOIN measures m ON m.id = vc.measure_id WHERE m.is_integer = 0 AND vc.count > 0`,
      )
      .pluck()
      .get() as number;
    if (strayCounts > 0) add(`${strayCounts} value_counts rows belong to continuous measures (only integer measures are counted)`);
    const negative = db.prepare(`SELECT count(*) FROM value_counts WHERE count < 0`).pluck().get() as number;
    if (negative > 0) add(`${negative} value_counts rows are negative`);

    const conditionMismatches = db
      .prepare(
        `SELECT e.slug AS experiment, c.slug AS condition, c.response_count AS kept, c.excluded_count AS keptExcluded,
                count(r.id) AS counted, coalesce(sum(r.excluded), 0) AS countedExcluded
         FROM conditions c JOIN experiments e ON e.id = c.experiment_id
         LEFT JOIN responses r ON r.condition_id = c.id
         GROUP BY c.id
         HAVING c.response_count != count(r.id) OR c.excluded_count != coalesce(sum(r.excluded), 0)
         LIMIT 20`,
      )
      .all() as { experiment: string; condition: string; kept: number; keptExcluded: number; counted: number; countedExcluded: number }[];
    for (const r of conditionMismatches) {
      add(
        `condition ${r.experiment}/${r.condition}: counters say ${r.kept} responses (${r.keptExcluded} excluded) ` +
          `but ${r.counted} are stored (${r.countedExcluded} excluded)`,
      );
    }

    const crossExperiment = db
      .prepare(`SELECT count(*) FROM responses r JOIN conditions c ON c.id = r.condition_id WHERE c.experiment_id != r.experiment_id`)
      .pluck()
      .get() as number;
    if (crossExperiment > 0) add(`${crossExperiment} responses name a condition of another experiment`);

    const copied = db
      .prepare(
        `SELECT count(*) FROM response_values v JOIN responses r ON r.id = v.response_id
         WHERE v.condition_id != r.condition_id OR v.excluded != r.excluded`,
      )
      .pluck()
      .get() as number;
    if (copied > 0) add(`${copied} values disagree with their response's condition or excluded flag`);

    const foreignMeasure = db
      .prepare(
        `SELECT count(*) FROM response_values v JOIN responses r ON r.id = v.response_id JOIN measures m ON m.id = v.measure_id
         WHERE m.experiment_id != r.experiment_id`,
      )
      .pluck()
      .get() as number;
    if (foreignMeasure > 0) add(`${foreignMeasure} values belong to a measure of another experiment`);

    const outside = db
      .prepare(
        `SELECT m.slug AS measure, count(*) AS n FROM response_values v JOIN measures m ON m.id = v.measure_id
         WHERE v.value < m.min OR v.value > m.max OR (m.is_integer = 1 AND v.value != round(v.value))
         GROUP BY m.id LIMIT 10`,
      )
      .all() as { measure: string; n: number }[];
    for (const r of outside) add(`${r.n} values of measure ${r.measure} are outside its limits or not whole on an integer measure`);

    const versions = db
      .prepare(
        `SELECT e.slug AS experiment, e.data_version AS version FROM experiments e
         WHERE e.data_version < 0 OR (e.data_version = 0 AND EXISTS (SELECT 1 FROM responses r WHERE r.experiment_id = e.id))
         LIMIT 10`,
      )
      .all() as { experiment: string; version: number }[];
    for (const r of versions) add(`experiment ${r.experiment} has data_version ${r.version} although it has responses`);
  });
  read();
  return { ok: problems.length === 0, integrity, problems, counts, durationMs: Date.now() - started };
}

const fmt = (n: number) => n.toLocaleString('en-US');

/** One line: "ok: …" or "FAILED: …". */
export function checkSummary(report: CheckReport, path: string): string {
  const c = report.counts;
  const what =
    `${fmt(c.experiments)} experiment${c.experiments === 1 ? '' : 's'}, ${fmt(c.responses)} responses, ${fmt(c.values)} values, ` +
    `${fmt(c.valueCountRows)} value_counts rows, ${fmt(c.conditions)} conditions, ${c.migrations} migration${c.migrations === 1 ? '' : 's'}`;
  const secs = (report.durationMs / 1000).toFixed(1);
  if (report.ok) return `check ok: ${path}: integrity ok, counts match (${what}) in ${secs} s`;
  const n = report.integrity.length + report.problems.length;
  return `check FAILED: ${path}: ${n} problem${n === 1 ? '' : 's'}${report.integrity.length > 0 ? ' (integrity_check failed)' : ''} (${what}) in ${secs} s`;
}

/** Open a file read-only and check it. Throws BackupError when it is not an SQLite database. */
export function checkFile(path: string, onStage?: (stage: string) => void): CheckReport {
  if (!existsSync(path)) throw new BackupError(`there is no database at ${path}`);
  let db: SqliteDatabase;
  try {
    db = openDatabase(path, { readonly: true });
  } catch (err) {
    throw new BackupError(`${path} cannot be opened as an SQLite database: ${(err as Error).message}`);
  }
  try {
    return checkDatabase(db, onStage);
  } catch (err) {
    const code = (err as { code?: string }).code ?? '';
    if (code === 'SQLITE_NOTADB' || code === 'SQLITE_CORRUPT') {
      return {
        ok: false,
        integrity: [`${path} is not a valid SQLite database (${code})`],
        problems: [],
        counts: { experiments: 0, responses: 0, values: 0, valueCountRows: 0, conditions: 0, migrations: 0 },
        durationMs: 0,
      };
    }
    throw err;
  } finally {
    db.close();
  }
}

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
  // On a first start the database folder (./data by default) does not exist yet: create it, as opening the store would.
  mkdirSync(dirname(resolve(path)), { recursive: true });
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
