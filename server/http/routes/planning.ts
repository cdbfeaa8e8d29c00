/**
 * POST /v1/planning/sample-size (read or admin; a key limited to one experiment may use it too): answers per
 * condition for a planned Welch t-test (noncentral t) or rank-sum test (Noether 1987); see stats/planning.ts.
 * Inconsistent inputs (both or neither of difference/sd and effectSize, power ≤ alpha, no effect, an effect
 * pointing against a one-sided alternative, more than 1e8 per condition) → 422 problem+json.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { sampleSize } from '../../../stats/planning.js';
import type { Store } from '../../store/types.js';
import { RequestValidationError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { PlanningInputSchema, PlanningResultSchema } from '../../schemas/monitoring.js';

const ASSUMPTIONS = {
  welch:
    'Both conditions share one standard deviation at the planning stage; answers are independent. With equal SDs and these sizes, ' +
    "Welch's test has practically the power computed here for the two-sample t-test.",
  'rank-sum':
    'Noether (1987) large-sample approximation; the effect is P(A > B) + ½ P(A = B), from the normal shift model P = Φ(d/√2) when ' +
    'a difference or effect size is given. Heavy ties (few scale points) lower the real power somewhat.',
} as const;

export async function planningRoutes(base: FastifyInstance, _opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();

  app.post(
    '/v1/planning/sample-size',
    {
      config: { access: { scopes: ['admin', 'read'] } },
      schema: {
        tags: ['planning'],
        summary: 'Answers per condition needed for a planned two-condition comparison',
        description:
          'State the expected effect in one way: `difference` and `sd`, or `effectSize` (Cohen\'s d), or — for rank-sum — ' +
          '`probabilityOfSuperiority`. `ratio` is n_b / n_a. The answer is the smallest whole n_a (n_b = ⌈ratio · n_a⌉) whose ' +
          'power reaches `power`, and the power achieved there. Put `plannedPerCondition` into the experiment definition.',
        body: PlanningInputSchema,
        response: { 200: PlanningResultSchema, ...problems(400, 401, 403, 413, 415, 422, 500) },
      },
    },
    async (request) => {
      const b = request.body;
      const r = sampleSize({
        test: b.test,
        difference: b.difference ?? null,
        sd: b.sd ?? null,
        effectSize: b.effectSize ?? null,
        probabilityOfSuperiority: b.probabilityOfSuperiority ?? null,
        alpha: b.alpha,
        power: b.power,
        ratio: b.ratio,
        alternative: b.alternative,
      });
      if (r.perCondition === null || r.total === null || r.achievedPower === null) {
        throw new RequestValidationError('body', [{ path: '', message: r.reason ?? 'no sample size reaches the requested power' }]);
      }
      return {
        test: b.test,
        alternative: b.alternative,
        alpha: b.alpha,
        power: b.power,
        ratio: b.ratio,
        perCondition: [r.perCondition[0], r.perCondition[1]] as [number, number],
        total: r.total,
        achievedPower: r.achievedPower,
        method: r.method,
        effectSize: r.effectSize,
        probabilityOfSuperiority: r.probabilityOfSuperiority,
        plannedPerCondition: Math.max(r.perCondition[0], r.perCondition[1]),
        assumptions: ASSUMPTIONS[b.test],
      };
    },
  );
}
