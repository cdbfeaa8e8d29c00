/**
 * The PostgreSQL-backed Store: checks SPLITBALLOT_DATABASE_URL, opens the pool, proves the server answers,
 * applies pending migrations (migrations/postgres/) and hands out the repositories, the bulk export/import, the
 * consistency check and a change notifier. Every PostgreSQL statement of the service lives under this folder.
 *
 * Several service processes may share one database: every read-modify-write locks what it changes (the
 * experiment's row, or a transaction advisory lock for assignments), see pool.ts and the repositories' headers.
 */
import type { ChangeNotifier, Store } from '../types.js';
import { PostgresApiKeyRepository } from './api-keys.js';
import { PostgresAuditRepository } from './audit.js';
import { beginBulkImportPostgres, exportResponsePagesPostgres, postgresBulk, type PgBulkImport, type PgExportRow } from './bulk.js';
import { checkPostgres, type PostgresCheckReport } from './check.js';
import { PostgresExperimentRepository } from './experiments.js';
import { loadPostgresMigrations, migratePostgres, postgresMigrationsCurrent, type PgMigrateResult, type PgMigration } from './migrate.js';
import { PostgresAssignmentRepository, PostgresLookRepository } from './monitoring.js';
import { PostgresChangeNotifier, type NotifierOptions } from './notifier.js';
import {
  createDatabase,
  DATABASE_URL_VARIABLE,
  parseDatabaseUrl,
  redactUrl,
  StoreOpenError,
  type PostgresDatabase,
  type PostgresPoolOptions,
} from './pool.js';
import { PostgresResponseRepository } from './responses.js';

export interface PostgresStore extends Store {
  responses: PostgresResponseRepository;
  /** What the migration run did when the store was opened. */
  migration: PgMigrateResult;
  /** The pool and transaction helpers, for code inside this folder and for tests. */
  readonly database: PostgresDatabase;
  /** Every stored response of one experiment, page by page (see bulk.ts). */
  exportResponsePages(experimentKey: number, measureKeys: readonly number[], pageSize?: number): AsyncGenerator<PgExportRow[], void, undefined>;
  /** One all-or-nothing import transaction (see bulk.ts). */
  beginBulkImport(experimentKey: number, receivedAt: string, apiKeyId: number | null): Promise<PgBulkImport>;
  /** `splitballot check`: every invariant recomputed (same report shape as the SQLite check). */
  check(onStage?: (stage: string) => void): Promise<PostgresCheckReport>;
  /**
   * A LISTEN connection announcing committed changes from every process (one per call; close it when done).
   * Resolves once it listens, or after the connect timeout with the notifier still retrying.
   */
  openNotifier(options?: NotifierOptions): Promise<ChangeNotifier>;
}

export interface OpenPostgresStoreOptions {
  pool?: PostgresPoolOptions;
  migrations?: PgMigration[];
}

/**
 * Open the store at `url` (the value of SPLITBALLOT_DATABASE_URL). Throws StoreOpenError with one line naming the
 * variable and what failed (bad URL, unreachable server, refused login, missing database), MigrationError when
 * a migration is refused. The caller owns the store and must close() it.
 */
export async function openPostgresStore(url: string | undefined, options: OpenPostgresStoreOptions = {}): Promise<PostgresStore> {
  const connectionString = parseDatabaseUrl(url);
  const migrations = options.migrations ?? loadPostgresMigrations();
  const db = createDatabase(connectionString, options.pool);
  try {
    await db.pool.query('SELECT 1');
  } catch (err) {
    await db.end().catch(() => undefined);
    throw new StoreOpenError(`${DATABASE_URL_VARIABLE}: cannot connect to ${redactUrl(connectionString)}: ${describeConnectError(err)}`, { cause: err });
  }
  let migration: PgMigrateResult;
  try {
    migration = await migratePostgres(db, migrations);
  } catch (err) {
    await db.end().catch(() => undefined);
    throw err;
  }
  const responses = new PostgresResponseRepository(db);
  const experiments = new PostgresExperimentRepository(db);
  const notifiers = new Set<ChangeNotifier>();
  let closed = false;
  return {
    database: db,
    migration,
    experiments,
    responses,
    apiKeys: new PostgresApiKeyRepository(db),
    audit: new PostgresAuditRepository(db),
    looks: new PostgresLookRepository(db),
    assignments: new PostgresAssignmentRepository(db),
    bulk: postgresBulk(db),
    exportResponsePages: (experimentKey, measureKeys, pageSize) => exportResponsePagesPostgres(db, experimentKey, measureKeys, pageSize),
    beginBulkImport: (experimentKey, receivedAt, apiKeyId) => beginBulkImportPostgres(db, experimentKey, receivedAt, apiKeyId),
    check: (onStage) => checkPostgres(db, migrations, onStage),
    async openNotifier(notifierOptions) {
      const n = new PostgresChangeNotifier(connectionString, { connectTimeoutMs: db.options.connectTimeoutMs, ...notifierOptions });
      notifiers.add(n);
      // Wait for the first LISTEN, but never longer than a connection attempt: when the server is away the
      // notifier keeps retrying by itself and announces { kind: 'resync' } once it listens.
      let timer: NodeJS.Timeout | undefined;
      await Promise.race([n.ready(), new Promise<void>((resolve) => (timer = setTimeout(resolve, db.options.connectTimeoutMs + 1000)))]);
      clearTimeout(timer);
      const close = n.close.bind(n);
      n.close = async () => {
        notifiers.delete(n);
        await close();
      };
      return n;
    },
    async readiness() {
      try {
        await db.pool.query('SELECT 1');
      } catch {
        return { ready: false, reason: 'the database cannot be reached' };
      }
      const current = await postgresMigrationsCurrent(db, migrations);
      return current.ok ? { ready: true, migrations: migrations.length } : { ready: false, reason: current.reason };
    },
    async close() {
      if (closed) return;
      closed = true;
      for (const n of [...notifiers]) await n.close();
      await db.end();
    },
  };
}

/** One short phrase for a failed first connection (no stack). */
function describeConnectError(err: unknown): string {
  const e = err as { code?: string; message?: string };
  switch (e.code) {
    case 'ECONNREFUSED':
      return 'connection refused (is PostgreSQL running and listening there?)';
    case 'ENOTFOUND':
    case 'EAI_AGAIN':
      return 'host not found';
    case 'ETIMEDOUT':
      return 'connection timed out';
    case '3D000':
      return 'the database does not exist';
    case '28P01':
    case '28000':
      return `authentication failed (${e.message ?? ''})`;
    default:
      return (e.message ?? String(err)).split('\n')[0];
  }
}

/** Re-exported for callers that only need the typed errors and the default settings. */
export { StoreOpenError, StoreUnavailableError, POOL_DEFAULTS, DATABASE_URL_VARIABLE, redactUrl } from './pool.js';
export { MigrationError } from '../types.js';
