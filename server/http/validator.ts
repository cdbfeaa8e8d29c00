/**
 * Validator compiler for zod schemas: like fastify-type-provider-zod's, but a failure becomes a
 * RequestValidationError carrying FieldErrors (path "values.satisfaction" style), which the error handler turns
 * into a 422 (body) or 400 (query, params, headers) problem.
 */
import type { FastifySchemaCompiler } from 'fastify';
import type { ZodType } from 'zod';
import { OverlongNumber } from './json-body.js';
import { formatPath } from '../schemas/common.js';
import { RequestValidationError } from './problem-handler.js';
import type { FieldError } from '../schemas/common.js';

function valueAt(data: unknown, path: readonly PropertyKey[]): unknown {
  let cur: unknown = data;
  for (const seg of path) {
    if (cur === null || typeof cur !== 'object') return undefined;
    cur = (cur as Record<PropertyKey, unknown>)[seg];
  }
  return cur;
}

/** Validate `data` with a zod schema; FieldErrors carry paths under `prefix`. */
export function zodFieldErrors(schema: ZodType, data: unknown, prefix: readonly PropertyKey[] = []): { ok: true; value: unknown } | { ok: false; errors: FieldError[] } {
  const result = schema.safeParse(data);
  if (result.success) return { ok: true, value: result.data };
  const errors: FieldError[] = [];
  for (const issue of result.error.issues) {
    if (issue.code === 'unrecognized_keys') {
      for (const key of issue.keys) errors.push({ path: formatPath([...prefix, ...issue.path, key]), message: 'is not a known field' });
      continue;
    }
    const value = valueAt(data, issue.path);
    const e: FieldError = { path: formatPath([...prefix, ...issue.path]), message: issue.message };
    if (value instanceof OverlongNumber) {
      e.message = 'is a number with more than 40 characters';
      e.value = value.text;
    }
    errors.push(e);
  }
  return { ok: false, errors };
}

export const zodValidatorCompiler: FastifySchemaCompiler<ZodType> =
  ({ schema, httpPart }) =>
  (data) => {
    const r = zodFieldErrors(schema, data);
    if (r.ok) return { value: r.value };
    return { error: new RequestValidationError(httpPart ?? 'body', r.errors) };
  };

/** For routes that validate their body themselves (ingest): the body passes through, other parts use zod. */
// Typed loosely because fastify types a route-level compiler with the route's whole schema object.
// eslint-disable-next-line @typescript-eslint/no-explicit-any
export const bodyPassThroughCompiler: FastifySchemaCompiler<any> = (routeSchema) => {
  if (routeSchema.httpPart === 'body') return (data: unknown) => ({ value: data });
  return zodValidatorCompiler(routeSchema as Parameters<typeof zodValidatorCompiler>[0]);
};

