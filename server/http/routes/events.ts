/**
 * GET /v1/experiments/{id}/events (read or admin key): Server-Sent Events announcing data changes.
 *
 *   retry: 5000                      (reconnect hint, once)
 *   data: {"dataVersion":12}         (at once: the current version; then whenever it changes)
 *   : keep-alive                     (a comment every 15 s, so proxies keep the connection open)
 *
 * One shared timer per experiment that has listeners (not one per client) reads the experiment's dataVersion
 * once a second from the store, so changes made by another process on the same database (the `splitballot
 * import` CLI) are seen too, and a client gets at most one event per second however fast data arrive. The timer
 * stops when the last listener of that experiment leaves. Streams end when the client disconnects, when the
 * experiment disappears, when the key that opened it is revoked (checked on the same poll interval, also for a key
 * revoked by the CLI in another process), and when the app closes (preClose), so a graceful shutdown is not held up
 * by them.
 *
 * Limits (a stream holds a socket and a listener for as long as it is open): per key (20; beyond → 429, so one key
 * cannot take every slot), per experiment (200; beyond → 503) and per process (1,000; beyond → 503). A refusal at
 * capacity is logged at warn, one line without a stack (it is load, not a fault).
 *
 * With a change notifier (PostgreSQL: LISTEN/NOTIFY, so a write taken by ANY node of the deployment) the watcher
 * reads the dataVersion at once when a change of a watched experiment is announced, and reads every watched
 * experiment again after a `resync` (the notifier lost its connection); the one-second poll stays as the safety net.
 *
 * The reply is a stream sent through fastify (not hijacked), so CORS and the security headers apply as for
 * every other route. Browsers' EventSource cannot send an Authorization header: the results page reads the
 * stream with fetch() instead; any other client (curl -N, a dashboard) sends the header normally.
 */
import { PassThrough } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { ChangeNotifier, Store } from '../../store/types.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { loadExperiment } from '../../services/targets.js';
import { sendProblem } from '../problem-handler.js';
import { problemType } from '../../errors.js';

export const POLL_INTERVAL_MS = 1000;
export const HEARTBEAT_INTERVAL_MS = 15_000;
export const RECONNECT_HINT_MS = 5000;
/** Open event streams per process; one more is refused with 503. */
export const MAX_EVENT_STREAMS = 1000;
/** Open event streams per API key; one more is refused with 429. */
export const MAX_EVENT_STREAMS_PER_KEY = 20;
/** Open event streams per experiment; one more is refused with 503. */
export const MAX_EVENT_STREAMS_PER_EXPERIMENT = 200;

export interface EventStreamLimits {
  total?: number;
  perKey?: number;
  perExperiment?: number;
}

export interface EventTimings {
  pollMs?: number;
  heartbeatMs?: number;
}

interface Listener {
  /** Called with each new dataVersion (or null when the experiment is gone). */
  version(v: number | null): void;
  heartbeat(): void;
}

interface Watch {
  listeners: Set<Listener>;
  last: number | null;
  pollTimer: NodeJS.Timeout;
  heartbeatTimer: NodeJS.Timeout;
  polling: boolean;
}

/** Shared polling of dataVersion: one timer per experiment with listeners. */
export class DataVersionWatcher {
  private readonly watches = new Map<number, Watch>();

  constructor(
    private readonly store: Store,
    private readonly timings: Required<EventTimings>,
    private readonly onError: (err: unknown) => void,
  ) {}

  /** Number of experiments being polled (for tests). */
  get watchedExperiments(): number {
    return this.watches.size;
  }

  subscribe(experimentKey: number, initial: number, listener: Listener): () => void {
    let w = this.watches.get(experimentKey);
    if (!w) {
      const watch: Watch = {
        listeners: new Set(),
        last: initial,
        polling: false,
        pollTimer: setInterval(() => void this.poll(experimentKey, watch), this.timings.pollMs),
        heartbeatTimer: setInterval(() => {
          for (const l of watch.listeners) l.heartbeat();
        }, this.timings.heartbeatMs),
      };
      watch.pollTimer.unref();
      watch.heartbeatTimer.unref();
      this.watches.set(experimentKey, watch);
      w = watch;
    }
    w.listeners.add(listener);
    const watch = w;
    return () => {
      watch.listeners.delete(listener);
      if (watch.listeners.size === 0 && this.watches.get(experimentKey) === watch) this.stop(experimentKey, watch);
    };
  }

