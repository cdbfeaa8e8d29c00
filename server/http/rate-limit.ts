/**
 * The ingest rate limit counts ANSWERS, not requests: config.rateLimitIngestPerMinute answers per minute per
 * (API key, client address) on the ingest routes (single answers, batches, CSV imports, assignments) → 429 with
 * Retry-After. Off when the limit is 0.
 *
 * A token bucket per (key, address): it holds up to `perMinute` answers and refills at perMinute / 60 s. A request
 * is admitted when the bucket holds at least its number of answers, or is full (so that one batch larger than the
 * whole minute's budget can still be sent once); its answers are then all charged, and the bucket may go below zero:
 * the key waits until it has paid them back. Over any long stretch a key and address therefore store at most
 * `perMinute` answers a minute, however they are packed into requests. (Before, a 10,000-answer batch counted once.)
 *
 * The answers of a request are counted after its body is parsed and its key is known (preHandler): a batch counts
 * its items, a CSV import its non-empty lines after the header, everything else 1. A request whose key (sent in the
 * header) has no answer left at all is refused earlier, in onRequest, before its body is read, so that a flood of
 * large batches costs the service no parsing.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { isIngestRoute } from './auth.js';
import type { ServiceMetrics } from './metrics.js';
import { sendProblem } from './problem-handler.js';

const RATE_LIMITED_TYPE = 'urn:splitballot:problem:rate-limited';
/** Above this many buckets, full (idle) buckets are dropped. */
const SWEEP_ABOVE = 10_000;

interface Bucket {
  tokens: number;
  at: number;
}

/** Answers carried by one ingest request (its body already parsed). */
export function answersInRequest(request: FastifyRequest): number {
  const body = request.body as unknown;
  const url = request.routeOptions.url ?? '';
  if (url.endsWith('/responses/batch')) {
    const items = body && typeof body === 'object' ? (body as { responses?: unknown }).responses : undefined;
    return Array.isArray(items) ? Math.max(1, items.length) : 1;
  }
  if (url.endsWith('/responses/import')) {
    const bytes = Buffer.isBuffer(body) ? body : typeof body === 'string' ? Buffer.from(body) : null;
    if (!bytes) return 1;
    let lines = 0;
    let lineHasText = false;
    for (let i = 0; i < bytes.length; i++) {
      const b = bytes[i];
      if (b === 0x0a) {
        if (lineHasText) lines++;
        lineHasText = false;
      } else if (b !== 0x0d) lineHasText = true;
    }
    if (lineHasText) lines++;
    return Math.max(1, lines - 1);
  }
  return 1;
}

/** The answer budget of every (key, address): pure bookkeeping, a clock passed in (testable without waiting). */
export class AnswerBudget {
  private readonly buckets = new Map<string, Bucket>();
  private readonly perMs: number;

  constructor(readonly perMinute: number) {
    this.perMs = perMinute / 60_000;
  }

  private refill(id: string, now: number): Bucket {
    const b = this.buckets.get(id);
    if (!b) return { tokens: this.perMinute, at: now };
    return { tokens: Math.min(this.perMinute, b.tokens + (now - b.at) * this.perMs), at: now };
  }

  /** Charge `answers` if admitted; otherwise charge nothing. `retryAfterS` is when this request would be admitted. */
  take(id: string, answers: number, now: number): { admitted: boolean; remaining: number; retryAfterS: number; resetS: number } {
    const b = this.refill(id, now);
    const needed = Math.min(answers, this.perMinute);
    const admitted = b.tokens >= needed;
    if (admitted) b.tokens -= answers;
    this.buckets.set(id, b);
    if (this.buckets.size > SWEEP_ABOVE) this.sweep(now);
    const missing = admitted ? 0 : needed - b.tokens;
    return {
      admitted,
      remaining: Math.max(0, Math.floor(b.tokens)),
      retryAfterS: Math.max(1, Math.ceil(missing / this.perMs / 1000)),
      resetS: Math.ceil((this.perMinute - b.tokens) / this.perMs / 1000),
    };
  }

  /** Whether one answer could be admitted now (nothing is charged). */
  hasRoom(id: string, now: number): { room: boolean; retryAfterS: number; resetS: number } {
    const b = this.refill(id, now);
    const missing = Math.max(0, 1 - b.tokens);
    return {
      room: b.tokens >= 1,
      retryAfterS: Math.max(1, Math.ceil(missing / this.perMs / 1000)),
      resetS: Math.ceil((this.perMinute - b.tokens) / this.perMs / 1000),
    };
  }

  private sweep(now: number): void {
    for (const [id, b] of this.buckets) {
      if (b.tokens + (now - b.at) * this.perMs >= this.perMinute) this.buckets.delete(id);
    }
  }
}

export function registerIngestRateLimit(app: FastifyInstance, perMinute: number, metrics: ServiceMetrics, now: () => number = Date.now): void {
  if (perMinute <= 0) return;
  const budget = new AnswerBudget(perMinute);
  const bucketOf = (request: FastifyRequest) => `${request.principal?.keyId ?? 'none'}|${request.ip}`;
  // Before the body is read: a header key with no answer left is refused at once.
  app.addHook('onRequest', async (request, reply) => {
    if (!request.principal || !isIngestRoute(request)) return;
    const r = budget.hasRoom(bucketOf(request), now());
    if (r.room) return;
    reply.header('x-ratelimit-limit', String(perMinute));
    reply.header('x-ratelimit-remaining', '0');
    reply.header('x-ratelimit-reset', String(r.resetS));
    return refuse(request, reply, r.retryAfterS, null);
  });
  app.addHook('preHandler', async (request, reply) => {
    if (!isIngestRoute(request)) return;
    const answers = answersInRequest(request);
    const r = budget.take(bucketOf(request), answers, now());
    reply.header('x-ratelimit-limit', String(perMinute));
    reply.header('x-ratelimit-remaining', String(r.remaining));
    reply.header('x-ratelimit-reset', String(r.resetS));
    if (r.admitted) return;
    return refuse(request, reply, r.retryAfterS, answers);
  });

  function refuse(request: FastifyRequest, reply: FastifyReply, retryAfterS: number, answers: number | null) {
    const route = request.routeOptions.url ?? 'unmatched';
    metrics.recordRateLimited(route);
    reply.header('retry-after', String(retryAfterS));
    request.log.info({ route, keyId: request.principal?.keyId ?? null, answers }, 'ingest rate limit reached');
    return sendProblem(request, reply, {
      type: RATE_LIMITED_TYPE,
      title: 'Too many requests',
      status: 429,
      detail:
        `More than ${perMinute} answers per minute from this key and address; retry after ${retryAfterS} s. ` +
        'The limit counts answers, not requests: a batch or CSV import is charged one per answer.',
    });
  }
}
