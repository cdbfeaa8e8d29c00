/**
 * The migration files and the rules every engine's runner applies to them (one copy for SQLite and PostgreSQL):
 * numbered files `NNNN_what_it_does.sql` in migrations/<engine>/, found beside package.json; a checksum that ignores
 * CRLF vs LF; and the refusals — an applied migration whose file is missing, an applied migration whose file was
 * edited since, a new migration that sorts before one already applied. The runners (store/<engine>/migrate.ts) only
 * read what is applied and apply what is pending, each in their own transactions.
 */
import { createHash } from 'node:crypto';
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { MigrationError } from './types.js';

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

const MIGRATION_NAME = /^\d{4}_[a-z0-9_]+\.sql$/;

/** migrations/<engine>/ in the nearest ancestor of `start` that holds package.json (source tree or dist/). */
export function findMigrationsFolder(engine: 'sqlite' | 'postgres', start: string): string {
  let dir = resolve(start);
  for (let i = 0; i < 8; i++) {
    const candidate = join(dir, 'migrations', engine);
    if (existsSync(join(dir, 'package.json')) && existsSync(candidate) && statSync(candidate).isDirectory()) return candidate;
    const parent = dirname(dir);
    if (parent === dir) break;
    dir = parent;
  }
  throw new MigrationError(`cannot find the migrations/${engine}/ folder above ${start}; it ships beside package.json`);
}

/** SHA-256 (hex) of a migration file with CRLF turned into LF, so a checkout with other line ends is no edit. */
export function checksumOf(sql: string): string {
  return createHash('sha256').update(sql.replace(/\r\n/g, '\n'), 'utf8').digest('hex');
}

/** Every `.sql` file of `dir` in name order, with its checksum; a misnamed file is refused. */
export function loadMigrationFiles(dir: string): Migration[] {
  return readdirSync(dir)
    .filter((f) => f.endsWith('.sql'))
    .sort()
    .map((name) => {
      if (!MIGRATION_NAME.test(name)) {
        throw new MigrationError(`migration file name ${name} in ${dir} does not look like 0002_what_it_does.sql (four digits, underscore, lowercase words)`);
      }
      const sql = readFileSync(join(dir, name), 'utf8');
      return { name, sql, checksum: checksumOf(sql) };
    });
}

/**
 * Compare what the database has applied (in name order) with the files. Returns the migrations still to apply, or
 * throws MigrationError describing the first refusal. `folder` names the files' folder in the messages.
 */
export function pendingMigrations(applied: readonly AppliedMigration[], migrations: Migration[], folder: string): Migration[] {
  const byName = new Map(migrations.map((m) => [m.name, m]));
  for (const row of applied) {
    const file = byName.get(row.name);
    if (!file) {
      throw new MigrationError(
        `migration ${row.name} was applied to this database but its file is missing from ${folder}; ` +
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
