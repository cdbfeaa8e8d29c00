/**
 * Security headers on every answer: nosniff, no referrer, same-origin resources, and a Content-Security-Policy
 * (an HTML page keeps its own; another HTML answer gets DEFAULT_HTML_CSP and X-Frame-Options; everything else
 * API_CSP). An answer to a request with a key is private to that client (Cache-Control: private, no-cache unless
 * the route set its own).
 */
import type { FastifyInstance } from 'fastify';

/** Security headers on every answer (HTML pages that set their own CSP keep it). */
export const SECURITY_HEADERS: Readonly<Record<string, string>> = Object.freeze({
  'x-content-type-options': 'nosniff',
  'referrer-policy': 'no-referrer',
  'cross-origin-resource-policy': 'same-origin',
});
/** CSP for an HTML answer that did not set one: nothing may load, run, frame it or be posted from it. */
export const DEFAULT_HTML_CSP = "default-src 'none'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";
/** CSP for every other answer (JSON, CSV, text): if a browser ever renders one, nothing in it can run. */
export const API_CSP = "default-src 'none'; frame-ancestors 'none'";

export function registerSecurityHeaders(app: FastifyInstance): void {
  app.addHook('onSend', async (request, reply, payload) => {
    for (const [name, value] of Object.entries(SECURITY_HEADERS)) reply.header(name, value);
    if (!reply.hasHeader('content-security-policy')) {
      const type = String(reply.getHeader('content-type') ?? '');
      if (type.startsWith('text/html')) {
        reply.header('content-security-policy', DEFAULT_HTML_CSP);
        reply.header('x-frame-options', 'DENY');
      } else {
        reply.header('content-security-policy', API_CSP);
      }
    }
    if (request.principal !== null && !reply.hasHeader('cache-control')) reply.header('cache-control', 'private, no-cache');
    reply.removeHeader('x-powered-by');
    return payload;
  });
}
