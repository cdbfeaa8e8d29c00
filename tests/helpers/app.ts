/**
 * Shared test helpers: a temporary database file, an app built on it (buildApp, never listening unless a test
 * asks supertest to), API keys, captured log lines, and the water-utility demo experiment (invented data).
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { FastifyInstance, InjectOptions, LightMyRequestResponse } from 'fastify';
import { afterAll, afterEach, beforeEach, expect } from 'vitest';
import { buildApp } from '../../server/http/app.js';
import { generateSecret, hashSecret } from '../../server/services/keys.js';
import { runCli } from '../../server/cli/run.js';
import type { Config } from '../../server/config.js';
import { openPostgresStore, redactUrl } from '../../server/store/postgres/store.js';
import { openSqliteStore, type SqliteStore } from '../../server/store/sqlite/store.js';
import { checkDatabase } from '../../server/store/sqlite/check.js';
import type { Scope, Store } from '../../server/store/types.js';
import { createTestDatabase, migratedTemplate, postgresAvailable, type TestDatabase } from '../store/postgres/pg-test-db.js';

/**
 * The engine the service-level tests run on: SPLITBALLOT_TEST_ENGINE=postgres (the "postgres" project of
 * vitest.config.ts) gives every test app a fresh PostgreSQL database of the test server (dropped when the app
 * closes); anything else, the SQLite file of today. Without a reachable server the PostgreSQL run fails with
 * CI=true and is skipped with a notice otherwise (see TEST_ENGINE_SKIPPED).
 */
export const TEST_ENGINE: 'sqlite' | 'postgres' = process.env.SPLITBALLOT_TEST_ENGINE === 'postgres' ? 'postgres' : 'sqlite';
const postgresHere = TEST_ENGINE === 'postgres' ? await postgresAvailable('the service tests on PostgreSQL') : false;
/** True when this file should not run: the PostgreSQL engine was asked for and no server is reachable (not in CI). */
export const TEST_ENGINE_SKIPPED = TEST_ENGINE === 'postgres' && !postgresHere;
// Then every test of the file is skipped (postgresAvailable printed the notice; with CI=true it threw instead).
if (TEST_ENGINE_SKIPPED) beforeEach((ctx) => ctx.skip());

/** The migrated template every PostgreSQL test app of this file copies (made on first use, dropped after the file). */
let template: Promise<{ name: string; drop(): Promise<void> }> | null = null;
afterAll(async () => {
  if (template) await (await template).drop();
  template = null;
});
function postgresTemplate(): Promise<{ name: string; drop(): Promise<void> }> {
  template ??= migratedTemplate(async (url) => (await openPostgresStore(url, { pool: { poolSize: 1 } })).close());
  return template;
}

export { WATER_ID, waterBillDefinition } from './water.js';
import { waterBillDefinition } from './water.js';

const createdDirs: string[] = [];
// Every temporary folder made by a test file is removed after that file's tests (registered when the file
// imports this helper; vitest isolates each file, so each file gets its own list).
afterAll(() => {
  for (const dir of createdDirs.splice(0)) rmSync(dir, { recursive: true, force: true });
});

/** A new folder under os.tmpdir(), removed after the test file. */
export function tempDir(prefix = 'splitballot-test-'): string {
  const dir = mkdtempSync(join(tmpdir(), prefix));
  createdDirs.push(dir);
  return dir;
}

export function testConfig(dbPath: string, overrides: Partial<Config> = {}): Config {
  return { port: 0, host: '127.0.0.1', dbPath, adminKeyHash: null, corsOrigins: [], logLevel: 'info', ...overrides };
}

/** Collects every log line the app writes. */
export class LogCapture {
  readonly lines: string[] = [];
  write(line: string): void {
    this.lines.push(line);
  }
  text(): string {
    return this.lines.join('');
  }
  parsed(): Record<string, unknown>[] {
    return this.lines.map((l) => JSON.parse(l) as Record<string, unknown>);
  }
}

