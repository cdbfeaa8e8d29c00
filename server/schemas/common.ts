/**
 * Schemas shared by every route: the RFC 9457 problem body, ids, and the helpers that turn zod issues into
 * the `errors` entries of a problem.
 */
import { z } from 'zod';

/** Lowercase slug for experiment, condition and measure ids. */
export const SLUG_PATTERN = /^[a-z0-9][a-z0-9_-]{0,63}$/;
export const Slug = z
  .string()
  .regex(SLUG_PATTERN, 'must be a lowercase slug: a–z, 0–9, "_" or "-", starting with a letter or digit, at most 64 characters');

/** No control characters (U+0000–U+001F, U+007F): refused in every text the service stores or looks up (PostgreSQL text cannot even hold U+0000). */
export const NO_CONTROL_CHARS = /^[^\u0000-\u001f\u007f]*$/;

/** An experiment, measure or condition id as given in a path or query: only looked up; at most 200 characters, no control characters. */
export const PathId = z.string().max(200).regex(NO_CONTROL_CHARS, 'must not contain control characters');

export const FieldErrorSchema = z
  .object({
    path: z.string().describe('Where the problem is, e.g. "values.satisfaction" or "responses[3].values.trust"; "" for the whole body'),
    message: z.string(),
    value: z.unknown().optional().describe('The rejected value as received (long strings shortened)'),
    limit: z.object({ min: z.number(), max: z.number() }).optional().describe('The scale limits, for a value outside them'),
  })
  .meta({ id: 'FieldError' });

export const ProblemSchema = z
  .object({
    type: z.string().describe('URI identifying the problem type (urn:splitballot:problem:…)'),
    title: z.string(),
    status: z.number().int(),
    detail: z.string(),
    instance: z.string().optional(),
    errors: z.array(FieldErrorSchema).optional(),
  })
  .meta({ id: 'Problem', description: 'RFC 9457 problem details (application/problem+json)' });

export type FieldError = z.infer<typeof FieldErrorSchema>;
export type Problem = z.infer<typeof ProblemSchema>;

const STATUS_TEXT: Record<number, string> = {
  400: 'Malformed request or invalid parameters',
  401: 'Missing, malformed, unknown or revoked API key',
  403: 'The key lacks the scope, or is limited to another experiment',
  404: 'No such experiment or route',
  409: 'Conflict (duplicate id, closed experiment, a responseId stored with other content, locked limits)',
  413: 'Body larger than the route accepts',
  415: 'Unsupported content type',
  422: 'The body is not valid; errors lists every problem',
  500: 'Unexpected server error (details are only in the log)',
  503: 'Not ready',
};

export interface ProblemResponse {
  description: string;
  content: { 'application/problem+json': { schema: typeof ProblemSchema } };
}

/** Problem responses a route can give, for its response schema (served as application/problem+json). */
export function problems(...statuses: number[]): Record<number, ProblemResponse> {
  const out: Record<number, ProblemResponse> = {};
  for (const s of statuses) out[s] = { description: STATUS_TEXT[s] ?? 'Problem', content: { 'application/problem+json': { schema: ProblemSchema } } };
  return out;
}

/** Format a path such as ["responses", 3, "values", "trust"] as "responses[3].values.trust". */
export function formatPath(path: readonly PropertyKey[]): string {
  let out = '';
  for (const seg of path) {
    if (typeof seg === 'number') out += `[${seg}]`;
    else {
      const s = String(seg);
      if (/^[A-Za-z0-9_-]+$/.test(s)) out += out === '' ? s : `.${s}`;
      else out += `[${JSON.stringify(s)}]`;
    }
  }
  return out;
}

/** Echo of a rejected value that is safe to put in a problem body (short, JSON-representable). */
export function echoValue(value: unknown): unknown {
  if (typeof value === 'string') return value.length > 100 ? `${value.slice(0, 100)}…` : value;
  if (typeof value === 'number') return Number.isFinite(value) ? value : String(value);
  if (value === null || typeof value === 'boolean') return value;
  if (Array.isArray(value)) return '[array]';
  if (typeof value === 'object') return '[object]';
  return undefined;
}
