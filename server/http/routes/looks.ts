/**
 * Interim monitoring routes:
 *   POST /v1/experiments/{id}/looks                                   record a group-sequential look (admin)
 *   GET  /v1/experiments/{id}/looks                                   list recorded looks (read)
 *   GET  /v1/experiments/{id}/comparisons/{measure}/trajectory        always-valid p and confidence sequence over time (read)
 *   GET  /v1/experiments/{id}/comparisons/{measure}/trajectory.svg    the same as a chart (read)
 * Thin: resolve experiment, measure and pair → server/services/monitoring/interim.ts → reply.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import { normalUpperTail } from '../../../stats/distributions.js';
import type { LookRecord } from '../../store/monitoring-types.js';
import type { ExperimentRecord, MeasureRecord, Store } from '../../store/types.js';
import { lookMessage, monitoringOption, recordLook, trajectory } from '../../services/monitoring/interim.js';
import { renderTrajectoryChart } from '../../views/charts.js';
import { ProblemError, RequestValidationError } from '../../errors.js';
import { problems, type Problem } from '../../schemas/common.js';
import { LookInputSchema, LookListQuery, LookListSchema, LookSchema, MeasureParams, PairQuery, TrajectorySchema } from '../../schemas/monitoring.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { loadExperiment } from './experiments.js';
import { SVG_CONTENT_TYPE } from '../page-assets.js';

/**
 * A 409 with its own problem type (urn:splitballot:problem:<name>) for states that PROBLEM_TYPES in problem.ts
 * does not name yet (monitoring-not-configured, look-not-possible, allocation-unusable). Status 409.
 */
export class StateProblem extends ProblemError {
  constructor(
    readonly typeName: string,
    readonly typeTitle: string,
    detail: string,
  ) {
    super('response-conflict', detail);
  }
  override toProblem(): Problem {
    return { ...super.toProblem(), type: `urn:splitballot:problem:${this.typeName}`, title: this.typeTitle };
  }
}

/** The two conditions compared: a and b by id, defaulting to the first two in definition order. */
export function resolvePair(
  e: ExperimentRecord,
  a: string | undefined,
  b: string | undefined,
  part: 'body' | 'querystring',
): { keys: [number, number]; ids: [string, string] } {
  const errors: { path: string; message: string; value?: unknown }[] = [];
  const find = (id: string | undefined, fallback: number, path: string) => {
    if (id === undefined) return e.conditions[fallback];
    const c = e.conditions.find((x) => x.id === id);
    if (!c) errors.push({ path, message: 'is not a condition of this experiment', value: id.length > 100 ? `${id.slice(0, 100)}…` : id });
    return c;
  };
  const ca = find(a, 0, 'a');
  const cb = find(b, 1, 'b');
  if (ca && cb && ca.key === cb.key) errors.push({ path: 'b', message: 'must differ from a', value: cb.id });
  if (errors.length > 0 || !ca || !cb) throw new RequestValidationError(part, errors);
  return { keys: [ca.key, cb.key], ids: [ca.id, cb.id] };
}

function lookBody(e: ExperimentRecord, l: LookRecord) {
  const m = e.measures.find((x) => x.key === l.measureKey);
  const ca = e.conditions.find((x) => x.key === l.conditionKeys[0]);
  const cb = e.conditions.find((x) => x.key === l.conditionKeys[1]);
  const crossed = l.boundaryZ !== null && Math.abs(l.observedZ) >= l.boundaryZ;
  return {
    number: l.number,
    measure: m?.id ?? String(l.measureKey),
    a: ca?.id ?? String(l.conditionKeys[0]),
    b: cb?.id ?? String(l.conditionKeys[1]),
    recordedAt: l.recordedAt,
    dataVersion: l.dataVersion,
    fraction: l.fraction,
    nA: l.nA,
    nB: l.nB,
    plannedPerCondition: l.plannedPerCondition,
    spending: l.spending,
    alpha: l.alpha,
    cumulativeAlpha: l.cumulativeAlpha,
    alphaSpent: l.alphaSpent,
    boundaryZ: l.boundaryZ,
    nominalP: null as number | null,
    welch: { t: l.welchT, df: l.welchDf },
    observedZ: l.observedZ,
    crossed,
    direction: crossed ? (l.observedZ > 0 ? ('a' as const) : ('b' as const)) : null,
    final: l.fraction >= 1,
  };
}

