/**
 * Balanced assignment of respondents to conditions:
 *   POST /v1/experiments/{id}/assignments            (form, ingest or admin) sticky, permuted-block assignment; a form
 *                                                    key assigns NEW respondents only: for one assigned before it gets
 *                                                    409 without the condition (a public key must not reveal another
 *                                                    person's condition)
 *   GET  /v1/experiments/{id}/assignments/summary    (read or admin) assigned / answered / not answered per condition
 * The block plan (server/services/monitoring/interim.ts blockPlan) comes from options.allocation; the block sequence is drawn with
 * crypto.randomInt inside the store's write transaction and never leaves the server.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import type { Store } from '../../store/types.js';
import { blockPlan, secureShuffle } from '../../services/assignment.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { AssignmentInputSchema, AssignmentSchema, AssignmentSummarySchema } from '../../schemas/monitoring.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';
import { RESPONDENT_SCOPES } from '../auth.js';

function closed(id: string): ProblemError {
  return new ProblemError('experiment-closed', `Experiment ${id} is closed and assigns no more respondents.`);
}

export async function assignmentRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.post(
    '/v1/experiments/:id/assignments',
    {
      config: { access: { scopes: RESPONDENT_SCOPES, experimentParam: 'id' } },
      schema: {
        tags: ['assignments'],
        summary: 'Assign a respondent to a condition (sticky, balanced by permuted blocks)',
        description:
          'The same respondent id always gets the same condition. New respondents take the next slot of a permuted block in ' +
          'the planned allocation (equal unless the definition gives `allocation` weights): the smallest whole-number weights ' +
          'with the same ratios, repeated until a block has at least 4 slots ([1, 1] → blocks of 4, [1, 2] → 6). Blocks are ' +
          'shuffled with a cryptographic random source and never exposed. Send the respondent id again with the response ' +
          '(`respondent`) so that drop-out per condition shows in …/assignments/summary. A public form key (scope `form`) may ' +
          'assign new respondents only: for a respondent assigned before it gets 409 `already-assigned` without the condition, ' +
          'so that a key visible in a web page cannot learn another person\'s condition (the page keeps the condition it was given).',
        params: ExperimentParams,
        body: AssignmentInputSchema,
        response: {
          201: AssignmentSchema.describe('Newly assigned'),
          200: AssignmentSchema.describe('Assigned before: the same condition again'),
          ...problems(400, 401, 403, 404, 409, 413, 415, 422, 500),
        },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      if (e.status !== 'open') throw closed(e.id);
      const plan = blockPlan(e);
      if (!plan.ok) throw new ProblemError('allocation-unusable', plan.reason);
      const respondent = request.body.respondent;
      const outcome = await store.assignments.assign(
        e.key,
        respondent,
        { template: plan.template, shuffle: secureShuffle },
        new Date().toISOString(),
        request.principal?.keyId ?? null,
      );
      if (outcome.kind === 'not-found') throw experimentNotFound(e.id);
      if (outcome.kind === 'closed') throw closed(e.id);
      const condition = e.conditions.find((c) => c.key === outcome.conditionKey);
      if (!condition) throw new Error('assigned condition not in the experiment');
      if (!outcome.created && request.principal?.scope === 'form') {
        throw new ProblemError(
          'already-assigned',
          'This respondent was assigned before; a form key assigns new respondents only and does not reveal an earlier assignment.',
        );
      }
      reply.code(outcome.created ? 201 : 200);
      return { condition: condition.id, respondent, new: outcome.created };
    },
  );

  app.get(
    '/v1/experiments/:id/assignments/summary',
    {
      config: { access: { scopes: ['admin', 'read'], experimentParam: 'id' } },
      schema: {
        tags: ['assignments'],
        summary: 'Assignments against answers per condition: drop-out becomes visible',
        description:
          'A respondent counts as answered when a stored response of this experiment carries the same `respondent` ' +
          '(excluded responses included). Responses whose respondent was never assigned are counted separately.',
        params: ExperimentParams,
        response: { 200: AssignmentSummarySchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      const [summary, unassigned] = await Promise.all([store.assignments.summary(e.key), store.assignments.unassignedResponses(e.key)]);
      const plan = blockPlan(e);
      const byCondition = e.conditions.map((c) => {
        const s = summary.find((x) => x.conditionKey === c.key);
        const assigned = s?.assigned ?? 0;
        const answered = s?.answered ?? 0;
        return {
          condition: c.id,
          assigned,
          answered,
          notAnswered: assigned - answered,
          answeredOtherCondition: s?.answeredOtherCondition ?? 0,
          responsesWithoutAssignment: unassigned.find((u) => u.conditionKey === c.key)?.responses ?? 0,
        };
      });
      const totals = byCondition.reduce(
        (t, c) => ({ assigned: t.assigned + c.assigned, answered: t.answered + c.answered, notAnswered: t.notAnswered + c.notAnswered }),
        { assigned: 0, answered: 0, notAnswered: 0 },
      );
      return {
        experiment: e.id,
        allocation: plan.ok
          ? { weights: Object.fromEntries(e.conditions.map((c, i) => [c.id, plan.weights[i]])), blockSize: plan.blockSize }
          : null,
        ...(plan.ok ? {} : { reason: plan.reason }),
        byCondition,
        totals,
      };
    },
  );
}
