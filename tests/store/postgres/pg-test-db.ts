/**
 * Throwaway PostgreSQL databases for the store tests. The server is the one on 127.0.0.1:5432 (user postgres,
 * trust auth) unless SPLITBALLOT_TEST_PG_ADMIN_URL names another maintenance database. Every call creates
 * `sb_test_<random>`; drop() removes it WITH (FORCE).
 *
 * When the server cannot be reached: with CI=true the tests fail loudly (postgresAvailable throws); otherwise they
 * are skipped with a notice on stderr.
 */
import { randomBytes } from 'node:crypto';
import pg from 'pg';

const ADMIN_URLS = process.env.SPLITBALLOT_TEST_PG_ADMIN_URL
  ? [process.env.SPLITBALLOT_TEST_PG_ADMIN_URL]
  : ['postgres://postgres@127.0.0.1:5432/postgres', 'postgres://postgres@127.0.0.1:5432/test'];

let adminUrl: string | null = null;

async function tryConnect(url: string): Promise<boolean> {
  const c = new pg.Client({ connectionString: url, connectionTimeoutMillis: 3000 });
  try {
    await c.connect();
    await c.query('SELECT 1');
    return true;
  } catch {
    return false;
  } finally {
    await c.end().catch(() => undefined);
  }
}

/** Is the test server there? Throws when CI=true and it is not; prints a notice and returns false otherwise. */
export async function postgresAvailable(what: string): Promise<boolean> {
  for (const url of ADMIN_URLS) {
    if (await tryConnect(url)) {
      adminUrl = url;
      return true;
    }
  }
  const message = `PostgreSQL is not reachable at ${ADMIN_URLS.join(' or ')}`;
  if (process.env.CI === 'true') throw new Error(`${message}; CI=true requires it for ${what}`);
  process.stderr.write(`NOTICE: ${message}; skipping ${what}\n`);
  return false;
}

export interface TestDatabase {
  name: string;
  url: string;
  /** A client connected to the test database (for tampering and inspection); closed by drop(). */
  admin(): Promise<pg.Client>;
  drop(): Promise<void>;
}

async function withAdmin<T>(fn: (c: pg.Client) => Promise<T>): Promise<T> {
  if (!adminUrl) throw new Error('postgresAvailable() was not called or returned false');
  const c = new pg.Client({ connectionString: adminUrl });
  await c.connect();
  try {
    return await fn(c);
  } finally {
    await c.end();
  }
}

/**
 * A fresh database. With `template` (a database made by migratedTemplate()), a copy of it: already migrated, so
 * opening a store on it applies nothing (CREATE DATABASE … TEMPLATE copies files: ≈ 0.1 s instead of running
 * every migration).
 */
export async function createTestDatabase(options: { template?: string } = {}): Promise<TestDatabase> {
  const name = `sb_test_${randomBytes(6).toString('hex')}`;
  await withAdmin((c) => c.query(`CREATE DATABASE ${name}${options.template ? ` TEMPLATE ${options.template}` : ''}`));
  const base = new URL(adminUrl!);
  base.pathname = `/${name}`;
  const url = base.toString();
  const clients: pg.Client[] = [];
  return {
    name,
    url,
    async admin() {
      const c = new pg.Client({ connectionString: url });
      await c.connect();
      clients.push(c);
      return c;
    },
    async drop() {
      for (const c of clients.splice(0)) await c.end().catch(() => undefined);
      await withAdmin((c) => c.query(`DROP DATABASE IF EXISTS ${name} WITH (FORCE)`));
    },
  };
}

/** End every other connection to the database (a server restart as far as the pool can tell). */
export async function terminateConnections(db: TestDatabase, filter = ''): Promise<number> {
  return withAdmin(async (c) => {
    const r = await c.query(
      `SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = $1 AND pid <> pg_backend_pid() ${filter}`,
      [db.name],
    );
    return r.rowCount ?? 0;
  });
}

/**
 * One migrated database per test file to copy fresh databases from (see createTestDatabase); `migrate` opens and
 * closes a store on it. Dropped by the returned function (call it in afterAll).
 */
export async function migratedTemplate(migrate: (url: string) => Promise<void>): Promise<{ name: string; drop(): Promise<void> }> {
  const db = await createTestDatabase();
  await migrate(db.url);
  return { name: db.name, drop: () => db.drop() };
}
