/**
 * Validator compiler for zod schemas: like fastify-type-provider-zod's, but a failure becomes a
 * RequestValidationError carrying FieldErrors (path "values.satisfaction" style), which the error handler turns
 * into a 422 (body) or 400 (query, params, headers) problem.
 */
import type { FastifySchemaCompiler } from 'fastify';
import type { ZodType } from 'zod';
import { RequestValidationError } from '../errors.js';
import { zodFieldErrors } from '../schemas/field-errors.js';

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

