/**
 * Change notification across service processes: PostgreSQL LISTEN/NOTIFY.
 *
 * Writers call notifyChange() inside their write transaction (`SELECT pg_notify(channel, payload)`). PostgreSQL
 * delivers a notification only when its transaction commits, in commit order, and drops it on rollback, so a
 * listener never hears of a change that is not committed. Payload: {"e": experimentKey, "v": dataVersion,
 * "k": kind} as JSON (well below the 8,000-byte limit).
 *
 * PostgresChangeNotifier keeps ONE dedicated connection (not from the pool) that LISTENs. When that connection
 * fails it reconnects with a growing delay (0.25 s … 10 s) and LISTENs again; notifications sent while it was
 * away are lost, so whenever it (re)connects after a failure it tells its subscribers `{ kind: 'resync' }`
 * ("anything may have changed, read the dataVersion again").
 *
 * The interface (ChangeNotifier, StoreChange) names no engine: an SQLite deployment, a single process, can
 * implement it in-process with an EventEmitter fed by the repositories after their commits.
 */
import pg from 'pg';
import type { ChangeNotifier, StoreChange, StoreChangeKind } from '../types.js';
import type { Queryable } from './pool.js';

export type { ChangeNotifier, StoreChange, StoreChangeKind };

export const CHANGE_CHANNEL = 'splitballot_changes';

/** Queue a notification inside the caller's write transaction; delivered to every listener on COMMIT. */
export async function notifyChange(c: Queryable, change: { experimentKey: number; dataVersion: number; kind: StoreChangeKind }): Promise<void> {
  await c.query(`SELECT pg_notify($1, $2)`, [CHANGE_CHANNEL, JSON.stringify({ e: change.experimentKey, v: change.dataVersion, k: change.kind })]);
}

export interface NotifierOptions {
  connectTimeoutMs?: number;
  /** First reconnect delay, ms (default 250), doubled up to maxDelayMs (default 10,000). */
  minDelayMs?: number;
  maxDelayMs?: number;
  /** Called with connection errors (logging); never throws. */
  onError?: (err: unknown) => void;
}

export class PostgresChangeNotifier implements ChangeNotifier {
  private readonly listeners = new Set<(change: StoreChange) => void>();
  private client: pg.Client | null = null;
  private closed = false;
  private delay: number;
  private timer: NodeJS.Timeout | null = null;
  private connectedOnce = false;
  private failedBefore = false;
  private readyPromise: Promise<void>;
  private resolveReady!: () => void;
  /** Reconnections after the first connection (tests and metrics). */
  reconnects = 0;

  constructor(
    private readonly connectionString: string,
    private readonly options: NotifierOptions = {},
  ) {
    this.delay = options.minDelayMs ?? 250;
    this.readyPromise = new Promise((resolve) => (this.resolveReady = resolve));
    void this.connect();
  }

  subscribe(listener: (change: StoreChange) => void): () => void {
    this.listeners.add(listener);
    return () => this.listeners.delete(listener);
  }

  ready(): Promise<void> {
    return this.readyPromise;
  }

  /** The listening connection's backend pid (tests end it to prove the reconnect), or null. */
  async backendPid(): Promise<number | null> {
    if (!this.client) return null;
    const r = await this.client.query<{ pid: number }>(`SELECT pg_backend_pid() AS pid`);
    return r.rows[0].pid;
  }

  private emit(change: StoreChange): void {
    for (const l of [...this.listeners]) {
      try {
        l(change);
      } catch (err) {
        this.options.onError?.(err);
      }
    }
  }

  private async connect(): Promise<void> {
    if (this.closed) return;
    const client = new pg.Client({ connectionString: this.connectionString, connectionTimeoutMillis: this.options.connectTimeoutMs ?? 5000, keepAlive: true });
    let failed = false;
    const onFailure = (err: unknown) => {
      if (failed) return;
      failed = true;
      this.failedBefore = true;
      this.options.onError?.(err);
      if (this.client === client) this.client = null;
      client.removeAllListeners('notification');
      client.end().catch(() => undefined);
      this.scheduleReconnect();
    };
    client.on('error', onFailure);
    client.on('end', () => onFailure(new Error('the notification connection ended')));
    client.on('notification', (msg) => {
      if (msg.channel !== CHANGE_CHANNEL || !msg.payload) return;
      try {
        const p = JSON.parse(msg.payload) as { e: number; v: number; k: StoreChangeKind };
        this.emit({ kind: p.k, experimentKey: p.e, dataVersion: p.v });
      } catch (err) {
        this.options.onError?.(err);
      }
    });
    try {
      await client.connect();
      await client.query(`LISTEN ${CHANGE_CHANNEL}`);
    } catch (err) {
      onFailure(err);
      return;
    }
    if (this.closed) {
      failed = true;
      await client.end().catch(() => undefined);
      return;
    }
    this.client = client;
    this.delay = this.options.minDelayMs ?? 250;
    if (this.connectedOnce) this.reconnects++;
    if (this.connectedOnce || this.failedBefore) this.emit({ kind: 'resync' });
    this.failedBefore = false;
    this.connectedOnce = true;
    this.resolveReady();
  }

  private scheduleReconnect(): void {
    if (this.closed || this.timer) return;
    const wait = this.delay;
    this.delay = Math.min(this.delay * 2, this.options.maxDelayMs ?? 10_000);
    this.timer = setTimeout(() => {
      this.timer = null;
      void this.connect();
    }, wait);
    this.timer.unref();
  }

  async close(): Promise<void> {
    this.closed = true;
    if (this.timer) clearTimeout(this.timer);
    this.timer = null;
    const c = this.client;
    this.client = null;
    this.listeners.clear();
    if (c) {
      c.removeAllListeners('end');
      c.on('error', () => undefined);
      await c.end().catch(() => undefined);
    }
  }
}
