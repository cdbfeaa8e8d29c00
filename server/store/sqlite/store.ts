/**
 * The SQLite-backed Store: opens the file, applies migrations, and hands out the repositories.
 * Everything SQLite-specific stays under server/store/sqlite/.
 */
import { SqliteApiKeyRepository } from './api-keys.js';
import { sqliteBulk } from './bulk.js';
import { SqliteAuditRepository } from './audit.js';
import { SqliteExperimentRepository } from './experiments.js';
import { loadMigrations, migrate, migrationsCurrent, type Migration, type MigrateResult } from './migrate.js';
import { closeDatabase, openDatabase, type SqliteDatabase } from './open.js';
import { SqliteAssignmentRepository, SqliteLookRepository } from './monitoring.js';
import { SqliteResponseRepository } from './responses.js';
import type { Store } from '../types.js';

export interface SqliteStore extends Store {
  responses: SqliteResponseRepository;
  /** What migrate() did when the store was opened. */
  migration: MigrateResult;
  /** The underlying connection, for code inside server/store/sqlite/ and for tests that inspect the file. */
  readonly db: SqliteDatabase;
}

/**
 * Open (creating if needed) the database at `path`, apply pending migrations (throws MigrationError on a refusal)
 * and return the store. The caller owns it and must close() it.
 */
export function openSqliteStore(path: string, options: { migrations?: Migration[] } = {}): SqliteStore {
  const migrations = options.migrations ?? loadMigrations();
  const db = openDatabase(path);
  let migration: MigrateResult;
  try {
    migration = migrate(db, migrations);
  } catch (err) {
    db.close();
    throw err;
  }
  const ping = db.prepare(`SELECT 1`).pluck();
  const store: SqliteStore = {
    db,
    migration,
    experiments: new SqliteExperimentRepository(db),
    responses: new SqliteResponseRepository(db),
    apiKeys: new SqliteApiKeyRepository(db),
    audit: new SqliteAuditRepository(db),
    looks: new SqliteLookRepository(db),
    assignments: new SqliteAssignmentRepository(db),
    async readiness() {
      try {
        ping.get();
      } catch {
        return { ready: false, reason: 'the database cannot be read' };
      }
      const current = migrationsCurrent(db, migrations);
      return current.ok ? { ready: true, migrations: migrations.length } : { ready: false, reason: current.reason };
    },
    async close() {
      closeDatabase(db);
    },
    get bulk() {
      return bulk;
    },
  };
  const bulk = sqliteBulk(store);
  return store;
}
