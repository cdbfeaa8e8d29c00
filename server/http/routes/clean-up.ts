/**
 * Bulk clean-up (admin): POST /v1/experiments/{id}/clean-up excludes or erases, in ONE audited transaction, every
 * answer received in a time window, through one API key, or both — for instance after a form key leaked and junk
 * arrived through it. A batch or CSV import shares one receivedAt: give it as both ends of the window (with its key)
 * to take exactly that batch. Dry run by default: the reply counts what would change; send `"dryRun": false` to apply.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import type { Store } from '../../store/types.js';
import { problems } from '../../schemas/common.js';
import { CleanUpInputSchema, CleanUpResultSchema } from '../../schemas/clean-up.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';

export async function cleanUpRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.post(
    '/v1/experiments/:id/clean-up',
    {
      config: { access: { scopes: ['admin'], experimentParam: 'id' } },
      schema: {
        tags: ['exclusions'],
        summary: 'Exclude or erase the answers of a time window and/or an API key, in one audited transaction (dry run first)',
        description:
          'Takes every response of the experiment whose receivedAt lies in [receivedFrom, receivedTo] (either end may be left ' +
          'open) and, when `apiKey` is given, that was stored through that key id. `exclude` leaves them out of comparisons ' +
          '(one audit row per response with the reason; each can be restored on its own); `erase` deletes them (one audit row ' +
          'with the count and the reason). dataVersion moves once. `dryRun` defaults to true: the reply counts what would ' +
          'change and nothing is written. A batch or CSV import has one receivedAt: give it as both ends to take that batch.',
        params: ExperimentParams,
        body: CleanUpInputSchema,
        response: { 200: CleanUpResultSchema, ...problems(400, 401, 403, 404, 413, 415, 422, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      const b = request.body;
      const outcome = await store.responses.cleanUp(
        e.key,
        {
          action: b.action,
          reason: b.reason,
          dryRun: b.dryRun,
          filter: {
            receivedFrom: b.receivedFrom === undefined ? null : new Date(b.receivedFrom).toISOString(),
            receivedTo: b.receivedTo === undefined ? null : new Date(b.receivedTo).toISOString(),
            apiKeyId: b.apiKey ?? null,
          },
        },
        request.principal?.keyId ?? null,
        new Date().toISOString(),
      );
      if (outcome.kind === 'not-found') throw experimentNotFound(e.id);
      request.log.info({ experiment: e.id, action: b.action, dryRun: b.dryRun, matched: outcome.matched, changed: outcome.changed }, 'bulk clean-up');
      return { action: b.action, dryRun: b.dryRun, matched: outcome.matched, changed: outcome.changed, dataVersion: outcome.dataVersion };
    },
  );
}
