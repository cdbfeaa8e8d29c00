/**
 * Logging: fastify's pino, JSON lines. What must never be written (credentials in headers or forms, secrets, key
 * hashes, respondent content hashes, SQL of a failed statement) is redacted by path; the tests capture the log
 * output and search it for every secret and hash.
 */

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
