/**
 * The PostgreSQL connection pool (node-postgres), its timeouts, the typed errors the service maps to HTTP
 * statuses, and the two transaction shapes every repository uses:
 *
 *  - write(fn): BEGIN (READ COMMITTED) … COMMIT on one pooled client. Read-modify-write is made safe across
 *    processes by row locks: every writer of an experiment first locks that experiment's row
 *    (`SELECT … FOR NO KEY UPDATE`, lockExperiments()), in key order when it needs several, so writers of one
 *    experiment run one after another on every node and never deadlock. Under READ COMMITTED each statement
 *    after the lock sees everything committed before the lock was granted. A serialization failure or a
 *    deadlock (40001, 40P01) is retried a few times. The promise settles only after COMMIT returned:
 *    acknowledged means committed. writeLocked(keys, fn) is the same with the row lock sent in one message
 *    with BEGIN (ingest: one round trip fewer).
 *  - snapshot(fn): BEGIN ISOLATION LEVEL REPEATABLE READ, READ ONLY: every statement sees one snapshot, so a
 *    dataVersion, the values epoch and the data read beside them belong together.
 *
 * Timeouts: connecting waits at most connectTimeoutMs (default 5 s), a statement at most statementTimeoutMs
 * (default 30 s, also bounding lock waits), an idle transaction at most 60 s, and the client gives up on a
 * query after statementTimeoutMs + 5 s even when the server never answers (a dead network). A lost connection,
 * a refused connection, a server shutting down or a timeout becomes StoreUnavailableError (HTTP 503 with
 * Retry-After); the pool drops broken clients and opens new ones by itself on the next request.
 *
 * Type parsing: bigint (int8) and numeric columns come back as JavaScript numbers (keys, counts and sums stay far
 * below 2^53); double precision is exact (PostgreSQL 12+ sends the shortest round-trip text).
 */
import pg from 'pg';
import { StoreOpenError, StoreUnavailableError } from '../types.js';

export const DATABASE_URL_VARIABLE = 'SPLITBALLOT_DATABASE_URL';

export interface PostgresPoolOptions {
  /** Connections in the pool (default 10). */
  poolSize?: number;
  /** Time to open a connection before giving up, ms (default 5,000). */
  connectTimeoutMs?: number;
  /** statement_timeout of every connection, ms (default 30,000). */
  statementTimeoutMs?: number;
  /** idle_in_transaction_session_timeout, ms (default 60,000). */
  idleInTransactionTimeoutMs?: number;
  /** Idle connections are closed after this, ms (default 30,000). */
  idleTimeoutMs?: number;
  /** Seconds a client is told to wait when the database is unavailable (default 5). */
  retryAfterSeconds?: number;
  /** application_name shown in pg_stat_activity (default "splitballot"). */
  applicationName?: string;
}

export const POOL_DEFAULTS = Object.freeze({
  poolSize: 10,
  connectTimeoutMs: 5000,
  statementTimeoutMs: 30_000,
  idleInTransactionTimeoutMs: 60_000,
  idleTimeoutMs: 30_000,
  retryAfterSeconds: 5,
  applicationName: 'splitballot',
});

export { StoreOpenError, StoreUnavailableError };

/** SQLSTATE classes and codes that mean "the database is not there right now". */
const UNAVAILABLE_CODES = new Set(['57P01', '57P02', '57P03', '53300', '53000', '57014', '55P03', '25P03', '08000', '08001', '08003', '08004', '08006', '08007']);
const NETWORK_CODES = new Set(['ECONNREFUSED', 'ECONNRESET', 'ETIMEDOUT', 'EHOSTUNREACH', 'ENETUNREACH', 'EPIPE', 'ENOTFOUND', 'EAI_AGAIN']);