  private stop(experimentKey: number, watch: Watch): void {
    clearInterval(watch.pollTimer);
    clearInterval(watch.heartbeatTimer);
    this.watches.delete(experimentKey);
  }

  /** Read now (a change was announced); `null` = every watched experiment (after a resync). */
  pollNow(experimentKey: number | null): void {
    if (experimentKey === null) {
      for (const [key, w] of this.watches) void this.poll(key, w);
      return;
    }
    const w = this.watches.get(experimentKey);
    if (w) void this.poll(experimentKey, w);
  }

  private async poll(experimentKey: number, watch: Watch): Promise<void> {
    if (watch.polling) return; // the previous read has not come back yet
    watch.polling = true;
    try {
      const v = await this.store.experiments.getDataVersion(experimentKey);
      if (v !== watch.last) {
        watch.last = v;
        for (const l of [...watch.listeners]) l.version(v);
      }
    } catch (err) {
      this.onError(err);
    } finally {
      watch.polling = false;
    }
  }

  closeAll(): void {
    for (const [key, w] of [...this.watches]) {
      for (const l of [...w.listeners]) l.version(null);
      this.stop(key, w);
    }
  }
}

interface OpenStream {
  keyId: number | null;
  experimentKey: number;
}

function countBy(map: Map<number, number>, key: number, delta: number): void {
  const n = (map.get(key) ?? 0) + delta;
  if (n <= 0) map.delete(key);
  else map.set(key, n);
}

