/**
 * Interim monitoring routes:
 *   POST /v1/experiments/{id}/looks                                   record a group-sequential look (admin)
 *   GET  /v1/experiments/{id}/looks                                   list recorded looks (read)
 *   GET  /v1/experiments/{id}/comparisons/{measure}/trajectory        anytime-valid p and interval over time (read)
 *   GET  /v1/experiments/{id}/comparisons/{measure}/trajectory.svg    the same as a chart (read)
 * Thin: resolve experiment, measure and pair → services/monitoring/looks.ts; the trajectory through the comparison
 * service (cached per dataVersion, strong ETag, 304 on If-None-Match from the cheap stamp).
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { LookRecord } from '../../store/monitoring-types.js';
import type { ConditionRecord, ExperimentRecord, Store } from '../../store/types.js';
import { lookMessage, lookView, monitoringOption, recordLook } from '../../services/monitoring/looks.js';
import type { ComparisonService } from '../../services/comparisons/service.js';
import { TRAJECTORY_FLOOR_PER_CONDITION, TRAJECTORY_POINTS } from '../../services/monitoring/trajectory.js';
import { notModified } from '../conditional.js';
import { ProblemError, RequestValidationError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { LookInputSchema, LookListQuery, LookListSchema, LookSchema, MeasureParams, PairQuery, TrajectorySchema } from '../../schemas/monitoring.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { loadExperiment, LOOK_PAIR, resolveMeasure, resolvePair } from '../../services/targets.js';
import { SVG_CONTENT_TYPE } from '../page-assets.js';

/** The pair of a look or trajectory (first two conditions by default); 422 (body) or 400 (query) naming the field. */
function lookPair(e: ExperimentRecord, a: string | undefined, b: string | undefined, part: 'body' | 'querystring'): [ConditionRecord, ConditionRecord] {
  const r = resolvePair(e, a, b, LOOK_PAIR);
  if (!r.ok) throw new RequestValidationError(part, r.errors);
  return r.pair;
}

/** A recorded look as the look routes answer it: its view plus the measure, the pair and the plan it belongs to. */
function lookBody(e: ExperimentRecord, l: LookRecord) {
  const m = e.measures.find((x) => x.key === l.measureKey);
  const ca = e.conditions.find((x) => x.key === l.conditionKeys[0]);
  const cb = e.conditions.find((x) => x.key === l.conditionKeys[1]);
  return {
    ...lookView(l),
    measure: m?.id ?? String(l.measureKey),
    a: ca?.id ?? String(l.conditionKeys[0]),
    b: cb?.id ?? String(l.conditionKeys[1]),
    plannedPerCondition: l.plannedPerCondition,
    spending: l.spending,
    alpha: l.alpha,
    welch: { t: l.welchT, df: l.welchDf },
    final: l.fraction >= 1,
  };
}

const READ = { scopes: ['admin', 'read'] as const, experimentParam: 'id' };

const NOT_MODIFIED = z.null().describe('Not modified: the If-None-Match tag is current (no body)');

