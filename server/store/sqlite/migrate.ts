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
import { createHash } from 'node:crypto';
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { MigrationError } from '../types.js';
import type { SqliteDatabase } from './open.js';

export interface Migration {
  name: string;
  sql: string;
  checksum: string;
}

export interface AppliedMigration {
  name: string;
  checksum: string;
  appliedAt: string;
}

export { MigrationError };

const MIGRATION_NAME = /^\d{4}_[a-z0-9_]+\.sql$/;

/**
 * The SQLite migrations folder of this installation (migrations/sqlite/): found in the nearest ancestor of this
 * module holding package.json (works from server/store/sqlite/ under vitest and from dist/server/store/sqlite/ when built).
 */
export function findMigrationsDir(start = dirname(fileURLToPath(import.meta.url))): string {
  let dir = resolve(start);
  for (let i = 0; i < 6; i++) {
    const candidate = join(dir, 'migrations', 'sqlite');
    if (existsSync(join(dir, 'package.json')) && existsSync(candidate) && statSync(candidate).isDirectory()) return candidate;
    const parent = dirname(dir);
    if (parent === dir) break;
    dir = parent;
  }
  throw new MigrationError(`cannot find the migrations/sqlite/ folder above ${start}; it ships beside package.json`);
}

export function checksumOf(sql: string): string {
  return createHash('sha256').update(sql.replace(/\r\n/g, '\n'), 'utf8').digest('hex');
}

export function loadMigrations(dir: string = findMigrationsDir()): Migration[] {
  const names = readdirSync(dir).filter((f) => f.endsWith('.sql')).sort();
  const out: Migration[] = [];
  for (const name of names) {
    if (!MIGRATION_NAME.test(name)) {
      throw new MigrationError(`migration file name ${name} in ${dir} does not look like 0002_what_it_does.sql (four digits, underscore, lowercase words)`);
    }
    const sql = readFileSync(join(dir, name), 'utf8');
    out.push({ name, sql, checksum: checksumOf(sql) });
  }
  return out;
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

/**
 * Compare what the database has applied with the files. Returns the migrations still to apply, or throws
 * MigrationError describing the first refusal.
 */
export function pendingMigrations(applied: AppliedMigration[], migrations: Migration[]): Migration[] {
  const byName = new Map(migrations.map((m) => [m.name, m]));
  for (const row of applied) {
    const file = byName.get(row.name);
    if (!file) {
      throw new MigrationError(
        `migration ${row.name} was applied to this database but its file is missing from migrations/; ` +
          `restore it (applied migrations are append-only) or run the Splitballot release that created this database`,
      );
    }
    if (file.checksum !== row.checksum) {
      throw new MigrationError(
        `migration ${row.name} was edited after it was applied to this database (checksum ${row.checksum.slice(0, 12)}… recorded, ` +
          `${file.checksum.slice(0, 12)}… now); revert the file and put the change in a new migration instead`,
      );
    }
  }
  const appliedNames = new Set(applied.map((a) => a.name));
  const lastApplied = applied.length > 0 ? applied[applied.length - 1].name : null;
  const pending = migrations.filter((m) => !appliedNames.has(m.name));
  for (const m of pending) {
    if (lastApplied !== null && m.name < lastApplied) {
      throw new MigrationError(
        `migration ${m.name} is new but sorts before ${lastApplied}, which is already applied; rename it so that it sorts after every applied migration`,
      );
    }
  }
  return pending;
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