export async function eventRoutes(
  base: FastifyInstance,
  opts: { store: Store; timings?: EventTimings; limits?: EventStreamLimits; notifier?: ChangeNotifier },
): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;
  const timings = { pollMs: opts.timings?.pollMs ?? POLL_INTERVAL_MS, heartbeatMs: opts.timings?.heartbeatMs ?? HEARTBEAT_INTERVAL_MS };
  const limits = {
    total: opts.limits?.total ?? MAX_EVENT_STREAMS,
    perKey: opts.limits?.perKey ?? MAX_EVENT_STREAMS_PER_KEY,
    perExperiment: opts.limits?.perExperiment ?? MAX_EVENT_STREAMS_PER_EXPERIMENT,
  };
  const watcher = new DataVersionWatcher(store, timings, (err) => app.log.error({ err }, 'event stream: reading the data version failed'));
  const open = new Map<PassThrough, OpenStream>();
  const perKey = new Map<number, number>();
  const perExperiment = new Map<number, number>();
  let closing = false;
  const unlisten = opts.notifier?.subscribe((change) => watcher.pollNow(change.kind === 'resync' ? null : change.experimentKey));

  // Revoked keys: one look at the (small) key table per poll interval while streams are open; a stream whose key is
  // revoked or gone ends at once.
  let checkingKeys = false;
  const keyCheck = setInterval(() => {
    if (open.size === 0 || checkingKeys) return;
    if (![...open.values()].some((o) => o.keyId !== null)) return;
    checkingKeys = true;
    store.apiKeys
      .list()
      .then((keys) => {
        const active = new Set(keys.filter((k) => k.revokedAt === null).map((k) => k.id));
        for (const [stream, o] of [...open]) {
          if (o.keyId !== null && !active.has(o.keyId)) {
            app.log.info({ keyId: o.keyId }, 'event stream closed: its key was revoked');
            stream.end();
          }
        }
      })
      .catch((err: unknown) => app.log.error({ err }, 'event stream: reading the keys failed'))
      .finally(() => {
        checkingKeys = false;
      });
  }, timings.pollMs);
  keyCheck.unref();

  const endAll = async () => {
    closing = true;
    clearInterval(keyCheck);
    unlisten?.();
    watcher.closeAll();
    for (const s of [...open.keys()]) s.end();
  };
  app.addHook('preClose', endAll);
  app.addHook('onClose', endAll);

  app.get(
    '/v1/experiments/:id/events',
    {
      config: { access: { scopes: ['read', 'admin'], experimentParam: 'id' } },
      schema: {
        tags: ['events'],
        summary: 'Live updates: a Server-Sent Events stream of the data version',
        description:
          'A `text/event-stream` that sends `data: {"dataVersion":N}` at once and again whenever the experiment\'s data change ' +
          '(new, excluded or erased responses, also from a CSV import in another process), at most once a second; a comment line ' +
          '(`: keep-alive`) every 15 s; and `retry: 5000` as the reconnect hint. Refresh comparisons when N differs from the ' +
          'dataVersion you hold. The stream stays open until the client disconnects, its key is revoked (closed within a second) ' +
          `or the service shuts down. At most ${MAX_EVENT_STREAMS_PER_KEY} open streams per key (429 beyond), ` +
          `${MAX_EVENT_STREAMS_PER_EXPERIMENT} per experiment and ${MAX_EVENT_STREAMS} in all (503 beyond), each with Retry-After. Example: ` +
          '`curl -N -H "Authorization: Bearer $KEY" http://127.0.0.1:8080/v1/experiments/water-bill-2027/events`.',
        params: ExperimentParams,
        response: {
          200: {
            description: 'Event stream (stays open)',
            content: {
              'text/event-stream': {
                schema: z.string().meta({ example: 'retry: 5000\n\ndata: {"dataVersion":12}\n\n: keep-alive\n\ndata: {"dataVersion":14}\n\n' }),
              },
            },
          },
          ...problems(400, 401, 403, 404, 429, 500, 503),
        },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      if (closing) throw new ProblemError('unavailable', 'The service is shutting down.');
      const keyId = request.principal?.keyId ?? null;
      const refusal =
        keyId !== null && (perKey.get(keyId) ?? 0) >= limits.perKey
          ? { status: 429, name: 'rate-limited' as const, title: 'Too many requests', detail: `This key already holds ${limits.perKey} open event streams (the limit per key); close one or try again later.` }
          : (perExperiment.get(e.key) ?? 0) >= limits.perExperiment
            ? { status: 503, name: 'unavailable' as const, title: 'Service unavailable', detail: `Experiment ${e.id} already has ${limits.perExperiment} open event streams (the limit per experiment); try again later.` }
            : open.size >= limits.total
              ? { status: 503, name: 'unavailable' as const, title: 'Service unavailable', detail: `Too many open event streams (${limits.total}); try again later.` }
              : null;
      if (refusal) {
        request.log.warn({ keyId, experiment: e.id, open: open.size, status: refusal.status }, `event stream refused: ${refusal.detail}`);
        return sendProblem(request, reply, { type: problemType(refusal.name), title: refusal.title, status: refusal.status, detail: refusal.detail }, { 'retry-after': '30' });
      }
      const initial = (await store.experiments.getDataVersion(e.key)) ?? e.dataVersion;
      const stream = new PassThrough();
      open.set(stream, { keyId, experimentKey: e.key });
      if (keyId !== null) countBy(perKey, keyId, 1);
      countBy(perExperiment, e.key, 1);
      let released = false;
      const release = () => {
        if (released) return;
        released = true;
        open.delete(stream);
        if (keyId !== null) countBy(perKey, keyId, -1);
        countBy(perExperiment, e.key, -1);
      };
      let sent = initial;
      const unsubscribe = watcher.subscribe(e.key, initial, {
        version(v) {
          if (v === null) {
            stream.end();
            return;
          }
          if (v !== sent) {
            sent = v;
            stream.write(`data: ${JSON.stringify({ dataVersion: v })}\n\n`);
          }
        },
        heartbeat() {
          stream.write(': keep-alive\n\n');
        },
      });
      const cleanup = () => {
        unsubscribe();
        release();
        if (!stream.writableEnded) stream.end();
      };
      reply.raw.once('close', cleanup);
      stream.once('end', () => {
        unsubscribe();
        release();
      });
      stream.once('finish', () => {
        unsubscribe();
        release();
      });
      stream.write(`retry: ${RECONNECT_HINT_MS}\n\n`);
      stream.write(`data: ${JSON.stringify({ dataVersion: initial })}\n\n`);
      reply
        .code(200)
        .type('text/event-stream; charset=utf-8')
        .header('cache-control', 'no-store')
        .header('x-accel-buffering', 'no');
      return reply.send(stream as unknown as string);
    },
  );
}