/** Is this error a lost or refused connection, a timeout, or a server going away? */
export function isUnavailable(err: unknown): boolean {
  if (!(err instanceof Error)) return false;
  if (err instanceof StoreUnavailableError) return true;
  const code = (err as { code?: unknown }).code;
  if (typeof code === 'string' && (UNAVAILABLE_CODES.has(code) || NETWORK_CODES.has(code) || code.startsWith('08'))) return true;
  const m = err.message;
  return (
    /Connection terminated/i.test(m) ||
    /timeout exceeded when trying to connect/i.test(m) ||
    /Query read timeout/i.test(m) ||
    /Client has encountered a connection error/i.test(m) ||
    /Connection ended/i.test(m) ||
    /not queryable/i.test(m)
  );
}

/** Turn a connection-level failure into StoreUnavailableError; anything else is returned as it is. */
export function mapError(err: unknown, retryAfterSeconds: number): unknown {
  if (err instanceof StoreUnavailableError) return err;
  if (isUnavailable(err)) {
    const detail = err instanceof Error ? err.message : String(err);
    return new StoreUnavailableError(`the database is unavailable: ${detail}`, retryAfterSeconds, { cause: err });
  }
  return err;
}

const RETRYABLE = new Set(['40001', '40P01']);
const MAX_ATTEMPTS = 4;

export type Queryable = pg.PoolClient;

export interface PostgresDatabase {
  readonly pool: pg.Pool;
  readonly options: Required<PostgresPoolOptions>;
  readonly connectionString: string;
  /** One statement outside an explicit transaction (autocommit). */
  query<R extends pg.QueryResultRow = pg.QueryResultRow>(text: string, values?: unknown[]): Promise<pg.QueryResult<R>>;
  /**
   * One statement outside an explicit transaction, as a named prepared statement (see PreparedStatement): parsed and
   * planned once per connection, then one round trip (Bind/Execute) per call. For the hot reads of every request.
   */
  prepared<R extends pg.QueryResultRow = pg.QueryResultRow>(statement: PreparedStatement, values: unknown[]): Promise<pg.QueryResult<R>>;
  /** A READ COMMITTED write transaction (see the header); retried on serialization failures and deadlocks. */
  write<T>(fn: (c: Queryable) => Promise<T>): Promise<T>;
  /**
   * write() whose first statement locks the rows of these experiments (as lockExperiments does), sent in the same
   * message as BEGIN: one round trip fewer before the lock for the writers that run most often (ingest).
   */
  writeLocked<T>(experimentKeys: readonly number[], fn: (c: Queryable, locked: Map<number, ExperimentLock>) => Promise<T>): Promise<T>;
  /** A REPEATABLE READ, READ ONLY transaction: one snapshot for every statement. */
  snapshot<T>(fn: (c: Queryable) => Promise<T>): Promise<T>;
  end(): Promise<void>;
}

/**
 * A statement every request runs, prepared once per pooled connection under a fixed name. Its text must never
 * change while a process runs (node-postgres refuses a known name with another text) and its result columns must
 * not depend on a table's column list (`SELECT *` would fail with "cached plan must not change result type" after
 * a migration adds a column; build json instead). Declare each one as a module-level constant.
 */
export interface PreparedStatement {
  readonly name: string;
  readonly text: string;
}

/** Parse bigint and numeric as numbers (see the header). Per pool, so the process-wide defaults are untouched. */
const typeParsers: pg.CustomTypesConfig = {
  getTypeParser: ((oid: number, format?: 'text' | 'binary') => {
    if (oid === 20 || oid === 1700) return (v: string) => Number(v);
    return pg.types.getTypeParser(oid, format as 'text');
  }) as pg.CustomTypesConfig['getTypeParser'],
};

/** Check the URL's shape without connecting (throws StoreOpenError naming the variable). */
export function parseDatabaseUrl(url: string | undefined): string {
  if (url === undefined || url.trim() === '') throw new StoreOpenError(`${DATABASE_URL_VARIABLE} is empty; set it to postgres://user@host:5432/database`);
  let parsed: URL;
  try {
    parsed = new URL(url);
  } catch {
    throw new StoreOpenError(`${DATABASE_URL_VARIABLE} is not a valid URL; expected postgres://user@host:5432/database`);
  }
  if (parsed.protocol !== 'postgres:' && parsed.protocol !== 'postgresql:') {
    throw new StoreOpenError(`${DATABASE_URL_VARIABLE} must start with postgres:// or postgresql:// (got ${parsed.protocol}//)`);
  }
  if (parsed.hostname === '' && !parsed.searchParams.has('host')) throw new StoreOpenError(`${DATABASE_URL_VARIABLE} names no host`);
  if (parsed.pathname === '' || parsed.pathname === '/') throw new StoreOpenError(`${DATABASE_URL_VARIABLE} names no database (add /name after the host)`);
  return url;
}

