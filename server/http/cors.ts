/**
 * CORS for the configured browser origins only (none by default: then no CORS headers at all). Retry-After and the
 * rate-limit headers are exposed, so that a survey page's script can wait as long as the service asks.
 */
import cors from '@fastify/cors';
import type { FastifyInstance } from 'fastify';

export function registerCors(app: FastifyInstance, origins: string[]): void {
  if (origins.length > 0) {
      app.register(cors, {
        origin: origins,
        methods: ['GET', 'HEAD', 'POST', 'PATCH', 'DELETE'],
        allowedHeaders: ['Authorization', 'Content-Type', 'If-None-Match'],
        exposedHeaders: ['ETag', 'Location', 'Retry-After', 'X-RateLimit-Limit', 'X-RateLimit-Remaining', 'X-RateLimit-Reset'],
        maxAge: 600,
      });
    }
}
