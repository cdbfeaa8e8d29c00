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
import { dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { checksumOf, findMigrationsFolder, loadMigrationFiles, pendingMigrations, type AppliedMigration, type Migration } from '../migration-files.js';
import { MigrationError } from '../types.js';
import type { PostgresDatabase, Queryable } from './pool.js';

export type PgMigration = Migration;
export type PgAppliedMigration = AppliedMigration;

export interface PgMigrateResult {
  applied: string[];
  alreadyApplied: number;
}


/** Advisory lock key held while migrating (an arbitrary constant of this project: "sbmigr" in ASCII). */
export const MIGRATION_LOCK = 0x73626d69677272;

/** migrations/postgres/ of this installation (beside package.json). */
export function findPostgresMigrationsDir(start = dirname(fileURLToPath(import.meta.url))): string {
  return findMigrationsFolder('postgres', start);
}

export const pgChecksumOf = checksumOf;

export function loadPostgresMigrations(dir: string = findPostgresMigrationsDir()): PgMigration[] {
  return loadMigrationFiles(dir);
}

/** The migrations still to apply, or a MigrationError describing the first refusal (rules: ../migration-files.ts). */
export function pendingPostgresMigrations(applied: PgAppliedMigration[], migrations: PgMigration[]): PgMigration[] {
  return pendingMigrations(applied, migrations, 'migrations/postgres/');
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
