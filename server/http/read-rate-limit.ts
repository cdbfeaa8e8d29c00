/**
 * The read rate limit: config.rateLimitReadPerMinute COMPUTED read replies per minute per (API key, client address)
 * on the authenticated GET routes (comparisons, charts, families, exports, definitions, looks, …) → 429 with
 * Retry-After. Off when the limit is 0.
 *
 * What is counted. A reply that cost the service work: every GET answered with anything but 304. A conditional
 * request answered 304 (its ETag still current: one cheap stamp query, nothing read or computed) is free, so a page
 * that revalidates its charts never spends its budget on them; a client that defeats the caches (new options each
 * time, no If-None-Match) spends one per request. The event stream (its own limits per key) and /metrics are not
 * counted.
 *
 * A token bucket per (key, address): it holds a burst of perMinute / 6 (ten seconds' worth) and refills at
 * perMinute / 60 s. A request is refused in onRequest — before anything is read — when the bucket holds less than
 * one reply; an admitted request is charged when its reply is sent (onResponse), by its status. Default 6,000 a
 * minute (100 a second, bursts of 1,000): the results page with 20 items and three tabs open on one key asks for
 * ~42 replies per refresh and refreshes at most every 2 s (~3,800 a minute in the worst case, all of them changed),
 * while a client in a loop asks for hundreds a second and is refused within seconds.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import type { ServiceMetrics } from './metrics.js';
import { sendProblem } from './problem-handler.js';

const RATE_LIMITED_TYPE = 'urn:splitballot:problem:rate-limited';
/** Above this many buckets, full (idle) buckets are dropped. */
const SWEEP_ABOVE = 10_000;
/** The burst a bucket holds: this fraction of a minute's budget. */
const BURST_FRACTION = 1 / 6;

interface Bucket {
  tokens: number;
  at: number;
}

/** The read budget of every (key, address): pure bookkeeping, a clock passed in (testable without waiting). */
export class ReadBudget {
  private readonly buckets = new Map<string, Bucket>();
  private readonly perMs: number;
  readonly burst: number;

  constructor(readonly perMinute: number) {
    this.perMs = perMinute / 60_000;
    this.burst = Math.max(1, Math.floor(perMinute * BURST_FRACTION));
  }

  private refill(id: string, now: number): Bucket {
    const b = this.buckets.get(id);
    if (!b) return { tokens: this.burst, at: now };
    return { tokens: Math.min(this.burst, b.tokens + (now - b.at) * this.perMs), at: now };
  }

  /** Whether one more reply may be served now (nothing is charged); when not, the seconds until it may. */
  check(id: string, now: number): { room: boolean; remaining: number; retryAfterS: number } {
    const b = this.refill(id, now);
    return { room: b.tokens >= 1, remaining: Math.max(0, Math.floor(b.tokens)), retryAfterS: Math.max(1, Math.ceil((1 - b.tokens) / this.perMs / 1000)) };
  }

  /** Charge one served reply. */
  charge(id: string, now: number): void {
    const b = this.refill(id, now);
    b.tokens -= 1;
    this.buckets.set(id, b);
    if (this.buckets.size > SWEEP_ABOVE) this.sweep(now);
  }

  private sweep(now: number): void {
    for (const [id, b] of this.buckets) {
      if (b.tokens + (now - b.at) * this.perMs >= this.burst) this.buckets.delete(id);
    }
  }
}

/** A read counted by the limit: an authenticated GET or HEAD, other than the event stream and /metrics. */
function isCountedRead(request: FastifyRequest): boolean {
  if ((request.method !== 'GET' && request.method !== 'HEAD') || !request.principal || request.is404) return false;
  const url = request.routeOptions.url ?? '';
  return url !== '/metrics' && !url.endsWith('/events');
}

export function registerReadRateLimit(app: FastifyInstance, perMinute: number, metrics: ServiceMetrics, now: () => number = Date.now): void {
  if (perMinute <= 0) return;
  const budget = new ReadBudget(perMinute);
  const bucketOf = (request: FastifyRequest) => `${request.principal?.keyId ?? 'none'}|${request.ip}`;
  app.addHook('onRequest', async (request, reply) => {
    if (!isCountedRead(request)) return;
    const r = budget.check(bucketOf(request), now());
    if (r.room) return;
    const route = request.routeOptions.url ?? 'unmatched';
    metrics.recordRateLimited(route);
    reply.header('retry-after', String(r.retryAfterS));
    reply.header('x-ratelimit-limit', String(perMinute));
    reply.header('x-ratelimit-remaining', '0');
    request.log.info({ route, keyId: request.principal?.keyId ?? null }, 'read rate limit reached');
    return sendProblem(request, reply, {
      type: RATE_LIMITED_TYPE,
      title: 'Too many requests',
      status: 429,
      detail:
        `More than ${perMinute} read replies per minute (bursts of ${budget.burst}) from this key and address; retry after ${r.retryAfterS} s. ` +
        'A conditional request answered 304 Not Modified is not counted: send If-None-Match with the ETag of your last reply.',
    });
  });
  app.addHook('onResponse', async (request, reply) => {
    if (!isCountedRead(request) || reply.statusCode === 304 || reply.statusCode === 429) return;
    budget.charge(bucketOf(request), now());
  });
}
