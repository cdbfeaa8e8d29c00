/**
 * Logging: fastify's pino, JSON lines. What must never be written (credentials in headers or forms, secrets, key
 * hashes, respondent content hashes, SQL of a failed statement) is redacted by path; the tests capture the log
 * output and search it for every secret and hash.
 *
 * Request URLs are logged through `requestSerializer`, which replaces personal identifiers and secrets in them by
 * `[redacted]`: the respondent of an erasure (`…/respondents/{respondent}`), the responseId of an exclusion
 * (`…/responses/{responseId}/exclusion`), and the value of every query parameter whose name looks secret or
 * personal (key, token, secret, password, auth, signature, respondent, responseId and the like).
 */
import type { FastifyRequest } from 'fastify';

const REDACTED = '[redacted]';
/** Path segments that carry a respondent's identifier: the segment after `respondents/`, and a responseId before `/exclusion`. */
const PERSONAL_PATHS: readonly RegExp[] = [/(\/respondents\/)[^/?#]+/g, /(\/responses\/)(?!batch(?:[/?#]|$)|import(?:[/?#]|$))[^/?#]+(?=\/)/g];
/** Query parameter names whose values are never logged. */
const SECRET_QUERY_NAME = /key|token|secret|pass|auth|sig|session|cookie|credential|respondent|response_?id|email|name/i;

/** A request URL with identifiers of respondents and secret-looking query values replaced by [redacted]. */
export function redactUrl(url: string): string {
  const q = url.indexOf('?');
  let path = q === -1 ? url : url.slice(0, q);
  for (const re of PERSONAL_PATHS) path = path.replace(re, `$1${REDACTED}`);
  if (q === -1) return path;
  const query = url
    .slice(q + 1)
    .split('&')
    .map((pair) => {
      const eq = pair.indexOf('=');
      if (eq === -1) return pair;
      let name = pair.slice(0, eq);
      try {
        name = decodeURIComponent(name.replace(/\+/g, ' '));
      } catch {
        return `${pair.slice(0, eq)}=${REDACTED}`;
      }
      return SECRET_QUERY_NAME.test(name) ? `${pair.slice(0, eq)}=${REDACTED}` : pair;
    })
    .join('&');
  return `${path}?${query}`;
}

/** What pino writes for `req` (fastify's default fields, with the URL redacted; anything else logged as `req` is left to the redaction paths). */
export function requestSerializer(request: FastifyRequest): Record<string, unknown> {
  if (!request || typeof request !== 'object' || typeof request.url !== 'string' || typeof request.method !== 'string') {
    return request as unknown as Record<string, unknown>;
  }
  return {
    method: request.method,
    url: redactUrl(request.url),
    host: request.host,
    remoteAddress: request.ip,
    remotePort: request.socket?.remotePort,
  };
}

/** Log fields that must never be written: credentials in headers or forms, secrets and key hashes. */
export const REDACTED_LOG_PATHS = [
  'req.headers.authorization',
  'req.headers.cookie',
  'headers.authorization',
  'headers.cookie',
  'authorization',
  'ingestKey',
  '*.ingestKey',
  'body.ingestKey',
  'secret',
  '*.secret',
  'hash',
  '*.hash',
  'adminKeyHash',
  '*.adminKeyHash',
  'metricsTokenHash',
  '*.metricsTokenHash',
  'contentHash',
  '*.contentHash',
  'content_hash',
  '*.content_hash',
  'token',
  '*.token',
  'password',
  '*.password',
  'req.headers["x-api-key"]',
  'req.headers["proxy-authorization"]',
  'res.headers["set-cookie"]',
  // Error objects logged on a 5xx: better-sqlite3 puts nothing secret in messages, but SQL text can appear in
  // a wrapped error's `sql` field and statement text in `source`; never log them.
  'err.sql',
  'err.source',
  'err.statement',
  'err.params',
];
