/**
 * Ingest: POST /v1/experiments/{id}/responses (one response, JSON or an HTML form) and …/responses/batch
 * (up to 10,000, JSON, all or nothing). Every item is validated before the store is called, so a rejected
 * request stores nothing; the rejected values are counted in their own small transaction (also for a rejected
 * batch: every refused value is counted once per request that carried it).
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { ExperimentRecord, IngestOutcome, Store, ValidResponse } from '../../store/types.js';
import { checkBatch, checkSingle, formToItem, type CheckResult } from '../../services/ingest/validate.js';
import { weightsOf } from '../../schemas/weights.js';
import { isFormContentType, prefersHtml } from '../negotiate.js';
import { ProblemError, RequestValidationError } from '../../errors.js';
import { problems, type FieldError } from '../../schemas/common.js';
import {
  BATCH_BODY_LIMIT,
  BatchInputSchema,
  BatchResultSchema,
  ExperimentParams,
  ResponseInputSchema,
  SINGLE_BODY_LIMIT,
  StoredResponseSchema,
} from '../../schemas/responses.js';
import { bodyPassThroughCompiler } from '../validator.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';
import { THANK_YOU_PATH } from '../../views/html.js';
import { RESPONDENT_SCOPES } from '../auth.js';

function closed(id: string): ProblemError {
  return new ProblemError('experiment-closed', `Experiment ${id} is closed and accepts no new responses.`);
}

function storedView(e: ExperimentRecord, item: ValidResponse, receivedAt: string) {
  const values: Record<string, number> = {};
  for (const m of e.measures) {
    const v = item.values.get(m.key);
    if (v !== undefined) values[m.id] = v;
  }
  return {
    responseId: item.responseId,
    condition: e.conditions.find((c) => c.key === item.conditionKey)!.id,
    respondent: item.respondent,
    values,
    ...(weightsOf(e.options).weights === 'none' ? {} : { weight: item.weight }),
    submittedAt: item.submittedAt,
    receivedAt,
  };
}

/** Count refused values and refused weights (each in its own small transaction). */
async function recordRefusals(store: Store, experiment: ExperimentRecord, checked: CheckResult): Promise<void> {
  await store.responses.recordRejected(experiment.key, checked.rejected);
  if (checked.rejectedWeights && checked.rejectedWeights.length > 0) await store.responses.recordRejectedWeights(experiment.key, checked.rejectedWeights);
}

async function loadOpenExperiment(store: Store, id: string): Promise<ExperimentRecord> {
  const e = await loadExperiment(store, id);
  if (e.status !== 'open') throw closed(id);
  return e;
}

function throwUnlessStored(outcome: IngestOutcome, id: string, paths: (index: number) => string): asserts outcome is Extract<IngestOutcome, { kind: 'stored' }> {
  if (outcome.kind === 'closed') throw closed(id);
  if (outcome.kind === 'not-found') throw experimentNotFound(id);
  if (outcome.kind === 'conflict') {
    const n = outcome.conflicts.length;
    throw new ProblemError(
      'response-conflict',
      n === 1 && paths(0) === 'responseId'
        ? `Response ${outcome.conflicts[0].responseId} was already stored with different content; nothing was changed.`
        : `${n === 1 ? '1 item repeats' : `${n} items repeat`} a stored responseId (or one earlier in the batch) with different content; nothing was stored.`,
      {
        errors: outcome.conflicts.map((c) => ({
          path: paths(c.index),
          message: 'was already stored with different content',
          value: c.responseId,
        })),
      },
    );
  }
}

const INGEST_PROBLEMS = problems(400, 401, 403, 404, 409, 413, 415, 422, 500);

