/**
 * GET /v1/experiments/{id}/form — the public form definition (ingest, read or admin key of that experiment):
 * what a survey page needs to check answers before it sends them (scale limits, whole numbers, required items,
 * condition ids, open or closed). Nothing else: no title or labels, no counts, no dataVersion, no results, so the
 * ingest key embedded in a public page reads no more than the page itself shows. Strong ETag; 304 on a match.
 */
import { createHash } from 'node:crypto';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { ExperimentRecord, Store } from '../../store/types.js';
import { problems } from '../../schemas/common.js';
import { FormDefinitionSchema, type FormDefinition } from '../../schemas/form-definition.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { loadExperiment } from '../../services/targets.js';

export function formDefinition(e: ExperimentRecord): FormDefinition {
  return {
    experiment: e.id,
    status: e.status,
    conditions: e.conditions.map((c) => c.id),
    measures: e.measures.map((m) => ({ id: m.id, min: m.min, max: m.max, integer: m.integer, required: m.required })),
  };
}

export async function formDefinitionRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.get(
    '/v1/experiments/:id/form',
    {
      config: { access: { scopes: ['form', 'ingest', 'read', 'admin'], experimentParam: 'id' } },
      schema: {
        tags: ['responses'],
        summary: "What a survey form needs to check answers before sending them (readable with the experiment's ingest key)",
        description:
          'Scale limits, whole-number and required flags of every measure, the condition ids and whether the experiment is open. ' +
          'Deliberately nothing more: the ingest key that reads it is embedded in a public page. Strong ETag (If-None-Match → 304).',
        params: ExperimentParams,
        response: {
          200: FormDefinitionSchema,
          304: z.null().describe('Not modified (If-None-Match)'),
          ...problems(400, 401, 403, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const definition = formDefinition(await loadExperiment(store, request.params.id));
      const etag = `"${createHash('sha256').update(JSON.stringify(definition)).digest('base64url').slice(0, 27)}"`;
      reply.header('etag', etag);
      if (request.headers['if-none-match'] === etag) return reply.code(304).send(null);
      return definition;
    },
  );
}
