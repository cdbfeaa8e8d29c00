/**
 * The ingest rate limit: config.rateLimitIngestPerMinute requests per minute per (API key, client address) on the
 * ingest routes → 429 with Retry-After (a batch is one request; an HTML form without a header key counts per
 * address). Off when the limit is 0.
 */
import rateLimit from '@fastify/rate-limit';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import fp from 'fastify-plugin';
import { isIngestRoute } from './auth.js';
import type { ServiceMetrics } from './metrics.js';
import { sendProblem } from './problem-handler.js';

const RATE_LIMITED_TYPE = 'urn:splitballot:problem:rate-limited';

export function registerIngestRateLimit(app: FastifyInstance, perMinute: number, metrics: ServiceMetrics): void {
  if (perMinute <= 0) return;
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