export async function lookRoutes(base: FastifyInstance, opts: { store: Store; comparisons: ComparisonService }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store, comparisons } = opts;

  app.post(
    '/v1/experiments/:id/looks',
    {
      config: { access: { scopes: ['admin'], experimentParam: 'id' } },
      schema: {
        tags: ['monitoring'],
        summary: 'Record a group-sequential interim look at the current information fraction',
        description:
          'Needs `monitoring: { spending }` and `plannedPerCondition` in the experiment definition. The look is placed at the ' +
          'information fraction min(1, effective answers per condition / planned), where the effective number is the harmonic ' +
          'mean 2·nA·nB/(nA + nB). Its boundary comes from the Lan–DeMets spending function given the fractions of the earlier ' +
          'looks of the same measure and pair; the look at fraction 1 is the final one and spends all remaining alpha. The ' +
          'observed z is the normal score of the Welch t (excluded responses left out). Stop at the first crossed boundary.',
        params: ExperimentParams,
        body: LookInputSchema,
        response: { 201: LookSchema, ...problems(400, 401, 403, 404, 409, 413, 415, 422, 500) },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const body = request.body;
      const measure = e.measures.find((m) => m.id === body.measure);
      if (!measure) throw new RequestValidationError('body', [{ path: 'measure', message: 'is not a measure of this experiment', value: body.measure }]);
      const pair = lookPair(e, body.a, body.b, 'body');
      const result = await recordLook(store, e, measure, [pair[0].key, pair[1].key], request.principal?.keyId ?? null);
      if (result.kind === 'not-configured') throw new ProblemError('monitoring-not-configured', result.detail);
      if (result.kind === 'not-possible') throw new ProblemError('look-not-possible', result.detail);
      reply.code(201);
      return {
        ...lookBody(e, result.look),
        message: lookMessage(result.view, result.previous, result.look.spending),
      };
    },
  );

  app.get(
    '/v1/experiments/:id/looks',
    {
      config: { access: READ },
      schema: {
        tags: ['monitoring'],
        summary: 'Recorded interim looks of an experiment (all measures and pairs, in recording order)',
        params: ExperimentParams,
        querystring: LookListQuery,
        response: { 200: LookListSchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      const only = request.query.measure;
      if (only !== undefined && !e.measures.some((m) => m.id === only)) {
        throw new RequestValidationError('querystring', [{ path: 'measure', message: 'is not a measure of this experiment', value: only }]);
      }
      const all = await store.looks.listAll(e.key);
      const looks = all.map((l) => lookBody(e, l));
      return {
        experiment: e.id,
        spending: monitoringOption(e)?.spending ?? null,
        plannedPerCondition: e.plannedPerCondition,
        looks: only === undefined ? looks : looks.filter((l) => l.measure === only),
      };
    },
  );

  async function trajectoryTarget(id: string, measureId: string, a: string | undefined, b: string | undefined) {
    const e = await loadExperiment(store, id);
    const measure = resolveMeasure(e, measureId, { listMeasures: false });
    const pair = lookPair(e, a, b, 'querystring');
    const target = { experiment: e, measure, a: pair[0], b: pair[1] };
    return { target, stamp: await comparisons.stamp(e) };
  }

  app.get(
    '/v1/experiments/:id/comparisons/:measure/trajectory',
    {
      config: { access: READ },
      schema: {
        tags: ['monitoring'],
        summary: 'Anytime-valid p and interval (confidence sequence) over the course of the study',
        description:
          `Computed at up to ${TRAJECTORY_POINTS} evenly spaced prefixes of the answers in arrival order (excluded responses left out), with ` +
          'the current planned size and alpha. Each point is what the sequence said after that many answers. Points where a ' +
          `condition has fewer than ${TRAJECTORY_FLOOR_PER_CONDITION} answers are \`provisional\` (the variance estimate is still unstable): ` +
          'they do not enter the running values (`runningP`, `runningLower`, `runningUpper`: minimum and intersection from the ' +
          'floor on, never widening). Cached per (experiment, measure, pair, dataVersion) with a strong `ETag`; send ' +
          '`If-None-Match` to get 304 while nothing changed.',
        params: MeasureParams,
        querystring: PairQuery,
        response: { 200: TrajectorySchema, 304: NOT_MODIFIED, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request, reply) => {
      const { target, stamp } = await trajectoryTarget(request.params.id, request.params.measure, request.query.a, request.query.b);
      if (notModified(request, reply, comparisons.etagOf(comparisons.trajectoryKey(target, stamp)))) return reply;
      const { body, etag } = await comparisons.trajectory(target, stamp);
      return reply.header('etag', etag).send(body);
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure/trajectory.svg',
    {
      config: { access: READ },
      schema: {
        tags: ['monitoring'],
        summary: 'Chart of the estimate and its anytime-valid interval over the course of the study, with the evidence strip (SVG)',
        params: MeasureParams,
        querystring: PairQuery,
        response: {
          200: { description: 'SVG image', content: { 'image/svg+xml': { schema: z.string() } } },
          304: NOT_MODIFIED,
          ...problems(400, 401, 403, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const { target, stamp } = await trajectoryTarget(request.params.id, request.params.measure, request.query.a, request.query.b);
      if (notModified(request, reply, comparisons.etagOf(comparisons.trajectoryChartKey(target, stamp)))) return reply;
      const { svg, etag } = await comparisons.trajectoryChart(target, stamp);
      return reply.header('etag', etag).type(SVG_CONTENT_TYPE).send(svg);
    },
  );
}
