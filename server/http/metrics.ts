/**
 * Prometheus metrics (prom-client), served as text by GET /metrics.
 *
 * Each app has its own registry (tests build many apps in one process). What is measured:
 *  - splitballot_http_requests_total{method,route,status}       every answered request; `route` is the route
 *    pattern (/v1/experiments/:id/responses), never the raw URL; unmatched URLs are counted as route="unmatched"
 *  - splitballot_http_request_duration_seconds{method,route}    latency histogram (time to the last byte written)
 *  - splitballot_responses_stored_total{outcome}                 responses stored: created | repeated (an identical retry)
 *  - splitballot_rejected_values_total{reason}                   refused values per reason (out_of_range, not_integer, …)
 *  - splitballot_ingest_refused_total{reason}                    whole ingest requests refused, by problem type or status
 *  - splitballot_rate_limited_total{route}                       ingest requests answered 429
 *  - splitballot_comparisons_total{cache}                        comparison requests: cache="hit" | "miss" (= computed)
 *  - splitballot_comparison_duration_seconds                     time to compute a comparison (cache misses)
 *  - splitballot_backups_total{outcome}                          online backups: ok | failed
 *  - splitballot_database_bytes{file}                            size of the database file and its WAL (main | wal)
 *  - process_* / nodejs_* default metrics when enabled (the served process; off in tests)
 *
 * Nothing else needs to know about prom-client:
 *  - the comparison service reports through the onComparison callback the app gives it (ServiceMetrics.recordComparison),
 *    once per answered comparison;
 *  - requests and refused ingest answers are counted by the hooks of registerRequestMetrics;
 *  - responses and rejected values are counted by wrapping the store that the routes receive (instrumentStore),
 *    so ingest, imports and any later writer are counted where the data is written.
 *
 * Cost: O(1) per request (a counter increment and a histogram observation); a scrape is O(series).
 */
import { statSync } from 'node:fs';
import type { FastifyInstance } from 'fastify';
import { Counter, Gauge, Histogram, Registry, collectDefaultMetrics } from 'prom-client';
import { z } from 'zod';
import type { IngestOutcome, RejectedIncrement, ResponseRepository, Store } from '../store/types.js';
import { ProblemError } from '../errors.js';
import { activeKeyByHash, hashSecret, sameHash } from '../services/keys.js';
import { bearerSecret, isIngestRoute, unauthorized } from './auth.js';
import type { ComparisonEvent } from '../services/comparisons/service.js';
import { problems } from '../schemas/common.js';

export const METRICS_CONTENT_TYPE = 'text/plain; version=0.0.4; charset=utf-8';

const LATENCY_BUCKETS = [0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30];
const KNOWN_METHODS = new Set(['GET', 'HEAD', 'POST', 'PUT', 'PATCH', 'DELETE', 'OPTIONS']);

export class ServiceMetrics {
  readonly registry = new Registry();
  private readonly httpRequests: Counter<'method' | 'route' | 'status'>;
  private readonly httpDuration: Histogram<'method' | 'route'>;
  private readonly stored: Counter<'outcome'>;
  private readonly rejectedValues: Counter<'reason'>;
  private readonly refused: Counter<'reason'>;
  private readonly rateLimited: Counter<'route'>;
  private readonly comparisons: Counter<'cache'>;
  private readonly comparisonDuration: Histogram;
  private readonly backups: Counter<'outcome'>;