/** The URL with any password replaced, for messages. */
export function redactUrl(url: string): string {
  try {
    const u = new URL(url);
    if (u.password) u.password = '***';
    return `${u.protocol}//${u.username ? `${u.username}${u.password ? ':***' : ''}@` : ''}${u.host}${u.pathname}`;
  } catch {
    return '(unparseable URL)';
  }
}

export function createDatabase(connectionString: string, options: PostgresPoolOptions = {}): PostgresDatabase {
  const o: Required<PostgresPoolOptions> = { ...POOL_DEFAULTS, ...stripUndefined(options) };
  if (!Number.isInteger(o.poolSize) || o.poolSize < 1) throw new RangeError(`the pool size must be a whole number ≥ 1 (got ${o.poolSize})`);
  const pool = new pg.Pool({
    connectionString,
    max: o.poolSize,
    connectionTimeoutMillis: o.connectTimeoutMs,
    idleTimeoutMillis: o.idleTimeoutMs,
    statement_timeout: o.statementTimeoutMs,
    idle_in_transaction_session_timeout: o.idleInTransactionTimeoutMs,
    query_timeout: o.statementTimeoutMs + 5000,
    keepAlive: true,
    application_name: o.applicationName,
    types: typeParsers,
  });
  // An idle client that loses its connection emits 'error' on the pool; the pool drops it and opens a new one on the
  // next request. Without a listener the process would crash.
  pool.on('error', () => undefined);
  const retryAfter = o.retryAfterSeconds;

  async function withClient<T>(fn: (c: pg.PoolClient) => Promise<T>): Promise<T> {
    let client: pg.PoolClient;
    try {
      client = await pool.connect();
    } catch (err) {
      throw mapError(err, retryAfter);
    }
    const lent = guardLentClient(client);
    try {
      return await fn(client);
    } catch (err) {
      if (isUnavailable(err)) lent.markBroken(err as Error);
      throw mapError(err, retryAfter);
    } finally {
      lent.release();
    }
  }

  async function transaction<T>(begin: string, fn: (c: pg.PoolClient, begun: pg.QueryResult | pg.QueryResult[]) => Promise<T>): Promise<T> {
    for (let attempt = 1; ; attempt++) {
      try {
        return await withClient(async (c) => {
          try {
            // Inside the try: when BEGIN shares its message with the lock and the lock fails, the transaction is
            // open and aborted, and the ROLLBACK below ends it before the client goes back to the pool.
            const begun = (await c.query(begin)) as pg.QueryResult | pg.QueryResult[];
            const out = await fn(c, begun);
            await c.query('COMMIT');
            return out;
          } catch (err) {
            try {
              await c.query('ROLLBACK');
            } catch {
              // the connection is gone; the server rolls back by itself
            }
            throw err;
          }
        });
      } catch (err) {
        const code = (err as { code?: unknown }).code;
        if (typeof code === 'string' && RETRYABLE.has(code) && attempt < MAX_ATTEMPTS) {
          await new Promise((r) => setTimeout(r, 5 * attempt + Math.random() * 10));
          continue;
        }
        throw err;
      }
    }
  }

  return {
    pool,
    options: o,
    connectionString,
    async query<R extends pg.QueryResultRow>(text: string, values?: unknown[]) {
      try {
        return await pool.query<R>(text, values);
      } catch (err) {
        throw mapError(err, retryAfter);
      }
    },
    async prepared<R extends pg.QueryResultRow>(statement: PreparedStatement, values: unknown[]) {
      try {
        return await pool.query<R>({ name: statement.name, text: statement.text, values });
      } catch (err) {
        throw mapError(err, retryAfter);
      }
    },
    write: (fn) => transaction('BEGIN ISOLATION LEVEL READ COMMITTED', fn),
    writeLocked: (experimentKeys, fn) => {
      const sorted = [...new Set(experimentKeys)].sort((a, b) => a - b);
      for (const k of sorted) if (!Number.isSafeInteger(k)) throw new RangeError(`not an experiment key: ${k}`);
      if (sorted.length === 0) return transaction('BEGIN ISOLATION LEVEL READ COMMITTED', (c) => fn(c, new Map()));
      // The simple query protocol takes no parameters; the keys are checked integers, written as literals.
      const begin = `BEGIN ISOLATION LEVEL READ COMMITTED; ${LOCK_ROWS} IN (${sorted.join(', ')}) ORDER BY id FOR NO KEY UPDATE`;
      return transaction(begin, (c, begun) => {
        const results = Array.isArray(begun) ? begun : [begun];
        return fn(c, lockedRows(results[results.length - 1].rows as LockRow[]));
      });
    },
    snapshot: (fn) => transaction('BEGIN ISOLATION LEVEL REPEATABLE READ, READ ONLY', fn),
    async end() {
      await pool.end();
    },
  };
}

