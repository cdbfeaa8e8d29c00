/**
 * The team overview: GET / (the page, public HTML that asks for a read or admin key like the results page) and
 * GET /v1/overview (JSON: every study the key may see; conditional with an ETag, so polling costs one stamp query
 * per study while nothing changes — services/overview.ts).
 */
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { Store } from '../../store/types.js';
import type { ComparisonService } from '../../services/comparisons/service.js';
import { buildOverview, overviewEtag, overviewInput } from '../../services/overview.js';
import { OverviewSchema } from '../../schemas/overview.js';
import { problems } from '../../schemas/common.js';
import { notModified } from '../conditional.js';
import { pagesDirectory, RESULTS_PAGE_CSP } from '../page-assets.js';

export const OVERVIEW_HTML = 'overview.html';

export async function overviewRoutes(base: FastifyInstance, opts: { store: Store; comparisons: ComparisonService }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store, comparisons } = opts;
  const html = readFileSync(join(pagesDirectory(), OVERVIEW_HTML));
  const htmlEtag = `"${createHash('sha256').update(html).digest('base64url').slice(0, 27)}"`;

  app.get(
    '/',
    {
      config: { access: { public: true } },
      schema: {
        tags: ['pages'],
        summary: "The team overview (HTML): every study a read or admin key may see",
        description: 'The page asks for a key (kept in this browser tab, sent as an Authorization header) and polls GET /v1/overview conditionally.',
        response: {
          200: { description: 'HTML page', content: { 'text/html': { schema: z.string() } } },
          304: z.null().describe('Not modified (If-None-Match)'),
          ...problems(500),
        },
      },
    },
    async (request, reply) => {
      reply.header('content-security-policy', RESULTS_PAGE_CSP).header('cache-control', 'no-cache').header('etag', htmlEtag);
      if (request.headers['if-none-match'] === htmlEtag) return reply.code(304).send(null);
      return reply.type('text/html; charset=utf-8').send(html as unknown as string);
    },
  );

  app.get(
    '/v1/overview',
    {
      config: { access: { scopes: ['admin', 'read'] } },
      schema: {
        tags: ['experiments'],
        summary: "The team overview: every study the key may see, with progress and the primary outcome's headline",
        description:
          'Status, answers per condition against the planned size, answers today and this week (UTC; the ISO week starts on ' +
          'Monday), refused values, the number of warning flags, and the primary outcome (first pair): mean difference and ' +
          'Hodges–Lehmann shift with intervals and p, and the anytime-valid reading while the study is open. Send If-None-Match ' +
          'to poll: 304 while nothing changed. A key limited to one study sees only that one.',
        response: { 200: OverviewSchema, 304: z.null().describe('Not modified (If-None-Match)'), ...problems(401, 403, 500) },
      },
    },
    async (request, reply) => {
      const input = await overviewInput(store, request.principal?.experimentKey ?? null, new Date());
      if (notModified(request, reply, overviewEtag(input))) return reply;
      return buildOverview(store, comparisons, input);
    },
  );
}
