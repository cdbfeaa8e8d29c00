/**
 * Exclusions, restorations and erasure (admin keys), and the audit trail they write.
 *
 *  POST   /v1/experiments/{id}/responses/{responseId}/exclusion   { reason }  leave a response out of comparisons
 *  DELETE /v1/experiments/{id}/responses/{responseId}/exclusion             take it back in
 *  DELETE /v1/experiments/{id}/respondents/{respondent}                      erase every response of one respondent
 *  GET    /v1/experiments/{id}/audit                                         the audit trail, newest first (these
 *                                                                            changes and primary-outcome changes made
 *                                                                            after answers existed)
 *
 * Each change is ONE transaction in the repository (flags, per-value counts, counters, dataVersion + 1, audit row).
 * Idempotent: excluding an excluded response (or restoring one that is not excluded) answers 200 with
 * changed: false and writes nothing (the first reason stays). Erasing a respondent with no responses answers 200
 * with erased: 0 (the request is still recorded in the audit trail, with its count 0 and time).
 * Closed experiments accept all three: cleaning data and honouring erasure requests go on after collection ends.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import type { ExclusionOutcome, Store } from '../../store/types.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { AuditListSchema, ErasureSchema, ExclusionInputSchema, ExclusionSchema, RespondentParams, ResponseParams } from '../../schemas/exclusions.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';

const ADMIN = { access: { scopes: ['admin'] as const, experimentParam: 'id' } };

function exclusionView(outcome: Exclude<ExclusionOutcome, { kind: 'not-found' }>) {
  return {
    responseId: outcome.responseId,
    condition: outcome.condition,
    excluded: outcome.excluded,
    reason: outcome.reason,
    changed: outcome.kind === 'changed',
    dataVersion: outcome.dataVersion,
  };
}

function responseNotFound(experiment: string, responseId: string): ProblemError {
  return new ProblemError('not-found', `Experiment ${experiment} has no response ${JSON.stringify(responseId)}.`);
}

export async function exclusionRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  async function change(id: string, responseId: string, excluded: boolean, reason: string | null, keyId: number | null) {
    const e = await loadExperiment(store, id);
    const outcome = await store.responses.setExcluded(e.key, responseId, { excluded, reason }, keyId, new Date().toISOString());
    if (outcome.kind === 'not-found') throw responseNotFound(id, responseId);
    return exclusionView(outcome);
  }

  app.post(
    '/v1/experiments/:id/responses/:responseId/exclusion',
    {
      config: ADMIN,
      schema: {
        tags: ['exclusions'],
        summary: 'Exclude a response from comparisons (with a reason)',
        description:
          'The response stays stored but comparisons leave it out unless includeExcluded=true; dataVersion moves and the change ' +
          'is written to the audit trail (who, when, why). Excluding an already excluded response answers 200 with changed: false ' +
          'and keeps the first reason.',
        params: ResponseParams,
        body: ExclusionInputSchema,
        response: { 200: ExclusionSchema, ...problems(400, 401, 403, 404, 413, 415, 422, 500) },
      },
    },
    async (request) => change(request.params.id, request.params.responseId, true, request.body.reason, request.principal?.keyId ?? null),
  );

  app.delete(
    '/v1/experiments/:id/responses/:responseId/exclusion',
    {
      config: ADMIN,
      schema: {
        tags: ['exclusions'],
        summary: 'Restore an excluded response',
        description: 'Comparisons count the response again; dataVersion moves and the audit trail records it. Restoring a response that is not excluded answers 200 with changed: false.',
        params: ResponseParams,
        response: { 200: ExclusionSchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => change(request.params.id, request.params.responseId, false, null, request.principal?.keyId ?? null),
  );

  app.delete(
    '/v1/experiments/:id/respondents/:respondent',
    {
      config: ADMIN,
      schema: {
        tags: ['exclusions'],
        summary: 'Erase every response of one respondent (a data-protection request)',
        description:
          'Deletes the responses and their values in one transaction, updates the counts and moves dataVersion. The audit trail ' +
          'keeps only the number erased and the time (and the key that asked), never the respondent; earlier audit rows of the ' +
          'erased responses lose their responseId. A respondent with no responses answers 200 with erased: 0.',
        params: RespondentParams,
        response: { 200: ErasureSchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      const outcome = await store.responses.eraseRespondent(e.key, request.params.respondent, request.principal?.keyId ?? null, new Date().toISOString());
      if (outcome.kind === 'not-found') throw experimentNotFound(request.params.id);
      return { erased: outcome.erased, dataVersion: outcome.dataVersion };
    },
  );

  app.get(
    '/v1/experiments/:id/audit',
    {
      config: ADMIN,
      schema: {
        tags: ['exclusions'],
        summary: 'The audit trail of exclusions, restorations, erasures and primary-outcome changes (newest first, at most 1,000)',
        description:
          'One entry per change: exclude and restore name the response and the reason; erase keeps only the count and the time; ' +
          'primary-change (a change of the primary outcome after answers existed, written with the definition update) names ' +
          'the measures before and after in fromMeasure and toMeasure.',
        params: ExperimentParams,
        response: { 200: AuditListSchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      return { entries: await store.audit.list(e.key) };
    },
  );
}
