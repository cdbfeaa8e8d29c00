/**
 * buildApp(config, deps) → a ready-to-listen FastifyInstance. It never listens: server/main.ts does that, and
 * tests call `inject` or use supertest on `app.server` after `await app.ready()`.
 *
 * Wiring, in order: zod validator/serializer compilers → problem+json error and not-found handlers → body
 * parsers (JSON with overlong-number and depth checks, HTML forms; text/plain removed) → CORS for the configured
 * origins only → security headers → "shutting down" 503 → API-key authentication → ingest rate limit →
 * metrics → OpenAPI (from the route schemas) → routes.
 * The store is opened (and migrated) here unless one is passed in; it is closed with the app.
 *
 * Limits (see also server/http/json-body.ts and server/schemas/responses.ts):
 *  - bodies: 1 MiB for one response (and every route by default), 16 MiB for a batch → 413; JSON nesting deeper
 *    than 32 levels → 400;
 *  - time: the whole request (headers and body) must arrive within config.requestTimeoutMs (default 60 s) → 408,
 *    checked every second; idle keep-alive connections close after 72 s;
 *  - header size (16 KiB → 431), URL parameters (100 characters → 404) and header count: Node and fastify defaults;
 *  - ingest: config.rateLimitIngestPerMinute requests per minute per (API key, client address) → 429 with
 *    Retry-After (a batch is one request; an HTML form without a header key counts per address).
 * Protocol-level errors (bad HTTP, timeouts, oversized headers) are answered as problem+json by
 * clientErrorHandler below, not by Node's bare defaults.
 */
import formbody from '@fastify/formbody';
import Fastify, { type FastifyInstance } from 'fastify';
import { serializerCompiler } from 'fastify-type-provider-zod';
import { problemType } from '../errors.js';
import { backupDirOf, REQUEST_TIMEOUT_DEFAULT_MS, type Config } from '../config.js';
import { SINGLE_BODY_LIMIT } from '../schemas/responses.js';
import { ComparisonService, DEFAULT_CACHE_LIMITS } from '../services/comparisons/service.js';
import { backupDatabase } from '../store/sqlite/backup.js';
import type { PostgresStore } from '../store/postgres/store.js';
import { openSqliteStore, type SqliteStore } from '../store/sqlite/store.js';
import type { ChangeNotifier, Store } from '../store/types.js';
import { registerAuth, type RouteAccess } from './auth.js';
import { registerCors } from './cors.js';
import { registerJsonParser } from './json-body.js';
import { REDACTED_LOG_PATHS, requestSerializer } from './logging.js';
import { instrumentStore, metricsRoutes, registerRequestMetrics, ServiceMetrics } from './metrics.js';
import { registerOpenApi } from './openapi-document.js';
import { clientErrorHandler, registerProblemHandlers, sendProblem } from './problem-handler.js';
import { registerIngestRateLimit } from './rate-limit.js';
import { registerReadRateLimit } from './read-rate-limit.js';
import { adminRoutes } from './routes/admin.js';
import { assignmentRoutes } from './routes/assignments.js';
import { comparisonRoutes } from './routes/comparisons.js';
import { eventRoutes } from './routes/events.js';
import { cleanUpRoutes } from './routes/clean-up.js';
import { exclusionRoutes } from './routes/exclusions.js';
import { experimentRoutes } from './routes/experiments.js';
import { exportRoutes } from './routes/exports.js';
import { healthRoutes } from './routes/health.js';
import { importRoutes } from './routes/imports.js';
import { lookRoutes } from './routes/looks.js';
import { pageRoutes } from './routes/pages.js';
import { planningRoutes } from './routes/planning.js';
import { responseRoutes } from './routes/responses.js';
import { resultsPageRoutes } from './routes/results-page.js';
import { clientScriptRoutes } from './routes/client-script.js';
import { formDefinitionRoutes } from './routes/form-definition.js';
import { overviewRoutes } from './routes/overview.js';
import { API_CSP, registerSecurityHeaders, SECURITY_HEADERS } from './security-headers.js';
import { zodValidatorCompiler } from './validator.js';

