/**
 * Conditional requests: answer 304 Not Modified when the client's If-None-Match names the current strong ETag
 * (checked before anything is read or computed, from the service's cheap stamp).
 */
import type { FastifyReply, FastifyRequest } from 'fastify';

/** Does an If-None-Match header match this (strong) tag? Weak comparison, as RFC 9110 §13.1.2 asks. */
export function ifNoneMatchMatches(header: string | string[] | undefined, etag: string): boolean {
  if (header === undefined) return false;
  const text = Array.isArray(header) ? header.join(',') : header;
  if (text.trim() === '*') return true;
  const opaque = etag.replace(/^W\//, '');
  for (const part of text.split(',')) {
    if (part.trim().replace(/^W\//, '') === opaque) return true;
  }
  return false;
}

/** Cache-Control of every conditional answer: the client may keep it but must revalidate. */
export const CACHE_CONTROL = 'private, no-cache';

/** 304 when the request's If-None-Match matches; sets the validators either way. Returns true when answered. */
export function notModified(request: FastifyRequest, reply: FastifyReply, etag: string): boolean {
  reply.header('etag', etag).header('cache-control', CACHE_CONTROL);
  if (!ifNoneMatchMatches(request.headers['if-none-match'], etag)) return false;
  reply.code(304).send();
  return true;
}
