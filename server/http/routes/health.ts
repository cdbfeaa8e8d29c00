/** GET /healthz (the process answers) and GET /readyz (database reachable, migrations current). No key needed. */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import type { Store } from '../../store/types.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { HealthSchema, ReadySchema } from '../../schemas/health.js';

export async function healthRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  app.get(
    '/healthz',
    {
      config: { access: { public: true } },
      schema: { tags: ['health'], summary: 'The process is up', response: { 200: HealthSchema, ...problems(500) } },
    },
    async () => ({ status: 'ok' as const }),
  );
  app.get(
    '/readyz',
    {
      config: { access: { public: true } },
      schema: {
        tags: ['health'],
        summary: 'The database is reachable and every migration is applied',
        response: { 200: ReadySchema, ...problems(500, 503) },
      },
    },
    async () => {
      const r = await opts.store.readiness();
      if (!r.ready) throw new ProblemError('unavailable', `Not ready: ${r.reason}.`);
      return { status: 'ready' as const, migrations: r.migrations };
    },
  );
}