/** Longest path parameter the router accepts (as sent, percent-encoded); longer → 414. */
export const MAX_PATH_PARAM_LENGTH = 1024;

export interface AppDeps {
  /** Use this store instead of opening config.dbPath (the caller then closes it). */
  store?: Store;
  /** Where log lines go (default stdout); tests capture them here. */
  logStream?: { write(line: string): void };
  /** Also export process_* and nodejs_* metrics (serve turns this on; off by default so tests stay light). */
  processMetrics?: boolean;
  /** Committed changes from every process (PostgreSQL LISTEN/NOTIFY): live updates go out at once instead of at the next poll. */
  notifier?: ChangeNotifier;
}

/** One registered route, as the access-matrix test and the docs read them (app.routeTable). */
export interface RouteEntry {
  method: string;
  url: string;
  access: RouteAccess | undefined;
}


declare module 'fastify' {
  interface FastifyInstance {
    store: Store;
    metrics: ServiceMetrics;
    /** The comparison service of this app (its cache, its worker pool settings, its metrics callback). */
    comparisons: ComparisonService;
    /** Every route registered, with its access declaration, in registration order. */
    routeTable: RouteEntry[];
  }
}

/** Default whole-request timeout (kept for callers that imported it; config.requestTimeoutMs overrides). */
export const REQUEST_TIMEOUT_MS = REQUEST_TIMEOUT_DEFAULT_MS;
export const KEEP_ALIVE_TIMEOUT_MS = 72_000;

