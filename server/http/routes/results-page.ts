/**
 * The built-in results page (public HTML; the page asks for a read key itself and sends it as a header to the
 * JSON API, never in a URL):
 *
 *   GET /experiments/{id}   → server/pages/results.html (the script reads the id from the path)
 *   GET /pages/{name}       → one of PAGE_ASSETS (scripts, stylesheet, icon); nothing else from the folder
 *   GET /openapi.json       → the OpenAPI document of this service (server/cli/openapi.ts; public, like the page)
 *
 * Every answer carries RESULTS_PAGE_CSP (own origin only, no inline script or style). The files are read once,
 * at registration, and served from memory with a strong ETag.
 */
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { Store } from '../../store/types.js';
import { openApiDocument } from '../openapi-document.js';
import { PAGE_ASSETS, pagesDirectory, RESULTS_HTML, RESULTS_PAGE_CSP } from '../page-assets.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';

interface Asset {
  body: Buffer;
  type: string;
  etag: string;
}

function load(dir: string, name: string, type: string): Asset {
  const body = readFileSync(join(dir, name));
  return { body, type, etag: `"${createHash('sha256').update(body).digest('base64url').slice(0, 27)}"` };
}

export async function resultsPageRoutes(base: FastifyInstance, _opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const dir = pagesDirectory();
  const page = load(dir, RESULTS_HTML, 'text/html; charset=utf-8');
  const assets = new Map<string, Asset>(Object.entries(PAGE_ASSETS).map(([name, type]) => [name, load(dir, name, type)]));

  app.get(
    '/experiments/:id',
    {
      config: { access: { public: true } },
      schema: {
        tags: ['pages'],
        summary: 'Results page of one experiment (HTML)',
        description:
          'A page for people: it asks once for a read key (kept in this browser tab only and sent as an Authorization header to ' +
          'the JSON API), then shows for each measure a box plot with every answer, the table with both tests side by side, the ' +
          'quality flags in words, the interim block and the progress toward the planned size, and refreshes itself from the ' +
          'event stream. The page itself is public and contains no data.',
        params: z.object({ id: z.string().max(200) }),
        response: {
          200: { description: 'HTML page', content: { 'text/html': { schema: z.string().meta({ example: '<!doctype html>…' }) } } },
          304: z.null().describe('Not modified (If-None-Match)'),
          ...problems(400, 500),
        },
      },
    },
    async (request, reply) => {
      reply.header('content-security-policy', RESULTS_PAGE_CSP).header('cache-control', 'no-cache').header('etag', page.etag);
      if (request.headers['if-none-match'] === page.etag) return reply.code(304).send(null);
      return reply.type(page.type).send(page.body as unknown as string);
    },
  );

  app.get(
    '/pages/:name',
    {
      config: { access: { public: true } },
      schema: {
        tags: ['pages'],
        summary: "The results page's scripts, stylesheet and icon",
        description: `Serves only these files: ${Object.keys(PAGE_ASSETS).join(', ')}. Anything else is 404.`,
        params: z.object({ name: z.string().max(100) }),
        response: {
          200: {
            description: 'The file',
            content: {
              'text/javascript': { schema: z.string().meta({ example: "import { formatP } from './format.js';" }) },
              'text/css': { schema: z.string() },
              'image/svg+xml': { schema: z.string() },
            },
          },
          304: z.null().describe('Not modified (If-None-Match)'),
          ...problems(400, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const asset = Object.prototype.hasOwnProperty.call(PAGE_ASSETS, request.params.name) ? assets.get(request.params.name) : undefined;
      if (!asset) throw new ProblemError('not-found', `There is no page file ${JSON.stringify(request.params.name.slice(0, 100))}.`);
      reply.header('content-security-policy', RESULTS_PAGE_CSP).header('cache-control', 'no-cache').header('etag', asset.etag);
      if (request.headers['if-none-match'] === asset.etag) return reply.code(304).send(null);
      return reply.type(asset.type).send(asset.body as unknown as string);
    },
  );

  let openApi: string | null = null;
  app.get(
    '/openapi.json',
    {
      config: { access: { public: true } },
      schema: {
        tags: ['documents'],
        summary: 'This OpenAPI 3.1 document',
        description:
          'Generated from the same zod schemas that validate the requests (also committed as openapi/openapi.json by `npm run openapi`). ' +
          'Use it to generate a client or to read every route, its parameters, answers and problem responses.',
        response: {
          200: { description: 'OpenAPI 3.1 document', content: { 'application/json': { schema: z.record(z.string(), z.unknown()).meta({ example: { openapi: '3.1.0' } }) } } },
          ...problems(500),
        },
      },
    },
    async (_request, reply) => {
      openApi ??= JSON.stringify(openApiDocument(base));
      return reply.type('application/json; charset=utf-8').header('cache-control', 'no-cache').send(openApi as unknown as Record<string, unknown>);
    },
  );
}
