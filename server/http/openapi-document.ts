/**
 * The OpenAPI 3.1 document of a ready app: what @fastify/swagger generates from the routes' zod schemas, with
 * paths and component schemas sorted by name (everything inside keeps the order the schemas declare), as a plain
 * JSON copy. Served at GET /openapi.json (http/routes/results-page.ts) and written to openapi/openapi.json by
 * `npm run openapi` (cli/openapi.ts).
 */
import swagger from '@fastify/swagger';
import type { FastifyInstance } from 'fastify';
import { jsonSchemaTransform, jsonSchemaTransformObject } from 'fastify-type-provider-zod';

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

/** @fastify/swagger with the service's info and bearer scheme; every route that needs a key is marked with it. */
export function registerOpenApi(app: FastifyInstance): void {
  app.addHook('onRoute', (route) => {
    const access = route.config?.access;
    if (access && !access.public && route.schema) {
      route.schema = { ...route.schema, security: [{ bearerAuth: [] }] } as typeof route.schema;
    }
  });

  app.register(swagger, {
    openapi: {
      openapi: '3.1.0',
      info: {
        title: 'Splitballot',
        version: '0.1.0',
        description: 'Validated ingest and running two-condition comparisons for split-ballot survey experiments.',
      },
      components: {
        securitySchemes: { bearerAuth: { type: 'http', scheme: 'bearer', description: 'An API key: Authorization: Bearer sb_…' } },
      },
    },
    transform: jsonSchemaTransform,
    transformObject: jsonSchemaTransformObject,
  });
}