/**
 * A client taken with pool.connect() has no 'error' listener while it is lent out (the pool listens only to idle
 * clients), and an 'error' event without a listener ends the process: a connection reset while a transaction
 * runs (a server restarting in immediate mode) would take the node down instead of answering 503. This listens
 * for as long as the client is lent out and releases it as broken (the pool then drops it) when it failed.
 */
export function guardLentClient(client: pg.PoolClient): { markBroken(err: Error): void; readonly broken: Error | undefined; release(): void } {
  let broken: Error | undefined;
  const onError = (err: Error) => {
    broken ??= err;
  };
  client.on('error', onError);
  let released = false;
  return {
    markBroken(err) {
      broken ??= err;
    },
    get broken() {
      return broken;
    },
    release() {
      if (released) return;
      released = true;
      client.off('error', onError);
      client.release(broken);
    },
  };
}

function stripUndefined<T extends object>(o: T): Partial<T> {
  return Object.fromEntries(Object.entries(o).filter(([, v]) => v !== undefined)) as Partial<T>;
}

/**
 * Lock experiment rows for writing, in key order (deadlock-free across processes), and return their status and
 * dataVersion. Missing experiments are absent from the map. FOR NO KEY UPDATE: it blocks other writers of the same
 * experiment but not foreign-key checks of rows that refer to it.
 */
export async function lockExperiments(c: Queryable, keys: Iterable<number>): Promise<Map<number, ExperimentLock>> {
  const sorted = [...new Set(keys)].sort((a, b) => a - b);
  if (sorted.length === 0) return new Map();
  const r = await c.query<LockRow>(`${LOCK_ROWS} = ANY($1::bigint[]) ORDER BY id FOR NO KEY UPDATE`, [sorted]);
  return lockedRows(r.rows);
}

/** What a writer learns when it locks an experiment's row. */
export interface ExperimentLock {
  status: string;
  dataVersion: number;
}

interface LockRow {
  id: number | string;
  status: string;
  data_version: number | string;
}

const LOCK_ROWS = `SELECT id, status, data_version FROM experiments WHERE id`;

function lockedRows(rows: LockRow[]): Map<number, ExperimentLock> {
  const out = new Map<number, ExperimentLock>();
  for (const row of rows) out.set(Number(row.id), { status: row.status, dataVersion: Number(row.data_version) });
  return out;
}

/** dataVersion + 1 inside the caller's transaction (the experiment row is already locked). */
export async function bumpDataVersion(c: Queryable, experimentKey: number): Promise<number> {
  const r = await c.query<{ data_version: number }>(`UPDATE experiments SET data_version = data_version + 1 WHERE id = $1 RETURNING data_version`, [
    experimentKey,
  ]);
  return r.rows[0].data_version;
}

/** A Buffer view of bytes, for bytea parameters (no copy when it already is one). */
export function toBuffer(bytes: Uint8Array): Buffer {
  return Buffer.isBuffer(bytes) ? bytes : Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength);
}
