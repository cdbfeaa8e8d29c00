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
 * Limits (see also server/json-body.ts and server/schemas/responses.ts):
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
import cors from '@fastify/cors';
import formbody from '@fastify/formbody';
import swagger from '@fastify/swagger';
import rateLimit from '@fastify/rate-limit';
import Fastify, { type FastifyInstance, type FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';
import { STATUS_CODES } from 'node:http';
import type { Socket } from 'node:net';
import { jsonSchemaTransform, jsonSchemaTransformObject, serializerCompiler } from 'fastify-type-provider-zod';
import { registerAuth, type RouteAccess } from './auth.js';
import { backupDatabase } from './backup.js';
import { backupDirOf, REQUEST_TIMEOUT_DEFAULT_MS, type Config } from './config.js';
import { openSqliteStore, type SqliteStore } from './db/store.js';
import type { Store } from './db/types.js';
import { registerJsonParser } from './json-body.js';
import { attachMetrics, detachMetrics, instrumentStore, metricsRoutes, ServiceMetrics } from './metrics.js';
import { problemType, registerProblemHandlers, sendProblem } from './problem.js';
import { experimentRoutes } from './routes/experiments.js';
import { healthRoutes } from './routes/health.js';
import { pageRoutes } from './routes/pages.js';
import { responseRoutes } from './routes/responses.js';
import { adminRoutes } from './routes/admin.js';
import { assignmentRoutes } from './routes/assignments.js';
import { comparisonRoutes } from './routes/comparisons.js';
import { eventRoutes } from './routes/events.js';
import { exclusionRoutes } from './routes/exclusions.js';
import { exportRoutes } from './routes/exports.js';
import { importRoutes } from './routes/imports.js';
import { lookRoutes } from './routes/looks.js';
import { planningRoutes } from './routes/planning.js';
import { resultsPageRoutes } from './routes/results-page.js';
import { clientScriptRoutes } from './routes/client-script.js';
import { formDefinitionRoutes } from './routes/form-definition.js';
import { SINGLE_BODY_LIMIT } from './schemas/responses.js';
import { zodValidatorCompiler } from './schemas/validator.js';

export interface AppDeps {
  /** Use this store instead of opening config.dbPath (the caller then closes it). */
  store?: Store;
  /** Where log lines go (default stdout); tests capture them here. */
  logStream?: { write(line: string): void };
  /** Also export process_* and nodejs_* metrics (serve turns this on; off by default so tests stay light). */
  processMetrics?: boolean;
}

/** One registered route, as the access-matrix test and the docs read them (app.routeTable). */
export interface RouteEntry {
  method: string;
  url: string;
  access: RouteAccess | undefined;
}

/** Log fields that must never be written: credentials in headers or forms, secrets and key hashes. */
export const REDACTED_LOG_PATHS = [
  'req.headers.authorization',
  'req.headers.cookie',
  'headers.authorization',
  'headers.cookie',
  'authorization',
  'ingestKey',
  '*.ingestKey',
  'body.ingestKey',
  'secret',
  '*.secret',
  'hash',
  '*.hash',
  'adminKeyHash',
  '*.adminKeyHash',
  'metricsTokenHash',
  '*.metricsTokenHash',
  'contentHash',
  '*.contentHash',
  'content_hash',
  '*.content_hash',
  'token',
  '*.token',
  'password',
  '*.password',
  'req.headers["x-api-key"]',
  'req.headers["proxy-authorization"]',
  'res.headers["set-cookie"]',
  // Error objects logged on a 5xx: better-sqlite3 puts nothing secret in messages, but SQL text can appear in
  // a wrapped error's `sql` field and statement text in `source`; never log them.
  'err.sql',
  'err.source',
  'err.statement',
  'err.params',
];

declare module 'fastify' {
  interface FastifyInstance {
    store: Store;
    metrics: ServiceMetrics;
    /** Every route registered, with its access declaration, in registration order. */
    routeTable: RouteEntry[];
  }
}

/** Default whole-request timeout (kept for callers that imported it; config.requestTimeoutMs overrides). */
export const REQUEST_TIMEOUT_MS = REQUEST_TIMEOUT_DEFAULT_MS;
export const KEEP_ALIVE_TIMEOUT_MS = 72_000;

/** Security headers on every answer (HTML pages that set their own CSP keep it). */
export const SECURITY_HEADERS: Readonly<Record<string, string>> = Object.freeze({
  'x-content-type-options': 'nosniff',
  'referrer-policy': 'no-referrer',
  'cross-origin-resource-policy': 'same-origin',
});
/** CSP for an HTML answer that did not set one: nothing may load, run, frame it or be posted from it. */
export const DEFAULT_HTML_CSP = "default-src 'none'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";
/** CSP for every other answer (JSON, CSV, text): if a browser ever renders one, nothing in it can run. */
export const API_CSP = "default-src 'none'; frame-ancestors 'none'";

const RATE_LIMITED_TYPE = 'urn:splitballot:problem:rate-limited';

function rawProblem(status: number, name: string, title: string, detail: string): string {
  const body = JSON.stringify({ type: `urn:splitballot:problem:${name}`, title, status, detail });
  return (
    `HTTP/1.1 ${status} ${STATUS_CODES[status] ?? 'Error'}\r\n` +
    `Content-Type: application/problem+json\r\nContent-Length: ${Buffer.byteLength(body)}\r\n` +
    `X-Content-Type-Options: nosniff\r\nContent-Security-Policy: ${API_CSP}\r\nConnection: close\r\n\r\n${body}`
  );
}

/** Errors below HTTP (unparseable request, timeout, oversized headers): answered as problem+json, then closed. */
function clientErrorHandler(this: FastifyInstance, err: NodeJS.ErrnoException, socket: Socket): void {
  if (err.code === 'ECONNRESET' || socket.destroyed) return;
  let reply: string;
  if (err.code === 'ERR_HTTP_REQUEST_TIMEOUT') {
    reply = rawProblem(408, 'request-timeout', 'Request timeout', 'The request (headers and body) did not arrive within the request timeout.');
  } else if (err.code === 'HPE_HEADER_OVERFLOW') {
    reply = rawProblem(431, 'headers-too-large', 'Request headers too large', 'The request line and headers are larger than 16 KiB.');
  } else {
    reply = rawProblem(400, 'malformed-request', 'Malformed request', 'The request is not valid HTTP/1.1.');
  }
  this.log.debug({ code: err.code }, 'client error');
  if (socket.writable) socket.write(reply);
  socket.destroy();
}

function isIngestRoute(request: FastifyRequest): boolean {
  if (request.method !== 'POST' || request.is404) return false;
  const access = request.routeOptions.config.access;
  return access !== undefined && !access.public && access.scopes.includes('ingest');
}

export function buildApp(config: Config, deps: AppDeps = {}): FastifyInstance {
  const baseStore = deps.store ?? openSqliteStore(config.dbPath);
  const ownsStore = deps.store === undefined;
  const metrics = new ServiceMetrics({ dbPath: config.dbPath, processMetrics: deps.processMetrics ?? false });
  // Routes get a store that reports stored and refused answers to the metrics (server/metrics.ts).
  const store = instrumentStore(baseStore, metrics);
  const requestTimeout = config.requestTimeoutMs ?? REQUEST_TIMEOUT_DEFAULT_MS;

  const app = Fastify({
    logger: {
      level: config.logLevel,
      redact: { paths: REDACTED_LOG_PATHS, censor: '[redacted]' },
      ...(deps.logStream ? { stream: deps.logStream } : {}),
    },
    bodyLimit: SINGLE_BODY_LIMIT,
    // Path parameters carry responseIds (up to 128 characters) and respondent references (up to 256, URL-encoded):
    // fastify's default of 100 would answer 414 for ids that ingest accepted.
    routerOptions: { maxParamLength: 1024 },
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
        detail: tooLong ? 'A part of the URL path is longer than 100 characters.' : 'The URL is not valid (bad percent-encoding).',
      });
    },
  });

  app.decorate('store', store);
  app.decorate('metrics', metrics);
  app.decorate('routeTable', [] as RouteEntry[]);
  attachMetrics(metrics);
  app.addHook('onClose', async () => detachMetrics(metrics));
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
  if (config.corsOrigins.length > 0) {
    app.register(cors, {
      origin: config.corsOrigins,
      methods: ['GET', 'HEAD', 'POST', 'PATCH', 'DELETE'],
      allowedHeaders: ['Authorization', 'Content-Type', 'If-None-Match'],
      exposedHeaders: ['ETag', 'Location', 'Retry-After'],
      maxAge: 600,
    });
  }

  app.addHook('onSend', async (request, reply, payload) => {
    for (const [name, value] of Object.entries(SECURITY_HEADERS)) reply.header(name, value);
    if (!reply.hasHeader('content-security-policy')) {
      const type = String(reply.getHeader('content-type') ?? '');
      if (type.startsWith('text/html')) {
        reply.header('content-security-policy', DEFAULT_HTML_CSP);
        reply.header('x-frame-options', 'DENY');
      } else {
        reply.header('content-security-policy', API_CSP);
      }
    }
    // Answers to a key are for that key only: shared caches must not keep them (ETag revalidation still works).
    if (request.principal !== null && !reply.hasHeader('cache-control')) reply.header('cache-control', 'private, no-cache');
    reply.removeHeader('x-powered-by');
    if (isIngestRoute(request) && reply.statusCode >= 400) {
      const m = typeof payload === 'string' ? /"type":"urn:splitballot:problem:([a-z-]+)"/.exec(payload.slice(0, 200)) : null;
      metrics.recordRefused(m ? m[1] : `status-${reply.statusCode}`);
    }
    return payload;
  });

  // While shutting down: requests that still arrive on open keep-alive connections get 503 and the connection
  // closes; requests already being handled finish (server/cli.ts waits for them).
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

  // Ingest rate limit: per (API key, client address), after authentication so that the key is known. A form post
  // without an Authorization header is counted per address until its ingestKey field is read.
  const perMinute = config.rateLimitIngestPerMinute ?? 0;
  if (perMinute > 0) {
    app.register(rateLimit, { global: false });
    app.register(
      fp(async (instance) => {
        const limiter = instance.createRateLimit({
          max: perMinute,
          timeWindow: 60_000,
          keyGenerator: (request: FastifyRequest) => `ingest|${request.principal?.keyId ?? 'form'}|${request.ip}`,
        });
        instance.addHook('onRequest', async (request, reply) => {
          if (!isIngestRoute(request)) return;
          const r = await limiter(request);
          if (r.isAllowed) return;
          reply.header('x-ratelimit-limit', String(r.max));
          reply.header('x-ratelimit-remaining', String(r.remaining));
          reply.header('x-ratelimit-reset', String(r.ttlInSeconds));
          if (!r.isExceeded) return;
          const route = request.routeOptions.url ?? 'unmatched';
          metrics.recordRateLimited(route);
          reply.header('retry-after', String(Math.max(1, r.ttlInSeconds)));
          request.log.info({ route, keyId: request.principal?.keyId ?? null }, 'ingest rate limit reached');
          return sendProblem(request, reply, {
            type: RATE_LIMITED_TYPE,
            title: 'Too many requests',
            status: 429,
            detail:
              `More than ${perMinute} ingest requests per minute from this key and address; retry after ${Math.max(1, r.ttlInSeconds)} s. ` +
              'Send many responses in one batch request (POST …/responses/batch counts once).',
          });
        });
      }, { name: 'splitballot-ingest-rate-limit', dependencies: ['@fastify/rate-limit'] }),
    );
  }

  app.addHook('onResponse', async (request, reply) => {
    metrics.observeRequest(request.method, request.is404 ? null : (request.routeOptions.url ?? null), reply.statusCode, reply.elapsedTime / 1000);
  });

  app.addHook('onRoute', (route) => {
    const access = route.config?.access;
    if (access && !access.public && route.schema) {
      route.schema = { ...route.schema, security: [{ bearerAuth: [] }] } as typeof route.schema;
    }
  });

  app.register(swagger, {
    openapi: {
      openapi: '3.1.0',
      info: {
        title: 'Splitballot',
        version: '0.1.0',
        description: 'Validated ingest and running two-condition comparisons for split-ballot survey experiments.',
      },
      components: {
        securitySchemes: { bearerAuth: { type: 'http', scheme: 'bearer', description: 'An API key: Authorization: Bearer sb_…' } },
      },
    },
    transform: jsonSchemaTransform,
    transformObject: jsonSchemaTransformObject,
  });

  app.register(async (instance) => {
    await store.apiKeys.syncEnvironmentKey(config.adminKeyHash, new Date().toISOString());
    instance.log.debug('environment admin key synchronised');
  });

  app.register(healthRoutes, { store });
  app.register(pageRoutes);
  app.register(experimentRoutes, { store });
  app.register(responseRoutes, { store });
  app.register(comparisonRoutes, { store });
  app.register(exclusionRoutes, { store });
  app.register(lookRoutes, { store });
  app.register(planningRoutes, { store });
  app.register(assignmentRoutes, { store });
  app.register(eventRoutes, { store });
  app.register(exportRoutes, { store });
  app.register(importRoutes, { store });
  app.register(resultsPageRoutes, { store });
  app.register(clientScriptRoutes);
  app.register(formDefinitionRoutes, { store });
  app.register(adminRoutes, {
    store,
    backupDir: backupDirOf(config),
    metrics,
    backup: (baseStore as Partial<SqliteStore>).db ? (destination: string) => backupDatabase((baseStore as SqliteStore).db, destination) : undefined,
  });
  app.register(metricsRoutes, { metrics, store, metricsTokenHash: config.metricsTokenHash ?? null });

  if (ownsStore) app.addHook('onClose', async () => store.close());
  return app;
}
