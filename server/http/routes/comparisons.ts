/**
 * Comparisons over HTTP (read or admin keys): one measure and one pair, the whole family with adjusted p-values,
 * and the distribution chart as SVG. Thin: resolve → stamp (one cheap query) → If-None-Match → service (cache or
 * compute) → reply with a strong ETag and Cache-Control: private, no-cache. The service (server/services/comparisons/service.ts)
 * holds the logic and the cache.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import { assertFamilySize, MAX_FAMILY_COMPARISONS, type ComparisonOptions, type ComparisonService } from '../../services/comparisons/service.js';
import { comparisonPair, loadExperiment, resolveMeasure, type ComparisonTarget } from '../../services/targets.js';
import { resolveCovariates } from '../../services/comparisons/adjusted.js';
import type { ExperimentRecord, Store } from '../../store/types.js';
import { problems } from '../../schemas/common.js';
import { ChartQuery, ComparisonParams, ComparisonQuery, ComparisonSchema, FamilyQuery, FamilySchema, type FamilyBody } from '../../schemas/comparisons.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { OmnibusChartQuery, OmnibusQuery, OmnibusSchema } from '../../schemas/omnibus.js';
import { requestMargin } from '../../services/comparisons/margin.js';
import { notModified } from '../conditional.js';
import { SVG_CONTENT_TYPE } from '../page-assets.js';

const ACCESS = { access: { scopes: ['read', 'admin'] as const, experimentParam: 'id' } };
const NOT_MODIFIED = z.null().describe('Not modified: the If-None-Match tag is current (no body)');

const POLLING =
  'Every reply carries `dataVersion` and a strong `ETag`. Poll with `If-None-Match: <the ETag>`: while neither the data ' +
  '(dataVersion), the refused-value counters nor the definition changed, the answer is 304 with no body and nothing is ' +
  'recomputed. Results are cached per (experiment, measure, pair, options, dataVersion).';

export async function comparisonRoutes(base: FastifyInstance, opts: { store: Store; comparisons: ComparisonService }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;
  const service = opts.comparisons;

  app.get(
    '/v1/experiments/:id/comparisons',
    {
      config: ACCESS,
      schema: {
        tags: ['comparisons'],
        summary: 'Every measure for the first pair (or every pair), with p-values adjusted across the family',
        description:
          'One entry per measure (definition order) and pair: the full comparison plus `adjusted` — Welch and rank-sum p-values ' +
          'adjusted across the whole family with Holm (1979, family-wise error; default), Benjamini–Hochberg (1995, false ' +
          'discovery rate) or none. ' +
          `At most ${MAX_FAMILY_COMPARISONS} comparisons (measures × pairs) per request: a larger family is refused with 422 ` +
          'family-too-large (ask for pairs=first, or one measure at a time). ' +
          POLLING,
        params: ExperimentParams,
        querystring: FamilyQuery,
        response: { 200: FamilySchema, 304: NOT_MODIFIED, ...problems(400, 401, 403, 404, 422, 500) },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const q = request.query;
      const options = { ...toOptions(q), pairs: q.pairs, adjust: q.adjust, includeCovariates: q.includeCovariates === 'true' };
      assertFamilySize(e, options.pairs, options.includeCovariates, `This family (pairs=${options.pairs})`);
      const stamp = await service.stamp(e);
      if (notModified(request, reply, service.familyEtagFromStamp(e, options, stamp))) return reply;
      const { json, etag } = await service.family(e, options, stamp);
      // The cached JSON text (encoded through FamilySchema when it was computed): nothing is serialised per request.
      return reply.header('etag', etag).type('application/json; charset=utf-8').send(json as unknown as FamilyBody);
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure',
    {
      config: ACCESS,
      schema: {
        tags: ['comparisons'],
        summary: 'Compare two conditions on one measure: both tests, estimates, effect sizes, quality flags, monitoring',
        description:
          'Welch and pooled t-tests, the Wilcoxon–Mann–Whitney rank-sum test, the Hodges–Lehmann shift, effect sizes, ' +
          'Brunner–Munzel and Yuen–Welch, every difference a − b, plus quality flags in plain words and the interim ' +
          'monitoring block. With exactly two conditions a and b default to the first and second. When an equivalence margin is ' +
          "known (`?margin=`, else the measure's `equivalenceMargin`), `equivalence` holds the Welch and the rank-based two " +
          'one-sided tests (TOST) with a verdict in words. In an experiment with survey ' +
          'weights the `weighted` block (design-based t and rank tests, weighted summaries) is added; `covariates=` adds the ' +
          '`adjusted` block (Lin 2013 with the HC2 standard error). ' +
          POLLING,
        params: ComparisonParams,
        querystring: ComparisonQuery,
        response: { 200: ComparisonSchema, 304: NOT_MODIFIED, ...problems(400, 401, 403, 404, 422, 500) },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const target = resolveTarget(e, request.params.measure, request.query.a, request.query.b);
      const options = toOptions(request.query);
      if (request.query.margin !== undefined) options.margin = requestMargin(e, target.measure, request.query.margin);
      const covariates = request.query.covariates === undefined ? null : resolveCovariates(e, target.measure, request.query.covariates);
      const stamp = await service.stamp(e);
      const key = covariates ? service.adjustedKey(target, options, covariates, stamp) : service.comparisonKey(target, options, stamp);
      if (notModified(request, reply, service.etagOf(key))) return reply;
      const { body, etag } = covariates
        ? await service.comparisonWithAdjustment(target, options, covariates, stamp)
        : await service.comparison(target, options, stamp);
      reply.header('etag', etag);
      return body;
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure/chart.svg',
    {
      config: ACCESS,
      schema: {
        tags: ['comparisons'],
        summary: 'Box plot with every answer of two conditions on one measure (SVG)',
        description:
          'Box (quartiles), median line, mean diamond, whiskers at 1.5·IQR, every answer as a jittered dot (an evenly spaced ' +
          'subsample above 2,000 per group); the axis runs over the scale from min to max, or with range=data over the answers\' ' +
          'range, marked "axis does not start at the scale\'s minimum". Same cache and ETag rules as the comparison.',
        params: ComparisonParams,
        querystring: ChartQuery,
        produces: ['image/svg+xml'],
        response: {
          200: { description: 'An SVG image', content: { 'image/svg+xml': { schema: z.string() } } },
          304: NOT_MODIFIED,
          ...problems(400, 401, 403, 404, 422, 500),
        },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const target = resolveTarget(e, request.params.measure, request.query.a, request.query.b);
      const includeExcluded = request.query.includeExcluded === 'true';
      const range = request.query.range;
      const stamp = await service.stamp(e);
      if (notModified(request, reply, service.etagOf(service.chartKey(target, includeExcluded, stamp, range)))) return reply;
      const { svg, etag } = await service.chart(target, includeExcluded, stamp, range);
      return reply.header('etag', etag).type(SVG_CONTENT_TYPE).send(svg);
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure/omnibus',
    {
      config: ACCESS,
      schema: {
        tags: ['comparisons'],
        summary: "All conditions on one measure: Welch's ANOVA, Kruskal–Wallis, then every pair (Games–Howell, Dunn)",
        description:
          "Welch's ANOVA (F, df1, df2, p, est. ω²), the classic ANOVA for reference (η², ω²) and the Kruskal–Wallis test (H with " +
          'the tie correction, ε²), then every pair i < j in definition order: Games–Howell (mean difference a − b, Welch t and df, ' +
          "p from the studentized range) and Dunn's test (z, two-sided p, two-sided Holm-adjusted p), plus `equivalence` per pair " +
          "when a margin is known (`?margin=`, else the measure's `equivalenceMargin`). Group summaries per condition, and the " +
          'omnibus flags (omnibus_tests_disagree, one_condition_drives). Integer items are computed from the per-value counts ' +
          '(O(distinct values × conditions)), continuous items from the sorted values. ' +
          POLLING,
        params: ComparisonParams,
        querystring: OmnibusQuery,
        response: { 200: OmnibusSchema, 304: NOT_MODIFIED, ...problems(400, 401, 403, 404, 422, 500) },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const measure = resolveMeasure(e, request.params.measure);
      const options = {
        includeExcluded: request.query.includeExcluded === 'true',
        margin: requestMargin(e, measure, request.query.margin),
      };
      const stamp = await service.stamp(e);
      if (notModified(request, reply, service.etagOf(service.omnibusKey(e, measure, options, stamp)))) return reply;
      const { body, etag } = await service.omnibus(e, measure, options, stamp);
      reply.header('etag', etag);
      return body;
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons/:measure/omnibus/chart.svg',
    {
      config: ACCESS,
      schema: {
        tags: ['comparisons'],
        summary: 'Box plot with every answer of every condition on one measure, side by side (SVG)',
        description: 'As the pairwise chart, with one box per condition in definition order. Same cache and ETag rules as the omnibus.',
        params: ComparisonParams,
        querystring: OmnibusChartQuery,
        produces: ['image/svg+xml'],
        response: {
          200: { description: 'An SVG image', content: { 'image/svg+xml': { schema: z.string() } } },
          304: NOT_MODIFIED,
          ...problems(400, 401, 403, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const measure = resolveMeasure(e, request.params.measure);
      const includeExcluded = request.query.includeExcluded === 'true';
      const stamp = await service.stamp(e);
      if (notModified(request, reply, service.etagOf(service.omnibusChartKey(e, measure, includeExcluded, stamp)))) return reply;
      const { svg, etag } = await service.omnibusChart(e, measure, includeExcluded, stamp);
      return reply.header('etag', etag).type(SVG_CONTENT_TYPE).send(svg);
    },
  );
}

function resolveTarget(e: ExperimentRecord, measureId: string, a: string | undefined, b: string | undefined): ComparisonTarget {
  const measure = resolveMeasure(e, measureId);
  const [ca, cb] = comparisonPair(e, a, b);
  return { experiment: e, measure, a: ca, b: cb };
}

function toOptions(q: { alternative: ComparisonOptions['alternative']; confidenceLevel: number; includeExcluded: 'true' | 'false' }): ComparisonOptions {
  return { alternative: q.alternative, confidenceLevel: q.confidenceLevel, includeExcluded: q.includeExcluded === 'true' };
}
