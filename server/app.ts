/**
 * buildApp(config, deps) → a ready-to-listen FastifyInstance. It never listens: server/main.ts does that, and
 * tests call `inject` or use supertest on `app.server` after `await app.ready()`.
 *
 * Wiring, in order: zod validator/serializer compilers → problem+json error and not-found handlers → body
 * parsers (JSON with overlong-number and depth checks, HTML forms; text/plain removed) → CORS for the configured
 * origins only → security headers → API-key authentication → OpenAPI (from the route schemas) → routes.
 * The store is opened (and migrated) here unless one is passed in; it is closed with the app.
 */
import cors from '@fastify/cors';
import formbody from '@fastify/formbody';
import swagger from '@fastify/swagger';
import Fastify, { type FastifyInstance } from 'fastify';
import { jsonSchemaTransform, jsonSchemaTransformObject, serializerCompiler } from 'fastify-type-provider-zod';
import { registerAuth } from './auth.js';
import type { Config } from './config.js';
import { openSqliteStore } from './db/store.js';
import type { Store } from './db/types.js';
import { registerJsonParser } from './json-body.js';
import { registerProblemHandlers } from './problem.js';
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
import { SINGLE_BODY_LIMIT } from './schemas/responses.js';
import { zodValidatorCompiler } from './schemas/validator.js';

export interface AppDeps {
  /** Use this store instead of opening config.dbPath (the caller then closes it). */
  store?: Store;
  /** Where log lines go (default stdout); tests capture them here. */
  logStream?: { write(line: string): void };
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
];

declare module 'fastify' {
  interface FastifyInstance {
    store: Store;
  }
}

export const REQUEST_TIMEOUT_MS = 120_000;
export const KEEP_ALIVE_TIMEOUT_MS = 72_000;

export function buildApp(config: Config, deps: AppDeps = {}): FastifyInstance {
  const store = deps.store ?? openSqliteStore(config.dbPath);
  const ownsStore = deps.store === undefined;

  const app = Fastify({
    logger: {
      level: config.logLevel,
      redact: { paths: REDACTED_LOG_PATHS, censor: '[redacted]' },
      ...(deps.logStream ? { stream: deps.logStream } : {}),
    },
    bodyLimit: SINGLE_BODY_LIMIT,
    requestTimeout: REQUEST_TIMEOUT_MS,
    keepAliveTimeout: KEEP_ALIVE_TIMEOUT_MS,
    return503OnClosing: true,
    trustProxy: false,
  });

  app.decorate('store', store);
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
      exposedHeaders: ['ETag', 'Location'],
      maxAge: 600,
    });
  }

  app.addHook('onSend', async (_request, reply, payload) => {
    reply.header('x-content-type-options', 'nosniff');
    reply.header('referrer-policy', 'no-referrer');
    return payload;
  });

  registerAuth(app, store);

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
  app.register(adminRoutes, { store });

  if (ownsStore) app.addHook('onClose', async () => store.close());
  return app;
}