export function buildApp(config: Config, deps: AppDeps = {}): FastifyInstance {
  const baseStore = deps.store ?? openSqliteStore(config.dbPath);
  const ownsStore = deps.store === undefined;
  const metrics = new ServiceMetrics({ dbPath: config.dbPath, processMetrics: deps.processMetrics ?? false });
  // Routes get a store that reports stored and refused answers to the metrics (server/http/metrics.ts).
  const store = instrumentStore(baseStore, metrics);
  const comparisons = new ComparisonService(store, DEFAULT_CACHE_LIMITS, {
    workerMinValues: config.compareWorkerMinValues,
    onComparison: (event) => metrics.recordComparison(event),
  });
  const requestTimeout = config.requestTimeoutMs ?? REQUEST_TIMEOUT_DEFAULT_MS;

  const app = Fastify({
    logger: {
      level: config.logLevel,
      redact: { paths: REDACTED_LOG_PATHS, censor: '[redacted]' },
      serializers: { req: requestSerializer as (req: unknown) => Record<string, unknown> },
      ...(deps.logStream ? { stream: deps.logStream } : {}),
    },
    bodyLimit: SINGLE_BODY_LIMIT,
    // Path parameters carry responseIds (up to 128 characters) and respondent references (up to 256, URL-encoded):
    // fastify's default of 100 would answer 414 for ids that ingest accepted.
    routerOptions: { maxParamLength: MAX_PATH_PARAM_LENGTH },
    requestTimeout,
    keepAliveTimeout: KEEP_ALIVE_TIMEOUT_MS,
    // Node checks request and header timeouts on this interval (default 30 s, far too coarse for a 1–60 s limit).
    http: { connectionsCheckingInterval: Math.max(250, Math.min(1000, Math.floor(requestTimeout / 4))), headersTimeout: Math.min(requestTimeout, 60_000) },
    // Answered by the hook below as problem+json (fastify's own 503 is bare JSON).
    return503OnClosing: false,
    // A number (trusted hops) is accepted by fastify at run time although its typings omit it.
    trustProxy: (config.trustProxy ?? false) as boolean | string[],
    clientErrorHandler,
    // Errors the router raises before any route or hook runs (bad percent-encoding, a parameter longer than
    // routerOptions.maxParamLength = 1024): problem+json too, not fastify's bare JSON.
    frameworkErrors: (err, request, reply) => {
      const tooLong = (err as { code?: string }).code === 'FST_ERR_MAX_PARAM_LENGTH';
      for (const [name, value] of Object.entries(SECURITY_HEADERS)) reply.header(name, value);
      reply.header('content-security-policy', API_CSP);
      return sendProblem(request, reply, {
        type: problemType('malformed-request'),
        title: tooLong ? 'URI too long' : 'Malformed request',
        status: tooLong ? 414 : 400,
        detail: tooLong
          ? `A part of the URL path is longer than ${MAX_PATH_PARAM_LENGTH.toLocaleString('en-US')} characters.`
          : 'The URL is not valid (bad percent-encoding).',
      });
    },
  });

  app.decorate('store', store);
  app.decorate('metrics', metrics);
  app.decorate('comparisons', comparisons);
  app.decorate('routeTable', [] as RouteEntry[]);
  app.addHook('onRoute', (route) => {
    const methods = Array.isArray(route.method) ? route.method : [route.method];
    for (const method of methods) app.routeTable.push({ method: String(method), url: route.url, access: route.config?.access });
  });
  app.setValidatorCompiler(zodValidatorCompiler);
  app.setSerializerCompiler(serializerCompiler);
  registerProblemHandlers(app);

  registerJsonParser(app);
  app.removeContentTypeParser('text/plain');
  app.register(formbody, { bodyLimit: SINGLE_BODY_LIMIT });
  registerCors(app, config.corsOrigins);
  registerSecurityHeaders(app);
  let closing = false;
  app.addHook('preClose', async () => {
    closing = true;
  });
  app.addHook('onRequest', async (request, reply) => {
    if (!closing) return;
    reply.header('connection', 'close').header('retry-after', '5');
    return sendProblem(request, reply, {
      type: problemType('unavailable'),
      title: 'Service unavailable',
      status: 503,
      detail: 'The service is shutting down; retry in a few seconds.',
    });
  });

  registerAuth(app, store);
  registerIngestRateLimit(app, config.rateLimitIngestPerMinute ?? 0, metrics);
  registerReadRateLimit(app, config.rateLimitReadPerMinute ?? 0, metrics);
  registerRequestMetrics(app, metrics);
  registerOpenApi(app);

  app.register(async (instance) => {
    await store.apiKeys.syncEnvironmentKey(config.adminKeyHash, new Date().toISOString());
    instance.log.debug('environment admin key synchronised');
  });

  app.register(healthRoutes, { store });
  app.register(pageRoutes);
  app.register(experimentRoutes, { store });
  app.register(responseRoutes, { store });
  app.register(comparisonRoutes, { store, comparisons });
  app.register(exclusionRoutes, { store });
  app.register(cleanUpRoutes, { store });
  app.register(lookRoutes, { store, comparisons });
  app.register(planningRoutes, { store });
  app.register(assignmentRoutes, { store });
  app.register(eventRoutes, { store, notifier: deps.notifier });
  app.register(exportRoutes, { store, comparisons });
  app.register(importRoutes, { store });
  app.register(resultsPageRoutes, { store });
  app.register(clientScriptRoutes);
  app.register(formDefinitionRoutes, { store });
  app.register(overviewRoutes, { store, comparisons });
  app.register(adminRoutes, {
    store,
    backupDir: backupDirOf(config),
    metrics,
    backup: (baseStore as Partial<SqliteStore>).db ? (destination: string) => backupDatabase((baseStore as SqliteStore).db, destination) : undefined,
    backupRefusal: (baseStore as Partial<PostgresStore>).openNotifier
      ? 'This service runs on PostgreSQL (SPLITBALLOT_DATABASE_URL): back it up with pg_dump and restore with pg_restore, then run `splitballot check` (docs/operating.md); the service takes no backups of it itself.'
      : undefined,
  });
  app.register(metricsRoutes, { metrics, store, metricsTokenHash: config.metricsTokenHash ?? null });

  if (ownsStore) app.addHook('onClose', async () => store.close());
  return app;
}
