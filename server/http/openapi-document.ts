/**
 * The OpenAPI 3.1 document of a ready app: what @fastify/swagger generates from the routes' zod schemas, with
 * paths and component schemas sorted by name (everything inside keeps the order the schemas declare), as a plain
 * JSON copy. Served at GET /openapi.json (http/routes/results-page.ts) and written to openapi/openapi.json by
 * `npm run openapi` (cli/openapi.ts).
 */
import type { FastifyInstance } from 'fastify';

export type Json = null | boolean | number | string | Json[] | { [key: string]: Json };

function sortKeys(obj: Record<string, Json> | undefined): Record<string, Json> | undefined {
  if (!obj) return obj;
  const out: Record<string, Json> = {};
  for (const k of Object.keys(obj).sort()) out[k] = obj[k];
  return out;
}

/** The document of a ready app, with paths and component schemas in name order (a plain JSON copy). */
export function openApiDocument(app: FastifyInstance): Record<string, Json> {
  const doc = JSON.parse(JSON.stringify(app.swagger())) as Record<string, Json>;
  if (doc.paths && typeof doc.paths === 'object') doc.paths = sortKeys(doc.paths as Record<string, Json>)!;
  const components = doc.components as Record<string, Json> | undefined;
  if (components && typeof components === 'object' && components.schemas) {
    components.schemas = sortKeys(components.schemas as Record<string, Json>)!;
  }
  return doc;
}
