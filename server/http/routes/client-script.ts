/**
 * The answer-collecting browser client, served by the service itself (no CDN, no build step):
 *
 *   GET /client/v1/collect.js     → server/pages/collect/v1/collect.js   (ES module, no dependencies)
 *   GET /client/v1/collect.d.ts   → its typed declarations
 *
 * The major version is in the path: a page pins /client/v1/ and keeps working when a v2 appears beside it; the
 * module's VERSION export names the exact release. Both files are read once, at registration, and served from
 * memory with a strong ETag (If-None-Match → 304) and `public, max-age=3600`. Cross-origin use follows the
 * service's CORS setting (SPLITBALLOT_CORS_ORIGINS): a module script is always fetched with CORS, so a page from
 * an origin that is not listed cannot load it (its plain form post still works).
 */
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import { pagesDirectory } from '../page-assets.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';

/** URL path of the client's folder (major version 1). */
export const CLIENT_PATH = '/client/v1';
/** Served file name → content type; nothing else from the folder is served. */
export const CLIENT_FILES: Readonly<Record<string, string>> = Object.freeze({
  'collect.js': 'text/javascript; charset=utf-8',
  'collect.d.ts': 'application/typescript; charset=utf-8',
});
export const CLIENT_CACHE_CONTROL = 'public, max-age=3600';

/** The folder of the client's files in the source tree (also found from dist/, like the results page). */
export function clientDirectory(): string {
  return join(pagesDirectory(), 'collect', 'v1');
}

export async function clientScriptRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const dir = clientDirectory();
  const files = new Map(
    Object.entries(CLIENT_FILES).map(([name, type]) => {
      const body = readFileSync(join(dir, name));
      return [name, { body, type, etag: `"${createHash('sha256').update(body).digest('base64url').slice(0, 27)}"` }] as const;
    }),
  );

  // The files are public code meant to be loaded from other origins: after the app's security headers (which say
  // same-origin for everything), let no-cors loads through too. The client also uses such a load to tell "the
  // service is unreachable" from "this page's origin is not allowed" (CORS).
  app.addHook('onSend', async (_request, reply, payload) => {
    reply.header('cross-origin-resource-policy', 'cross-origin');
    return payload;
  });

  app.get(
    `${CLIENT_PATH}/:file`,
    {
      config: { access: { public: true } },
      schema: {
        tags: ['pages'],
        summary: 'The browser client for survey pages (ES module) and its type declarations',
        description:
          'collect.js: assign a respondent, check answers against the form definition, and submit them through a durable ' +
          'queue in browser storage with safe retries (see docs/collecting-answers.md). collect.d.ts: its TypeScript declarations. ' +
          'Anything else is 404.',
        params: z.object({ file: z.string().max(100) }),
        response: {
          200: {
            description: 'The file',
            content: {
              'text/javascript': { schema: z.string().meta({ example: "export const VERSION = '1.0.0';" }) },
              'application/typescript': { schema: z.string() },
            },
          },
          304: z.null().describe('Not modified (If-None-Match)'),
          ...problems(400, 404, 500),
        },
      },
    },
    async (request, reply) => {
      const name = request.params.file;
      const file = Object.prototype.hasOwnProperty.call(CLIENT_FILES, name) ? files.get(name) : undefined;
      if (!file) throw new ProblemError('not-found', `There is no client file ${JSON.stringify(name.slice(0, 100))}.`);
      reply.header('cache-control', CLIENT_CACHE_CONTROL).header('etag', file.etag);
      if (request.headers['if-none-match'] === file.etag) return reply.code(304).send(null);
      return reply.type(file.type).send(file.body as unknown as string);
    },
  );
}
