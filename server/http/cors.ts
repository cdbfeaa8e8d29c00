/** CORS for the configured browser origins only (none by default: then no CORS headers at all). */
import cors from '@fastify/cors';
import type { FastifyInstance } from 'fastify';

export function registerCors(app: FastifyInstance, origins: string[]): void {
  if (origins.length > 0) {
      app.register(cors, {
        origin: origins,
        methods: ['GET', 'HEAD', 'POST', 'PATCH', 'DELETE'],
        allowedHeaders: ['Authorization', 'Content-Type', 'If-None-Match'],
        exposedHeaders: ['ETag', 'Location', 'Retry-After'],
        maxAge: 600,
      });
    }
}
