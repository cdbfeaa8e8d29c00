/**
 * Experiments: create (admin), list and read (read or admin; the definition plus counts per condition),
 * change (admin). Thin: parse → repository → reply.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import type { ExperimentRecord, Store } from '../../store/types.js';
import { ProblemError, RequestValidationError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { ExperimentInputSchema, ExperimentListSchema, ExperimentPatchSchema, ExperimentSchema, type ExperimentView } from '../../schemas/experiments.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';
import { declaredMargin, declaredMargins, MARGINS_OPTION } from '../../services/comparisons/margin.js';
import { marginProblem } from '../../schemas/equivalence.js';
import { DEFAULT_MAX_WEIGHT, weightsOf } from '../../schemas/weights.js';

function weightsView(e: ExperimentRecord): { weights: ExperimentView['weights']; maxWeight: number | null } {
  const w = weightsOf(e.options);
  return { weights: w.weights, maxWeight: w.weights === 'none' ? null : w.maxWeight };
}
import { definitionRoleOptions, primaryChangesOf, primaryOf, requestedPrimary, roleOf } from '../../services/measure-roles.js';

export function experimentView(e: ExperimentRecord): ExperimentView {
  let responses = 0;
  let excluded = 0;
  for (const c of e.conditions) {
    responses += c.responses;
    excluded += c.excluded;
  }
  return {
    id: e.id,
    title: e.title,
    status: e.status,
    conditions: e.conditions.map((c) => ({ id: c.id, label: c.label })),
    measures: e.measures.map((m) => ({
      id: m.id,
      label: m.label,
      min: m.min,
      max: m.max,
      integer: m.integer,
      required: m.required,
      equivalenceMargin: declaredMargin(e, m),
      role: m.role,
      primary: primaryOf(e) === m.id,
    })),
    primaryChanges: primaryChangesOf(e),
    plannedPerCondition: e.plannedPerCondition,
    alpha: e.alpha,
    thankYouUrl: e.thankYouUrl,
    flagThresholds: (e.options.flagThresholds as ExperimentView['flagThresholds']) ?? null,
    monitoring: (e.options.monitoring as ExperimentView['monitoring']) ?? null,
    allocation: (e.options.allocation as ExperimentView['allocation']) ?? null,
    ...weightsView(e),
    dataVersion: e.dataVersion,
    createdAt: e.createdAt,
    updatedAt: e.updatedAt,
    counts: {
      responses,
      excluded,
      byCondition: e.conditions.map((c) => ({ condition: c.id, responses: c.responses, excluded: c.excluded })),
    },
  };
}

export async function experimentRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.post(
    '/v1/experiments',
    {
      config: { access: { scopes: ['admin'], allowExperimentLimited: false } },
      schema: {
        tags: ['experiments'],
        summary: 'Create an experiment',
        body: ExperimentInputSchema,
        response: { 201: ExperimentSchema, ...problems(400, 401, 403, 409, 413, 415, 422, 500) },
      },
    },
    async (request, reply) => {
      const b = request.body;
      const result = await store.experiments.create({
        id: b.id,
        title: b.title,
        conditions: b.conditions.map((c) => ({ id: c.id, label: c.label ?? c.id })),
        measures: b.measures.map((m) => ({ id: m.id, label: m.label ?? m.id, min: m.min, max: m.max, integer: m.integer, required: m.required, role: m.role })),
        plannedPerCondition: b.plannedPerCondition ?? null,
        alpha: b.alpha,
        thankYouUrl: b.thankYouUrl ?? null,
        options: {
          ...(b.flagThresholds ? { flagThresholds: b.flagThresholds } : {}),
          ...(b.monitoring ? { monitoring: b.monitoring } : {}),
          ...(b.allocation ? { allocation: b.allocation } : {}),
          ...marginsOption(b.measures),
          ...(b.weights !== 'none' ? { weights: b.weights, maxWeight: b.maxWeight ?? DEFAULT_MAX_WEIGHT } : {}),
          ...definitionRoleOptions(b.measures),
        },
      });
      if (result.kind === 'duplicate') throw new ProblemError('already-exists', `An experiment with id ${b.id} already exists.`);
      reply.code(201).header('location', `/v1/experiments/${result.experiment.id}`);
      return experimentView(result.experiment);
    },
  );

  app.get(
    '/v1/experiments',
    {
      config: { access: { scopes: ['admin', 'read'] } },
      schema: {
        tags: ['experiments'],
        summary: 'List experiments (a key limited to one experiment sees only that one)',
        response: { 200: ExperimentListSchema, ...problems(401, 403, 500) },
      },
    },
    async (request) => {
      const list = await store.experiments.list(request.principal?.experimentKey ?? null);
      return { experiments: list.map(experimentView) };
    },
  );

  app.get(
    '/v1/experiments/:id',
    {
      config: { access: { scopes: ['admin', 'read'], experimentParam: 'id' } },
      schema: {
        tags: ['experiments'],
        summary: 'An experiment: its definition and counts per condition',
        params: ExperimentParams,
        response: { 200: ExperimentSchema, ...problems(400, 401, 403, 404, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      return experimentView(e);
    },
  );

  app.patch(
    '/v1/experiments/:id',
    {
      config: { access: { scopes: ['admin'], experimentParam: 'id' } },
      schema: {
        tags: ['experiments'],
        summary: "Change an experiment's title, status, planned size, alpha, thank-you URL or measures",
        params: ExperimentParams,
        body: ExperimentPatchSchema,
        response: { 200: ExperimentSchema, ...problems(400, 401, 403, 404, 409, 413, 415, 422, 500) },
      },
    },
    async (request) => {
      const e = await loadExperiment(store, request.params.id);
      const patch = request.body;
      const unknown = (patch.measures ?? [])
        .map((m, i) => ({ m, i }))
        .filter(({ m }) => !e.measures.some((x) => x.id === m.id))
        .map(({ m, i }) => ({ path: `measures[${i}].id`, message: `is not a measure of this experiment`, value: m.id }));
      if (unknown.length > 0) throw new RequestValidationError('body', unknown);
      const { flagThresholds, ...rest } = patch;
      const now = new Date().toISOString();
      const margins = patchedMargins(e, patch.measures ?? []);
      const primary = requestedPrimary(e, patch.measures ?? []);
      const primaryNow = primary !== undefined ? primary : primaryOf(e);
      if (primaryNow !== null && roleOf(e, primaryNow) !== 'outcome') {
        const i = (patch.measures ?? []).findIndex((m) => m.id === primaryNow);
        throw new RequestValidationError('body', [{ path: `measures[${Math.max(0, i)}].primary`, message: 'a primary measure must have the role "outcome"' }]);
      }
      const options = {
        ...(flagThresholds !== undefined ? { flagThresholds } : {}),
        ...(margins !== undefined ? { [MARGINS_OPTION]: margins } : {}),
      };
      const measures = rest.measures?.map(({ equivalenceMargin: _margin, primary: _primary, ...m }) => m);
      const result = await store.experiments.update(
        e.key,
        {
          ...rest,
          ...(measures ? { measures } : {}),
          ...(Object.keys(options).length > 0 ? { options } : {}),
          // Recorded with the definition and in the audit trail when answers exist (decided inside the update's transaction).
          ...(primary !== undefined ? { primary: { measure: primary, apiKeyId: request.principal?.keyId ?? null } } : {}),
        },
        now,
      );
      switch (result.kind) {
        case 'updated':
          return experimentView(result.experiment);
        case 'not-found':
          throw experimentNotFound(request.params.id);
        case 'limits-locked':
          throw new ProblemError(
            'limits-locked',
            `The limits (min, max, integer) of ${result.measures.map((m) => m.id).join(', ')} cannot change: the measure already has stored values.`,
            {
              errors: result.measures.map((m) => ({
                path: `measures[${(patch.measures ?? []).findIndex((p) => p.id === m.id)}]`,
                message: `${m.id} already has ${m.values} stored value${m.values === 1 ? '' : 's'}; its limits cannot change`,
              })),
            },
          );
        case 'invalid-limits':
          throw new RequestValidationError(
            'body',
            result.measures.map((m) => ({ path: `measures[${(patch.measures ?? []).findIndex((p) => p.id === m.id)}]`, message: m.message })),
          );
      }
    },
  );
}

/** The options entry that keeps the declared equivalence margins by measure id (none when no measure declares one). */
function marginsOption(measures: { id: string; equivalenceMargin?: number }[]): Record<string, Record<string, number>> {
  const margins: Record<string, number> = {};
  for (const m of measures) if (m.equivalenceMargin !== undefined) margins[m.id] = m.equivalenceMargin;
  return Object.keys(margins).length > 0 ? { [MARGINS_OPTION]: margins } : {};
}

