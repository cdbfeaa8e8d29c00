/**
 * Errors as RFC 9457 problem details. Every 4xx and 5xx answer of the service is application/problem+json
 * with type, title, status and detail (plus `errors` for validation); a 5xx never carries the error's message,
 * stack or SQL. A browser's HTML form post gets the same content as a readable HTML page instead (html.ts).
 *
 * The problem types and the errors themselves live in server/errors.ts (a leaf any layer may throw).
 */
import { STATUS_CODES } from 'node:http';
import type { Socket } from 'node:net';
import type { FastifyError, FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { API_CSP } from './security-headers.js';
import type { Problem } from '../schemas/common.js';
import { PROBLEM_TYPES, ProblemError, problemType, RequestValidationError, type ProblemName } from '../errors.js';
import { StoreUnavailableError } from '../store/types.js';
import { errorPage, HTML_CSP, type RespondentLabels } from '../views/html.js';
import { isFormContentType, prefersHtml } from './negotiate.js';

/** Fastify's own 4xx errors whose messages are safe to show. */
const FASTIFY_CODES: Record<string, ProblemName> = {
  FST_ERR_CTP_BODY_TOO_LARGE: 'payload-too-large',
  FST_ERR_CTP_INVALID_MEDIA_TYPE: 'unsupported-media-type',
  FST_ERR_CTP_INVALID_CONTENT_LENGTH: 'malformed-request',
  FST_ERR_CTP_EMPTY_JSON_BODY: 'malformed-request',
  FST_ERR_CTP_INVALID_JSON_BODY: 'malformed-request',
  FST_ERR_CTP_INVALID_TYPE: 'malformed-request',
  FST_ERR_CTP_EMPTY_TYPE: 'malformed-request',
  FST_ERR_BAD_URL: 'malformed-request',
  FST_ERR_ASYNC_CONSTRAINT: 'malformed-request',
};

const DETAILS: Partial<Record<ProblemName, string>> = {
  'payload-too-large': 'The request body is larger than this route accepts (1 MiB for one response, 16 MiB for a batch, 2 MiB for a CSV import; larger files go through the import command).',
  'unsupported-media-type': 'Send application/json (or application/x-www-form-urlencoded for a single response from an HTML form).',
};

export function toProblem(err: unknown, requestId: string): { problem: Problem; headers: Record<string, string>; serverError: boolean } {
  if (err instanceof ProblemError) return { problem: err.toProblem(), headers: err.headers ?? {}, serverError: err.status >= 500 };
  if (err instanceof StoreUnavailableError) {
    // The database is away (outage, restart, pool exhausted past its timeout): retry later, never a stack.
    return {
      problem: {
        type: problemType('unavailable'),
        title: PROBLEM_TYPES.unavailable.title,
        status: 503,
        detail: `The database cannot be reached right now; retry in ${err.retryAfterSeconds} s.`,
      },
      headers: { 'retry-after': String(err.retryAfterSeconds) },
      serverError: false,
    };
  }
  if (err instanceof RequestValidationError) {
    const name: ProblemName = err.part === 'body' ? 'validation-failed' : 'invalid-parameters';
    const detail =
      err.part === 'body'
        ? `The request body has ${err.errors.length} problem${err.errors.length === 1 ? '' : 's'}; nothing was stored.`
        : `The request ${err.part === 'querystring' ? 'query string' : err.part} is not valid.`;
    return {
      problem: { type: problemType(name), title: PROBLEM_TYPES[name].title, status: PROBLEM_TYPES[name].status, detail, errors: err.errors },
      headers: {},
      serverError: false,
    };
  }
  const fe = err as Partial<FastifyError> | undefined;
  const code = typeof fe?.code === 'string' ? fe.code : '';
  const status = typeof fe?.statusCode === 'number' ? fe.statusCode : 500;
  if (code in FASTIFY_CODES) {
    const name = FASTIFY_CODES[code];
    const detail = DETAILS[name] ?? (code === 'FST_ERR_CTP_INVALID_JSON_BODY' ? 'The body is not valid JSON.' : String(fe?.message ?? ''));
    return { problem: { type: problemType(name), title: PROBLEM_TYPES[name].title, status: PROBLEM_TYPES[name].status, detail }, headers: {}, serverError: false };
  }
  if (status >= 400 && status < 500) {
    // Some other client error raised by fastify or a plugin: keep its status, show a generic detail.
    const safe = code.startsWith('FST_') && typeof fe?.message === 'string' ? fe.message : 'The request could not be processed.';
    return { problem: { type: problemType('malformed-request'), title: 'Bad request', status, detail: safe }, headers: {}, serverError: false };
  }
  return {
    problem: {
      type: problemType('internal-error'),
      title: PROBLEM_TYPES['internal-error'].title,
      status: 500,
      detail: `An unexpected error occurred; it has been logged with request id ${requestId}.`,
    },
    headers: {},
    serverError: true,
  };
}

/** True when this request is an HTML form post from a browser that should see pages, not JSON. */
export function wantsHtmlPage(request: FastifyRequest): boolean {
  return isFormContentType(request.headers['content-type']) && prefersHtml(request.headers.accept);
}

export function sendProblem(request: FastifyRequest, reply: FastifyReply, problem: Problem, headers: Record<string, string> = {}): FastifyReply {
  reply.code(problem.status);
  for (const [k, v] of Object.entries(headers)) reply.header(k, v);
  if (wantsHtmlPage(request)) {
    reply.header('content-security-policy', HTML_CSP);
    return reply.type('text/html; charset=utf-8').send(errorPage(problem, request.respondentLabels ?? undefined));
  }
  return reply.type('application/problem+json').send(problem);
}

declare module 'fastify' {
  interface FastifyRequest {
    /** Set by a form-post route once its experiment is known: the error page then names questions by their labels. */
    respondentLabels: RespondentLabels | null;
  }
}

export function registerProblemHandlers(app: FastifyInstance): void {
  app.decorateRequest('respondentLabels', null);
  app.setErrorHandler((err, request, reply) => {
    const { problem, headers, serverError } = toProblem(err, request.id);
    if (serverError) request.log.error({ err }, 'request failed');
    else if (problem.status === 413 || problem.status === 415 || problem.status === 400) request.log.info({ status: problem.status, type: problem.type }, 'request refused');
    return sendProblem(request, reply, problem, headers);
  });
  app.setNotFoundHandler((request, reply) => {
    const path = request.url.split('?')[0];
    const problem: Problem = {
      type: problemType('not-found'),
      title: PROBLEM_TYPES['not-found'].title,
      status: 404,
      detail: `There is no route ${request.method} ${path.length > 200 ? `${path.slice(0, 200)}…` : path}.`,
    };
    return sendProblem(request, reply, problem);
  });
}

function rawProblem(status: number, name: string, title: string, detail: string): string {
  const body = JSON.stringify({ type: `urn:splitballot:problem:${name}`, title, status, detail });
  return (
    `HTTP/1.1 ${status} ${STATUS_CODES[status] ?? 'Error'}\r\n` +
    `Content-Type: application/problem+json\r\nContent-Length: ${Buffer.byteLength(body)}\r\n` +
    `X-Content-Type-Options: nosniff\r\nContent-Security-Policy: ${API_CSP}\r\nConnection: close\r\n\r\n${body}`
  );
}

/** Errors below HTTP (unparseable request, timeout, oversized headers): answered as problem+json, then closed. */
export function clientErrorHandler(this: FastifyInstance, err: NodeJS.ErrnoException, socket: Socket): void {
  if (err.code === 'ECONNRESET' || socket.destroyed) return;
  let reply: string;
  if (err.code === 'ERR_HTTP_REQUEST_TIMEOUT') {
    reply = rawProblem(408, 'request-timeout', 'Request timeout', 'The request (headers and body) did not arrive within the request timeout.');
  } else if (err.code === 'HPE_HEADER_OVERFLOW') {
    reply = rawProblem(431, 'headers-too-large', 'Request headers too large', 'The request line and headers are larger than 16 KiB.');
  } else {
    reply = rawProblem(400, 'malformed-request', 'Malformed request', 'The request is not valid HTTP/1.1.');
  }
  this.log.debug({ code: err.code }, 'client error');
  if (socket.writable) socket.write(reply);
  socket.destroy();
}