export interface TestApp {
  app: FastifyInstance;
  store: SqliteStore;
  dir: string;
  dbPath: string;
  config: Config;
  logs: LogCapture;
  /** An admin key (made like `splitballot keys create --scope admin`). */
  adminKey: string;
  /** Authorization header for a secret. */
  auth(secret: string): { authorization: string };
  key(scope: Scope, experiment?: string | null, label?: string): Promise<string>;
  /** app.inject with the admin key unless headers.authorization is given (use null to send none). */
  request(opts: InjectOptions & { key?: string | null }): Promise<LightMyRequestResponse>;
  createWater(overrides?: Record<string, unknown>): Promise<LightMyRequestResponse>;
  /**
   * Rows of one read-only SQL query on whichever engine the app runs (SQLite `?` placeholders are turned into
   * `$1…` for PostgreSQL; bigint results come back as numbers on both). For "nothing was stored" checks.
   */
  sql(text: string, ...params: unknown[]): Promise<Record<string, unknown>[]>;
  /** The PostgreSQL database of this app (null on SQLite). */
  databaseUrl: string | null;
  /** The environment that points the command line at this app's database (SPLITBALLOT_DB or SPLITBALLOT_DATABASE_URL). */
  cliEnv(): Record<string, string>;
  /** How the command line names this app's database in its messages (the file, or the redacted URL, with the variable). */
  cliWhere(): string;
  /** `splitballot check` on this app's database, either engine: every invariant that does not hold, and integrity findings. */
  check(): Promise<{ problems: string[]; integrity: string[] }>;
  /** Close the app and build a new one on the same file (a restart). */
  restart(): Promise<void>;
  close(): Promise<void>;
}

export async function createKey(store: Store, scope: Scope, experiment: string | null = null, label = ''): Promise<string> {
  let experimentKey: number | null = null;
  if (experiment !== null) {
    const e = await store.experiments.getBySlug(experiment);
    if (!e) throw new Error(`no experiment ${experiment}`);
    experimentKey = e.key;
  }
  const secret = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(secret), scope, experimentKey, label, origin: 'cli', createdAt: new Date().toISOString() });
  return secret;
}

export async function startTestApp(options: { config?: Partial<Config>; dir?: string } = {}): Promise<TestApp> {
  const dir = options.dir ?? tempDir();
  const dbPath = join(dir, 'splitballot.db');
  const config = testConfig(dbPath, options.config);
  const logs = new LogCapture();
  // PostgreSQL: one fresh database per test app; the app is given an opened store (it does not own it).
  let pgDb: TestDatabase | null = null;
  let pgStore: Store | null = null;
  if (TEST_ENGINE === 'postgres') {
    if (!postgresHere) throw new Error('PostgreSQL is not reachable (check TEST_ENGINE_SKIPPED before starting apps)');
    pgDb = await createTestDatabase({ template: (await postgresTemplate()).name });
    pgStore = await openPostgresStore(pgDb.url, { pool: { poolSize: 4 } });
  }
  const build = () => buildApp(config, pgStore ? { logStream: logs, store: pgStore } : { logStream: logs });
  let app = build();
  await app.ready();
  const store = () => app.store as SqliteStore;
  const adminKey = await createKey(store(), 'admin', null, 'test admin');
  const t: TestApp = {
    get app() {
      return app;
    },
    get store() {
      return store();
    },
    dir,
    dbPath,
    config,
    logs,
    adminKey,
    auth: (secret) => ({ authorization: `Bearer ${secret}` }),
    key: (scope, experiment = null, label = '') => createKey(store(), scope, experiment, label),
    request: (opts) => {
      const { key, ...rest } = opts;
      const headers = { ...(rest.headers ?? {}) } as Record<string, string>;
      if (key !== null && headers.authorization === undefined) headers.authorization = `Bearer ${key ?? adminKey}`;
      return app.inject({ ...rest, headers });
    },
    async sql(text: string, ...params: unknown[]) {
      if (!pgStore) return store().db.prepare(text).all(...params) as Record<string, unknown>[];
      let i = 0;
      const r = await (pgStore as unknown as { database: { query(t: string, p: unknown[]): Promise<{ rows: Record<string, unknown>[] }> } }).database.query(
        text.replace(/\?/g, () => `$${++i}`),
        params,
      );
      return r.rows.map((row) => Object.fromEntries(Object.entries(row).map(([k, v]) => [k, typeof v === 'string' && /^-?\d+$/.test(v) ? Number(v) : v])));
    },
    databaseUrl: pgDb?.url ?? null,
    cliEnv: (): Record<string, string> => (pgDb ? { SPLITBALLOT_DATABASE_URL: pgDb.url } : { SPLITBALLOT_DB: dbPath }),
    cliWhere: () => (pgDb ? `${redactUrl(pgDb.url)} (SPLITBALLOT_DATABASE_URL)` : `${dbPath} (SPLITBALLOT_DB)`),
    async check() {
      if (pgStore) {
        const report = await (pgStore as unknown as { check(): Promise<{ problems: string[]; integrity: string[] }> }).check();
        return { problems: report.problems, integrity: report.integrity };
      }
      const report = checkDatabase(store().db);
      return { problems: report.problems, integrity: report.integrity };
    },
    createWater: (overrides = {}) =>
      app.inject({ method: 'POST', url: '/v1/experiments', headers: { authorization: `Bearer ${adminKey}` }, payload: waterBillDefinition(overrides) }),
    async restart() {
      await app.close();
      app = build();
      await app.ready();
    },
    async close() {
      await app.close();
      if (pgStore) await pgStore.close();
      if (pgDb) await pgDb.drop();
      rmSync(dir, { recursive: true, force: true });
    },
  } as TestApp;
  return t;
}

