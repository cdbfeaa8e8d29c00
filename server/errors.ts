/**
 * The problem types of the service (RFC 9457 problem details) and the two errors every layer may throw: a
 * leaf, with no fastify in it. ProblemError carries a problem name and a detail; RequestValidationError carries
 * the field errors of one request part. http/problem-handler.ts turns both into application/problem+json (or the
 * respondent-facing HTML page for a browser form post).
 *
 * Problem types (type = "urn:splitballot:problem:<name>"): see PROBLEM_TYPES below and docs/api.md.
 */
import type { FieldError, Problem } from './schemas/common.js';

export const PROBLEM_TYPES = {
  'malformed-request': { status: 400, title: 'Malformed request' },
  'invalid-parameters': { status: 400, title: 'Invalid parameters' },
  unauthorized: { status: 401, title: 'Unauthorized' },
  forbidden: { status: 403, title: 'Forbidden' },
  'not-found': { status: 404, title: 'Not found' },
  'already-exists': { status: 409, title: 'Already exists' },
  'experiment-closed': { status: 409, title: 'Experiment closed' },
  'response-conflict': { status: 409, title: 'Response conflict' },
  'limits-locked': { status: 409, title: 'Measure limits locked' },
  'monitoring-not-configured': { status: 409, title: 'Monitoring not configured' },
  'look-not-possible': { status: 409, title: 'Look not possible' },
  'allocation-unusable': { status: 409, title: 'Allocation unusable' },
  'already-assigned': { status: 409, title: 'Respondent already assigned' },
  'request-timeout': { status: 408, title: 'Request timeout' },
  'rate-limited': { status: 429, title: 'Too many requests' },
  'headers-too-large': { status: 431, title: 'Request headers too large' },
  'payload-too-large': { status: 413, title: 'Payload too large' },
  'unsupported-media-type': { status: 415, title: 'Unsupported media type' },
  'validation-failed': { status: 422, title: 'Validation failed' },
  'family-too-large': { status: 422, title: 'Comparison family too large' },
  'internal-error': { status: 500, title: 'Internal server error' },
  unavailable: { status: 503, title: 'Service unavailable' },
} as const;

export type ProblemName = keyof typeof PROBLEM_TYPES;

export function problemType(name: ProblemName): string {
  return `urn:splitballot:problem:${name}`;
}

/** Throw this from routes and hooks; the error handler turns it into the problem response. */
export class ProblemError extends Error {
  readonly status: number;
  readonly problemName: ProblemName;
  readonly detail: string;
  readonly errors?: FieldError[];
  readonly headers?: Record<string, string>;

  constructor(name: ProblemName, detail: string, options: { errors?: FieldError[]; headers?: Record<string, string> } = {}) {
    super(detail);
    this.name = 'ProblemError';
    this.problemName = name;
    this.status = PROBLEM_TYPES[name].status;
    this.detail = detail;
    this.errors = options.errors;
    this.headers = options.headers;
  }

  toProblem(): Problem {
    const p: Problem = { type: problemType(this.problemName), title: PROBLEM_TYPES[this.problemName].title, status: this.status, detail: this.detail };
    if (this.errors) p.errors = this.errors;
    return p;
  }
}

/** Zod (or other) validation failure of one part of the request, raised by the validator compiler. */
export class RequestValidationError extends Error {
  readonly statusCode: number;
  constructor(
    readonly part: string,
    readonly errors: FieldError[],
  ) {
    super(`request ${part} is not valid`);
    this.name = 'RequestValidationError';
    this.statusCode = part === 'body' ? 422 : 400;
  }
}