/**
 * The margins after a PATCH (undefined when the patch names none): a number sets, null removes. Each is checked
 * against the measure's limits after the patch (422 naming the field when unusable).
 */
function patchedMargins(
  e: ExperimentRecord,
  patches: { id: string; min?: number; max?: number; equivalenceMargin?: number | null }[],
): Record<string, number> | null | undefined {
  const margins = { ...declaredMargins(e) };
  const errors: { path: string; message: string; value: unknown }[] = [];
  patches.forEach((p, i) => {
    const measure = e.measures.find((m) => m.id === p.id);
    const limits = { min: p.min ?? measure!.min, max: p.max ?? measure!.max };
    if (p.equivalenceMargin === undefined && margins[p.id] !== undefined && limits.min < limits.max) {
      // New limits must still leave room for the declared margin.
      const problem = marginProblem(margins[p.id], limits);
      if (problem) errors.push({ path: `measures[${i}].equivalenceMargin`, message: `the declared margin ${problem.replace(/^must/, 'must still')}`, value: margins[p.id] });
    }
    if (p.equivalenceMargin === null) delete margins[p.id];
    else if (p.equivalenceMargin !== undefined) {
      const problem = limits.min < limits.max ? marginProblem(p.equivalenceMargin, limits) : null;
      if (problem) errors.push({ path: `measures[${i}].equivalenceMargin`, message: problem, value: p.equivalenceMargin });
      else margins[p.id] = p.equivalenceMargin;
    }
  });
  if (errors.length > 0) throw new RequestValidationError('body', errors);
  if (!patches.some((p) => p.equivalenceMargin !== undefined)) return undefined;
  return Object.keys(margins).length > 0 ? margins : null;
}