  constructor(options: { dbPath?: string | null; processMetrics?: boolean } = {}) {
    const registers = [this.registry];
    this.httpRequests = new Counter({
      name: 'splitballot_http_requests_total',
      help: 'HTTP requests answered, by method, route pattern and status code',
      labelNames: ['method', 'route', 'status'],
      registers,
    });
    this.httpDuration = new Histogram({
      name: 'splitballot_http_request_duration_seconds',
      help: 'Time from receiving a request to sending the last byte of its answer, by method and route pattern',
      labelNames: ['method', 'route'],
      buckets: LATENCY_BUCKETS,
      registers,
    });
    this.stored = new Counter({
      name: 'splitballot_responses_stored_total',
      help: 'Responses accepted by the store: created (new) or repeated (an identical retry, nothing changed)',
      labelNames: ['outcome'],
      registers,
    });
    this.rejectedValues = new Counter({
      name: 'splitballot_rejected_values_total',
      help: 'Answer values refused at ingest, by reason',
      labelNames: ['reason'],
      registers,
    });
    this.refused = new Counter({
      name: 'splitballot_ingest_refused_total',
      help: 'Ingest requests refused as a whole, by problem type (validation-failed, response-conflict, rate-limited, ...)',
      labelNames: ['reason'],
      registers,
    });
    this.rateLimited = new Counter({
      name: 'splitballot_rate_limited_total',
      help: 'Requests answered 429 by the ingest rate limit, by route pattern',
      labelNames: ['route'],
      registers,
    });
    this.comparisons = new Counter({
      name: 'splitballot_comparisons_total',
      help: 'Comparisons answered: cache="hit" served from the cache, cache="miss" computed',
      labelNames: ['cache'],
      registers,
    });
    this.comparisonDuration = new Histogram({
      name: 'splitballot_comparison_duration_seconds',
      help: 'Time spent computing one comparison (cache misses only)',
      buckets: LATENCY_BUCKETS,
      registers,
    });
    this.backups = new Counter({
      name: 'splitballot_backups_total',
      help: 'Online backups taken through the API, by outcome',
      labelNames: ['outcome'],
      registers,
    });
    const dbPath = options.dbPath ?? null;
    new Gauge({
      name: 'splitballot_database_bytes',
      help: 'Size on disk of the SQLite database file (file="main") and its write-ahead log (file="wal")',
      labelNames: ['file'],
      registers,
      collect() {
        if (dbPath === null || dbPath === ':memory:') return;
        this.set({ file: 'main' }, fileSize(dbPath));
        this.set({ file: 'wal' }, fileSize(`${dbPath}-wal`));
      },
    });
    // Touch every labelled series once so that a scrape shows zeros instead of missing lines.
    for (const outcome of ['created', 'repeated']) this.stored.inc({ outcome }, 0);
    for (const cache of ['hit', 'miss']) this.comparisons.inc({ cache }, 0);
    for (const outcome of ['ok', 'failed']) this.backups.inc({ outcome }, 0);
    if (options.processMetrics) collectDefaultMetrics({ register: this.registry });
  }

  /** Record one answered request. `route` is the route pattern or null for an unmatched URL. */
  observeRequest(method: string, route: string | null, status: number, seconds: number): void {
    const m = KNOWN_METHODS.has(method) ? method : 'OTHER';
    const r = route ?? 'unmatched';
    this.httpRequests.inc({ method: m, route: r, status: String(status) });
    this.httpDuration.observe({ method: m, route: r }, seconds);
  }

  recordStored(created: number, repeated: number): void {
    if (created > 0) this.stored.inc({ outcome: 'created' }, created);
    if (repeated > 0) this.stored.inc({ outcome: 'repeated' }, repeated);
  }

  recordRejectedValues(increments: readonly RejectedIncrement[]): void {
    for (const i of increments) if (i.count > 0) this.rejectedValues.inc({ reason: i.reason }, i.count);
  }

  recordRefused(reason: string): void {
    this.refused.inc({ reason });
  }

  recordRateLimited(route: string): void {
    this.rateLimited.inc({ route });
  }

  recordComparison(event: ComparisonEvent): void {
    this.comparisons.inc({ cache: event.cacheHit ? 'hit' : 'miss' });
    if (!event.cacheHit && event.durationSeconds !== undefined && Number.isFinite(event.durationSeconds) && event.durationSeconds >= 0) {
      this.comparisonDuration.observe(event.durationSeconds);
    }
  }

  recordBackup(ok: boolean): void {
    this.backups.inc({ outcome: ok ? 'ok' : 'failed' });
  }

  async text(): Promise<string> {
    return this.registry.metrics();
  }
}

function fileSize(path: string): number {
  try {
    return statSync(path).size;
  } catch {
    return 0;
  }
}

/** Request counts and latency per route pattern, and refused ingest answers by problem type. */
export function registerRequestMetrics(app: FastifyInstance, metrics: ServiceMetrics): void {
  app.addHook('onSend', async (request, reply, payload) => {
    if (isIngestRoute(request) && reply.statusCode >= 400) {
      const m = typeof payload === 'string' ? /"type":"urn:splitballot:problem:([a-z-]+)"/.exec(payload.slice(0, 200)) : null;
      metrics.recordRefused(m ? m[1] : `status-${reply.statusCode}`);
    }
    return payload;
  });
  app.addHook('onResponse', async (request, reply) => {
    metrics.observeRequest(request.method, request.is404 ? null : (request.routeOptions.url ?? null), reply.statusCode, reply.elapsedTime / 1000);
  });
}

/**
 * An object that forwards every method and property of `target` to it (methods bound to the original, so that
 * classes with #private fields keep working), with some methods replaced.
 */
