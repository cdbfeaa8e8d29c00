/**
 * Migration runner. Numbered SQL files in migrations/sqlite/ (`0001_init.sql`, `0002_….sql`) are applied in name order,
 * each inside its own transaction, and recorded in `schema_migrations(name, checksum, applied_at)`.
 *
 * Refusals (nothing is applied, the message says what to do), as kysely's migrator does:
 *  - an applied migration whose file was edited since (checksum differs);
 *  - an applied migration whose file is missing;
 *  - a new migration whose name sorts before one already applied (it would run out of order).
 *
 * Checksum: SHA-256 (hex) of the file with CRLF line ends turned into LF, so that a checkout with other line
 * ends is not taken for an edit. Migration files must not change PRAGMAs that cannot run inside a
 * transaction (journal_mode); foreign_keys cannot be toggled inside one either.
 */
import { dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { checksumOf, findMigrationsFolder, loadMigrationFiles, pendingMigrations as pendingOf, type AppliedMigration, type Migration } from '../migration-files.js';
import { MigrationError } from '../types.js';
import type { SqliteDatabase } from './open.js';

export { checksumOf, MigrationError, type AppliedMigration, type Migration };

/** The SQLite migrations folder of this installation (migrations/sqlite/ beside package.json). */
export function findMigrationsDir(start = dirname(fileURLToPath(import.meta.url))): string {
  return findMigrationsFolder('sqlite', start);
}

export function loadMigrations(dir: string = findMigrationsDir()): Migration[] {
  return loadMigrationFiles(dir);
}

function ensureTable(db: SqliteDatabase): void {
  db.exec(`CREATE TABLE IF NOT EXISTS schema_migrations (
    name       TEXT NOT NULL PRIMARY KEY,
    checksum   TEXT NOT NULL,
    applied_at TEXT NOT NULL
  ) STRICT`);
}

function readApplied(db: SqliteDatabase): AppliedMigration[] {
  const exists = db.prepare(`SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'schema_migrations'`).get();
  if (!exists) return [];
  return db
    .prepare(`SELECT name, checksum, applied_at AS appliedAt FROM schema_migrations ORDER BY name`)
    .all() as AppliedMigration[];
}

/** The migrations still to apply, or a MigrationError describing the first refusal (rules: ../migration-files.ts). */
export function pendingMigrations(applied: AppliedMigration[], migrations: Migration[]): Migration[] {
  return pendingOf(applied, migrations, 'migrations/');
}

export interface MigrateResult {
  applied: string[];
  alreadyApplied: number;
}

/** Apply every pending migration, each in its own (IMMEDIATE) transaction. */
export function migrate(db: SqliteDatabase, migrations: Migration[] = loadMigrations(), now: () => string = () => new Date().toISOString()): MigrateResult {
  ensureTable(db);
  const initial = readApplied(db);
  const pending = pendingMigrations(initial, migrations);
  const appliedNow: string[] = [];
  const record = db.prepare(`INSERT INTO schema_migrations (name, checksum, applied_at) VALUES (?, ?, ?)`);
  const isApplied = db.prepare(`SELECT 1 FROM schema_migrations WHERE name = ?`);
  for (const m of pending) {
    const apply = db.transaction(() => {
      // Another process may have applied it since we looked.
      if (isApplied.get(m.name)) return false;
      db.exec(m.sql);
      record.run(m.name, m.checksum, now());
      return true;
    });
    try {
      if (apply.immediate()) appliedNow.push(m.name);
    } catch (err) {
      throw new MigrationError(`migration ${m.name} failed and was rolled back: ${(err as Error).message}`);
    }
  }
  return { applied: appliedNow, alreadyApplied: initial.length };
}

/** Readiness check: every file applied with its checksum, nothing applied that is not a file. */
export function migrationsCurrent(db: SqliteDatabase, migrations: Migration[]): { ok: true } | { ok: false; reason: string } {
  try {
    const applied = readApplied(db);
    const pending = pendingMigrations(applied, migrations);
    if (pending.length > 0) return { ok: false, reason: `${pending.length} migration(s) not applied: ${pending.map((m) => m.name).join(', ')}` };
    return { ok: true };
  } catch (err) {
    if (err instanceof MigrationError) return { ok: false, reason: err.message };
    return { ok: false, reason: 'the database could not be read' };
  }
}