/**
 * A fresh app for every test of the file (closed after it), with the water experiment created unless
 * `water: false`. `use` receives each new app: `let t: TestApp; eachTestApp((app) => (t = app));`.
 */
export function eachTestApp(use: (t: TestApp) => void, options: { water?: boolean; config?: Partial<Config> } = {}): void {
  let current: TestApp | undefined;
  beforeEach(async () => {
    current = await startTestApp({ config: options.config });
    use(current);
    if (options.water !== false) expect((await current.createWater()).statusCode).toBe(201);
  });
  afterEach(async () => {
    await current?.close();
    current = undefined;
  });
}

/** Run the splitballot command line in this process with LOG_LEVEL=silent (plus env), capturing its output. */
export async function cli(args: string[], env: Record<string, string> = {}): Promise<{ code: number; stdout: string; stderr: string }> {
  let stdout = '';
  let stderr = '';
  const code = await runCli(args, {
    stdout: { write: (s: string) => (stdout += s) },
    stderr: { write: (s: string) => (stderr += s) },
    env: { LOG_LEVEL: 'silent', ...env },
  });
  return { code, stdout, stderr };
}

/** Every application table of the app's database, in name order (either engine; migration bookkeeping left out). */
export async function tableNames(t: TestApp): Promise<string[]> {
  const rows = t.databaseUrl
    ? await t.sql(`SELECT tablename AS name FROM pg_catalog.pg_tables WHERE schemaname = current_schema() AND tablename <> 'schema_migrations' ORDER BY tablename COLLATE "C"`)
    : await t.sql(`SELECT name FROM sqlite_schema WHERE type = 'table' AND name NOT LIKE 'sqlite_%' AND name <> 'schema_migrations' ORDER BY name`);
  return rows.map((r) => r.name as string);
}

/** Every row of every application table of a SQLite store, for "the database is unchanged" comparisons. */
export function dumpTables(store: SqliteStore): Record<string, unknown[]> {
  const out: Record<string, unknown[]> = {};
  for (const t of DATA_TABLES) out[t] = store.db.prepare(`SELECT * FROM ${t} ORDER BY 1, 2`).all();
  return out;
}

const DATA_TABLES = ['experiments', 'conditions', 'measures', 'responses', 'response_values', 'value_counts', 'rejected_value_counts', 'api_keys'];

/** Every row of the named tables (default: the data tables) of a test app's database, either engine, for "unchanged" comparisons. */
export async function dumpAppTables(
  t: TestApp,
  tables = DATA_TABLES,
): Promise<Record<string, Record<string, unknown>[]>> {
  const out: Record<string, Record<string, unknown>[]> = {};
  for (const name of tables) out[name] = await t.sql(`SELECT * FROM "${name}" ORDER BY 1, 2`);
  return out;
}

/** Open the store of a file directly (e.g. after the app closed). */
export function openStore(dbPath: string): SqliteStore {
  return openSqliteStore(dbPath);
}

/** A valid response for the water experiment. */
export function waterResponse(overrides: Record<string, unknown> = {}, values: Record<string, unknown> = {}): Record<string, unknown> {
  return { condition: 'bill-first', values: { satisfaction: 7, trust: 5, fair_price: 42.5, ...values }, ...overrides };
}
