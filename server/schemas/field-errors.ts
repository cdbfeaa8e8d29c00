/**
 * How the contract reports what it refuses: a JSON number token too long to keep exactly (OverlongNumber, made by
 * the JSON body parser in http/json-body.ts and refused by every schema and by ingest), and zod issues turned into
 * FieldErrors with paths like "values.satisfaction" or "responses[3].values.trust". Pure: zod only, no fastify.
 */
import type { ZodType } from 'zod';
import { formatPath, type FieldError } from './common.js';

/** Longest JSON number token kept as a number (a double needs at most 24 characters). */
export const MAX_NUMBER_LENGTH = 40;

/** A JSON number token longer than MAX_NUMBER_LENGTH characters, kept as text (shortened to 64 characters). */
export class OverlongNumber {
  constructor(readonly text: string) {}
  toJSON(): string {
    return this.text;
  }
}

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