export async function responseRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.post(
    '/v1/experiments/:id/responses',
    {
      config: { access: { scopes: RESPONDENT_SCOPES, experimentParam: 'id', formKey: true } },
      bodyLimit: SINGLE_BODY_LIMIT,
      validatorCompiler: bodyPassThroughCompiler,
      schema: {
        tags: ['responses'],
        summary: 'Post one response (JSON, or an HTML form: application/x-www-form-urlencoded)',
        description:
          'A form posts `condition`, optional `responseId`, `respondent` and `submittedAt`, one field per measure id, `weight` in an ' +
          'experiment with survey weights, and — when it ' +
          'cannot send an Authorization header — a form key (scope `form`) in the field `ingestKey`. A form post whose Accept header prefers ' +
          'text/html is answered with 303 to the thank-you page, or an HTML error page.',
        consumes: ['application/json', 'application/x-www-form-urlencoded'],
        params: ExperimentParams,
        body: ResponseInputSchema,
        response: {
          201: StoredResponseSchema.describe('Stored'),
          200: StoredResponseSchema.describe('Already stored with the same content (a safe retry); nothing changed'),
          303: z.null().describe('Form post from a browser: no body; Location names the thank-you page'),
          ...INGEST_PROBLEMS,
        },
      },
    },
    async (request, reply) => {
      const id = request.params.id;
      const receivedAt = new Date().toISOString();
      const experiment = await loadOpenExperiment(store, id);
      const isForm = isFormContentType(request.headers['content-type']);
      if (isForm) {
        request.respondentLabels = {
          measures: Object.fromEntries(experiment.measures.map((m) => [m.id, m.label])),
          conditions: Object.fromEntries(experiment.conditions.map((c) => [c.id, c.label])),
        };
      }
      let body: unknown = request.body;
      const errors: FieldError[] = [];
      if (isForm) {
        const form = formToItem((body ?? {}) as Record<string, unknown>, { weightField: weightsOf(experiment.options).weights !== 'none' });
        body = form.item;
        errors.push(...form.errors);
      }
      const checked = checkSingle(experiment, body, receivedAt);
      // A form field sent twice is reported once, not again as "is required".
      const reported = new Set(errors.map((e) => e.path));
      errors.push(...checked.errors.filter((e) => !reported.has(e.path)));
      if (errors.length > 0) {
        await recordRefusals(store, experiment, checked);
        throw new RequestValidationError('body', errors);
      }
      const item = checked.valid[0];
      const outcome = await store.responses.ingest(experiment.key, [item], receivedAt, request.principal?.keyId ?? null);
      throwUnlessStored(outcome, id, () => 'responseId');
      const created = outcome.items[0].created;
      if (isForm && prefersHtml(request.headers.accept)) {
        return redirectToThanks(request, reply, experiment);
      }
      if (created) return reply.code(201).send(storedView(experiment, item, receivedAt));
      const stored = await store.responses.getStored(experiment.key, item.responseId);
      if (!stored) throw new Error('a repeated response vanished');
      const { excluded: _e, excludedReason: _r, weight, ...view } = stored;
      return reply.code(200).send(weightsOf(experiment.options).weights === 'none' ? view : { ...view, weight });
    },
  );

  app.post(
    '/v1/experiments/:id/responses/batch',
    {
      config: { access: { scopes: ['ingest', 'admin'], experimentParam: 'id' } },
      bodyLimit: BATCH_BODY_LIMIT,
      validatorCompiler: bodyPassThroughCompiler,
      schema: {
        tags: ['responses'],
        summary: 'Post up to 10,000 responses at once: all are stored, or none (ingest or admin key; never a form key)',
        params: ExperimentParams,
        body: BatchInputSchema,
        response: {
          201: BatchResultSchema.describe('At least one response was new'),
          200: BatchResultSchema.describe('Every item repeated a stored response; nothing changed'),
          ...INGEST_PROBLEMS,
        },
      },
    },
    async (request, reply) => {
      if (!(request.headers['content-type'] ?? '').toLowerCase().includes('json')) {
        throw new ProblemError('unsupported-media-type', 'A batch must be sent as application/json.');
      }
      const id = request.params.id;
      const receivedAt = new Date().toISOString();
      const experiment = await loadOpenExperiment(store, id);
      const checked = checkBatch(experiment, request.body, receivedAt);
      if (checked.errors.length > 0) {
        await recordRefusals(store, experiment, checked);
        throw new RequestValidationError('body', checked.errors);
      }
      const outcome = await store.responses.ingest(experiment.key, checked.valid, receivedAt, request.principal?.keyId ?? null);
      throwUnlessStored(outcome, id, (i) => `responses[${i}].responseId`);
      return reply.code(outcome.created > 0 ? 201 : 200).send({
        created: outcome.created,
        repeated: outcome.repeated,
        responseIds: outcome.items.map((x) => x.responseId),
      });
    },
  );
}

function redirectToThanks(_request: FastifyRequest, reply: FastifyReply, experiment: ExperimentRecord): FastifyReply {
  return reply.code(303).header('location', experiment.thankYouUrl ?? THANK_YOU_PATH).send();
}