function measureOrNotFound(e: ExperimentRecord, id: string): MeasureRecord {
  const m = e.measures.find((x) => x.id === id);
  if (!m) throw new ProblemError('not-found', `Experiment ${e.id} has no measure ${JSON.stringify(id.length > 80 ? `${id.slice(0, 80)}…` : id)}.`);
  return m;
}

const READ = { scopes: ['admin', 'read'] as const, experimentParam: 'id' };

export async function lookRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

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
      const pair = resolvePair(e, body.a, body.b, 'body');
      const result = await recordLook(store, e, measure, pair.keys, request.principal?.keyId ?? null);
      if (result.kind === 'not-configured') throw new StateProblem('monitoring-not-configured', 'Monitoring not configured', result.detail);
      if (result.kind === 'not-possible') throw new StateProblem('look-not-possible', 'Look not possible', result.detail);
      const view = lookBody(e, result.look);
      reply.code(201);
      return {
        ...view,
        nominalP: result.view.nominalP,
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
      const looks = all.map((l) => {
        const v = lookBody(e, l);
        return { ...v, nominalP: l.boundaryZ === null ? null : nominalP(l.boundaryZ) };
      });
      return {
        experiment: e.id,
        spending: monitoringOption(e)?.spending ?? null,
        plannedPerCondition: e.plannedPerCondition,
        looks: only === undefined ? looks : looks.filter((l) => l.measure === only),
      };
    },
  );

  async function loadTrajectory(id: string, measureId: string, a: string | undefined, b: string | undefined) {
    const e = await loadExperiment(store, id);
    const measure = measureOrNotFound(e, measureId);
    const pair = resolvePair(e, a, b, 'querystring');
    const t = await trajectory(store, e, measure, pair.keys);
    return { e, measure, pair, t };
  }

  app.get(
    '/v1/experiments/:id/comparisons/:measure/trajectory',
    {
      config: { access: READ },
      schema: {
        tags: ['monitoring'],
        summary: 'Always-valid p and confidence sequence over the course of the study',
        description:
          'Recomputed at up to 60 evenly spaced prefixes of the answers in arrival order (excluded responses left out), with ' +
          'the current planned size and alpha. Each point is what the sequence said after that many answers.',
        params: MeasureParams,
        querystring: PairQuery,
        response: { 200: TrajectorySchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const { e, measure, pair, t } = await loadTrajectory(request.params.id, request.params.measure, request.query.a, request.query.b);
      return {
        experiment: e.id,
        measure: measure.id,
        a: pair.ids[0],
        b: pair.ids[1],
        dataVersion: t.dataVersion,
        alpha: e.alpha,
        method: t.method,
        mixing: t.mixing,
        targetPerCondition: t.targetPerCondition,
        points: t.points,
      };
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure/trajectory.svg',
    {
      config: { access: READ },
      schema: {
        tags: ['monitoring'],
        summary: 'Chart of the confidence sequence and always-valid p over the course of the study (SVG)',
        params: MeasureParams,
        querystring: PairQuery,
        response: {
          200: { description: 'SVG image', content: { 'image/svg+xml': { schema: z.string() } } },
          ...problems(400, 401, 403, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const { e, measure, pair, t } = await loadTrajectory(request.params.id, request.params.measure, request.query.a, request.query.b);
      const span = measure.max - measure.min;
      const svg = renderTrajectoryChart({
        alpha: e.alpha,
        points: t.points,
        measureLabel: `${measure.label} (${pair.ids[0]} − ${pair.ids[1]})`,
        differenceLimits: { lower: -span, upper: span },
        id: `sb-traj-${measure.id}`,
      });
      reply.type(SVG_CONTENT_TYPE).header('cache-control', 'no-cache');
      return svg;
    },
  );
}

/** 2·(1 − Φ(z)), the two-sided nominal p of a boundary (as stats/sequential's nominalP). */
function nominalP(z: number): number {
  return 2 * normalUpperTail(z);
}
