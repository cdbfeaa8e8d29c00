/**
 * The JSON body parser. On top of fastify's own (secure-json-parse: __proto__ and constructor poisoning is an
 * error) it scans the raw text once, O(length), for two things JSON.parse hides:
 *
 *  - Overlong numbers. JSON.parse silently rounds "0.1000000000000000000000000000000000000000001" to 0.1 and
 *    "1" followed by 400 zeros to Infinity. A number token longer than MAX_NUMBER_LENGTH (40) characters is not
 *    an answer anyone typed on a survey scale, so it is parsed into an `OverlongNumber` object instead; ingest
 *    rejects it with reason `too_many_digits`, every other schema rejects it as "not a number". (A double needs
 *    at most 24 characters, e.g. -1.2345678901234567e-308, so 40 leaves room for any honest formatting.)
 *  - Nesting deeper than MAX_JSON_DEPTH (32) levels → 400, before JSON.parse recurses into it.
 *  - A U+0000 (NUL) escaped in a string (`\u0000`) → 400: no text the service keeps may hold one (PostgreSQL text
 *    cannot, and every id and label is looked up or shown somewhere), so it is refused for every engine alike.
 *    (Raw control characters inside strings are invalid JSON and fail the parse itself.)
 */
import { randomBytes } from 'node:crypto';
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { ProblemError } from '../errors.js';
import { MAX_NUMBER_LENGTH, OverlongNumber } from '../schemas/field-errors.js';

export const MAX_JSON_DEPTH = 32;

export interface JsonScan {
  /** [start, end) of every number token longer than MAX_NUMBER_LENGTH. */
  overlong: [number, number][];
  maxDepth: number;
  /** A string (value or key) holds an escaped U+0000. */
  nul: boolean;
}

function isNumberChar(c: number): boolean {
  // 0-9 . + - e E
  return (c >= 48 && c <= 57) || c === 46 || c === 43 || c === 45 || c === 101 || c === 69;
}

/** One pass over JSON text outside strings: overlong number tokens and the nesting depth. */
export function scanJson(text: string): JsonScan {
  const overlong: [number, number][] = [];
  let depth = 0;
  let maxDepth = 0;
  let inString = false;
  let nul = false;
  const n = text.length;
  for (let i = 0; i < n; i++) {
    const c = text.charCodeAt(i);
    if (inString) {
      if (c === 92) {
        // backslash: skip the escaped character, noting \u0000
        if (text.charCodeAt(i + 1) === 117 && text.startsWith('0000', i + 2)) nul = true;
        i++;
      }
      else if (c === 34) inString = false;
      continue;
    }
    if (c === 34) inString = true;
    else if (c === 123 || c === 91) {
      depth++;
      if (depth > maxDepth) maxDepth = depth;
    } else if (c === 125 || c === 93) depth--;
    else if (c === 45 || (c >= 48 && c <= 57)) {
      let j = i + 1;
      while (j < n && isNumberChar(text.charCodeAt(j))) j++;
      if (j - i > MAX_NUMBER_LENGTH) overlong.push([i, j]);
      i = j - 1;
    }
  }
  return { overlong, maxDepth, nul };
}

type JsonParser = (req: FastifyRequest, body: string, done: (err: Error | null, body?: unknown) => void) => void;

function replaceMarkers(value: unknown, markers: Map<string, OverlongNumber>): unknown {
  if (typeof value === 'string') return markers.get(value) ?? value;
  if (Array.isArray(value)) {
    for (let i = 0; i < value.length; i++) value[i] = replaceMarkers(value[i], markers);
    return value;
  }
  if (value !== null && typeof value === 'object') {
    const obj = value as Record<string, unknown>;
    for (const k of Object.keys(obj)) obj[k] = replaceMarkers(obj[k], markers);
  }
  return value;
}

/** Parse JSON text as the service does (exported for tests). Calls `base` for the actual parse. */
export function parseJsonBody(text: string, base: (text: string) => unknown): unknown {
  const scan = scanJson(text);
  if (scan.maxDepth > MAX_JSON_DEPTH) {
    throw new ProblemError('malformed-request', `The JSON body is nested more than ${MAX_JSON_DEPTH} levels deep.`);
  }
  if (scan.nul) {
    throw new ProblemError('malformed-request', 'The JSON body holds a U+0000 (NUL) character in a string; no text the service keeps may contain one. Remove it and send again.');
  }
  if (scan.overlong.length === 0) return base(text);
  // Replace each overlong token by a string marker no client can guess, parse, then swap markers for objects.
  const nonce = randomBytes(9).toString('base64url');
  const markers = new Map<string, OverlongNumber>();
  let rewritten = '';
  let last = 0;
  scan.overlong.forEach(([start, end], k) => {
    const marker = `\u0000overlong:${nonce}:${k}`;
    const token = text.slice(start, end);
    markers.set(marker, new OverlongNumber(token.length > 64 ? `${token.slice(0, 64)}…` : token));
    rewritten += `${text.slice(last, start)}"\\u0000overlong:${nonce}:${k}"`;
    last = end;
  });
  rewritten += text.slice(last);
  return replaceMarkers(base(rewritten), markers);
}

export function registerJsonParser(app: FastifyInstance): void {
  const fastifyParser = app.getDefaultJsonParser('error', 'error') as unknown as JsonParser;
  const base = (req: FastifyRequest) => (text: string) => {
    let result: unknown;
    let failure: Error | null = null;
    fastifyParser(req, text, (err, body) => {
      failure = err;
      result = body;
    });
    if (failure) throw failure;
    return result;
  };
  app.removeContentTypeParser('application/json');
  app.addContentTypeParser('application/json', { parseAs: 'string' }, (req, body, done) => {
    try {
      done(null, parseJsonBody(body as string, base(req)));
    } catch (err) {
      done(err as Error, undefined);
    }
  });
}