function forwarding<T extends object>(target: T, overrides: Partial<T>): T {
  const out: Record<PropertyKey, unknown> = {};
  const seen = new Set<PropertyKey>();
  let depth = 0;
  for (let o: object | null = target; o !== null && o !== Object.prototype; o = Object.getPrototypeOf(o) as object | null, depth++) {
    const isMethod = depth > 0; // class methods live on prototypes; own properties are handed out as they are
    for (const key of Reflect.ownKeys(o)) {
      if (key === 'constructor' || seen.has(key) || Object.hasOwn(overrides, key)) continue;
      seen.add(key);
      // configurable: tests replace single methods with spies (vi.spyOn) on the store the routes receive.
      Object.defineProperty(out, key, {
        enumerable: true,
        configurable: true,
        get: () => {
          const v = (target as Record<PropertyKey, unknown>)[key];
          return isMethod && typeof v === 'function' ? (v as (...a: unknown[]) => unknown).bind(target) : v;
        },
      });
    }
  }
  for (const [key, value] of Object.entries(overrides)) Object.defineProperty(out, key, { value, enumerable: true, configurable: true, writable: true });
  return out as T;
}

/**
 * A Store whose responses repository reports what it stores and refuses to `metrics`. Everything else is the
 * original store (methods forwarded, bound to the original objects).
 */
export function instrumentStore<S extends Store>(store: S, metrics: ServiceMetrics): S {
  const original = store.responses;
  const responses = forwarding(original, {
    ingest: async (...args: Parameters<ResponseRepository['ingest']>): Promise<IngestOutcome> => {
      const outcome = await original.ingest(...args);
      if (outcome.kind === 'stored') metrics.recordStored(outcome.created, outcome.repeated);
      return outcome;
    },
    recordRejected: async (experimentKey: number, increments: RejectedIncrement[]): Promise<void> => {
      await original.recordRejected(experimentKey, increments);
      metrics.recordRejectedValues(increments);
    },
  } as Partial<typeof original>);
  return forwarding(store, { responses } as Partial<S>);
}

// ---------------------------------------------------------------------------------------------------------------
// GET /metrics

/**
 * GET /metrics. Who may read it: an admin key for every experiment (Authorization: Bearer <key>), or the scrape
 * token SPLITBALLOT_METRICS_TOKEN, which opens /metrics and nothing else (so a Prometheus server needs no admin
 * key). The route is declared public to the API-key hook (which knows nothing of the scrape token) and checks
 * the header itself, with the same answers: no/malformed/unknown/revoked → 401, another scope or a key limited
 * to one experiment → 403.
 */
export async function metricsRoutes(
  app: FastifyInstance,
  opts: { metrics: ServiceMetrics; store: Store; metricsTokenHash: Uint8Array | null },
): Promise<void> {
  const { metrics, store, metricsTokenHash } = opts;
  app.get(
    '/metrics',
    {
      config: { access: { public: true } },
      serializerCompiler: () => (data) => (typeof data === 'string' ? data : JSON.stringify(data)),
      onRequest: async (request) => {
        const secret = bearerSecret(request.headers.authorization, 'Send an admin key or the metrics token in the header Authorization: Bearer <key>.');
        const hash = hashSecret(secret);
        if (metricsTokenHash !== null && sameHash(metricsTokenHash, hash)) return;
        const key = await activeKeyByHash(store, hash);
        if (!key) throw unauthorized('The API key is not valid (unknown or revoked).');
        if (key.scope !== 'admin') throw new ProblemError('forbidden', `This key has the ${key.scope} scope; /metrics needs an admin key or the metrics token.`);
        if (key.experiment !== null) throw new ProblemError('forbidden', `This key is limited to experiment ${key.experiment}; /metrics needs a key for every experiment.`);
      },
      schema: {
        tags: ['health'],
        summary: 'Prometheus metrics (admin key or the metrics token)',
        description:
          'Request counts and latency histograms per route pattern, stored and refused responses, refused values per reason, ' +
          'comparisons and cache hits, backups and the database size, in the Prometheus text format 0.0.4. Readable with an ' +
          'admin key for every experiment or with the token set in SPLITBALLOT_METRICS_TOKEN.',
        security: [{ bearerAuth: [] }],
        response: {
          200: { description: 'Prometheus text format', content: { 'text/plain': { schema: z.string() } } },
          ...problems(401, 403, 500),
        },
      },
    },
    async (_request, reply) => {
      const text = await metrics.text();
      return reply.type(METRICS_CONTENT_TYPE).header('cache-control', 'no-store').send(text);
    },
  );
}
