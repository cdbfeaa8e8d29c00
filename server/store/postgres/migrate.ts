/**
 * Migration runner for PostgreSQL, with the same rules as the SQLite one: numbered files in migrations/postgres/
 * (`0001_init.sql`, …) are applied in name order, each in its own transaction, and recorded in
 * `schema_migrations(name, checksum, applied_at)`. Refused, with a message that says what to do (nothing applied):
 *  - an applied migration whose file was edited since (checksum differs);
 *  - an applied migration whose file is missing;
 *  - a new migration whose name sorts before one already applied (it would run out of order).
 * Checksum: SHA-256 (hex) of the file with CRLF turned into LF.
 *
 * Several service processes may start at once against one database: the whole run holds a session-level advisory
 * lock (MIGRATION_LOCK), so exactly one applies the pending files and the others then find them applied.
 */
import { createHash } from 'node:crypto';
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { MigrationError } from '../types.js';
import type { PostgresDatabase, Queryable } from './pool.js';

export interface PgMigration {
  name: string;
  sql: string;
  checksum: string;
}

export interface PgAppliedMigration {
  name: string;
  checksum: string;
  appliedAt: string;
}

export interface PgMigrateResult {
  applied: string[];
  alreadyApplied: number;
}


/** Advisory lock key held while migrating (an arbitrary constant of this project: "sbmigr" in ASCII). */
export const MIGRATION_LOCK = 0x73626d69677272;

const MIGRATION_NAME = /^\d{4}_[a-z0-9_]+\.sql$/;

/** migrations/postgres/ of this installation (the nearest ancestor holding package.json and migrations/postgres/). */
export function findPostgresMigrationsDir(start = dirname(fileURLToPath(import.meta.url))): string {
  let dir = resolve(start);
  for (let i = 0; i < 8; i++) {
    const candidate = join(dir, 'migrations', 'postgres');
    if (existsSync(join(dir, 'package.json')) && existsSync(candidate) && statSync(candidate).isDirectory()) return candidate;
    const parent = dirname(dir);
    if (parent === dir) break;
    dir = parent;
  }
  throw new MigrationError(`cannot find the migrations/postgres/ folder above ${start}; it ships beside package.json`);
}

export function pgChecksumOf(sql: string): string {
  return createHash('sha256').update(sql.replace(/\r\n/g, '\n'), 'utf8').digest('hex');
}

export function loadPostgresMigrations(dir: string = findPostgresMigrationsDir()): PgMigration[] {
  const names = readdirSync(dir).filter((f) => f.endsWith('.sql')).sort();
  return names.map((name) => {
    if (!MIGRATION_NAME.test(name)) {
      throw new MigrationError(`migration file name ${name} in ${dir} does not look like 0002_what_it_does.sql (four digits, underscore, lowercase words)`);
    }
    const sql = readFileSync(join(dir, name), 'utf8');
    return { name, sql, checksum: pgChecksumOf(sql) };
  });
}

/** The migrations still to apply, or a MigrationError describing the first refusal. */
export function pendingPostgresMigrations(applied: PgAppliedMigration[], migrations: PgMigration[]): PgMigration[] {
  const byName = new Map(migrations.map((m) => [m.name, m]));
  for (const row of applied) {
    const file = byName.get(row.name);
    if (!file) {
      throw new MigrationError(
        `migration ${row.name} was applied to this database but its file is missing from migrations/postgres/; ` +
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

async function readApplied(c: Queryable): Promise<PgAppliedMigration[]> {
  const exists = await c.query(`SELECT 1 FROM pg_catalog.pg_tables WHERE schemaname = current_schema() AND tablename = 'schema_migrations'`);
  if (exists.rowCount === 0) return [];
  const r = await c.query<PgAppliedMigration>(`SELECT name, checksum, applied_at AS "appliedAt" FROM schema_migrations ORDER BY name`);
  return r.rows;
}

/** Apply every pending migration, each in its own transaction, under the migration advisory lock. */
export async function migratePostgres(
  db: PostgresDatabase,
  migrations: PgMigration[] = loadPostgresMigrations(),
  now: () => string = () => new Date().toISOString(),
): Promise<PgMigrateResult> {
  const client = await db.pool.connect();
  let broken: Error | undefined;
  try {
    // A migration may build an index over a large table, and another process may hold the lock while it migrates:
    // neither is bounded by the pool's statement timeout (this session only; reset before the client goes back).
    await client.query(`SET statement_timeout = 0`);
    await client.query(`SELECT pg_advisory_lock($1)`, [MIGRATION_LOCK]);
    try {
      await client.query(`CREATE TABLE IF NOT EXISTS schema_migrations (
        name       text NOT NULL PRIMARY KEY,
        checksum   text NOT NULL,
        applied_at text NOT NULL
      )`);
      const initial = await readApplied(client);
      const pending = pendingPostgresMigrations(initial, migrations);
      const appliedNow: string[] = [];
      for (const m of pending) {
        try {
          await client.query('BEGIN');
          await client.query(m.sql);
          await client.query(`INSERT INTO schema_migrations (name, checksum, applied_at) VALUES ($1, $2, $3)`, [m.name, m.checksum, now()]);
          await client.query('COMMIT');
          appliedNow.push(m.name);
        } catch (err) {
          await client.query('ROLLBACK').catch(() => undefined);
          throw new MigrationError(`migration ${m.name} failed and was rolled back: ${(err as Error).message}`, { cause: err });
        }
      }
      return { applied: appliedNow, alreadyApplied: initial.length };
    } finally {
      await client.query(`SELECT pg_advisory_unlock($1)`, [MIGRATION_LOCK]).catch(() => undefined);
      await client.query(`RESET statement_timeout`).catch(() => undefined);
    }
  } catch (err) {
    if (!(err instanceof MigrationError)) broken = err as Error;
    throw err;
  } finally {
    client.release(broken);
  }
}

/** Readiness: every file applied with its checksum, nothing applied that is not a file. */
export async function postgresMigrationsCurrent(db: PostgresDatabase, migrations: PgMigration[]): Promise<{ ok: true } | { ok: false; reason: string }> {
  try {
    const client = await db.pool.connect();
    try {
      const pending = pendingPostgresMigrations(await readApplied(client), migrations);
      if (pending.length > 0) return { ok: false, reason: `${pending.length} migration(s) not applied: ${pending.map((m) => m.name).join(', ')}` };
      return { ok: true };
    } finally {
      client.release();
    }
  } catch (err) {
    if (err instanceof MigrationError) return { ok: false, reason: err.message };
    return { ok: false, reason: 'the database could not be read' };
  }
}
