/**
 * The browser client's pure parts and its queue, under Node with injected fetch, storage, clock and timers:
 * back-off bounds, Retry-After, retryable statuses, problem path → form field, the checks before sending
 * (compared with the service's own ingest checks), ids, and the client: stored before sent, removed only when
 * acknowledged, retried as told, never stored twice.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import {
  backoffDelay,
  checkAnswers,
  CollectError,
  createClient,
  fieldName,
  formBody,
  isRetryable,
  memoryStorage,
  newId,
  parseRetryAfter,
  webStorage,
  type AnswerStorage,
  type ClientOptions,
  type FormDefinition,
} from '../../server/pages/collect/v1/collect.js';
import type { ExperimentRecord } from '../../server/store/types.js';
import { checkSingle, formToItem } from '../../server/services/ingest/validate.js';
import { RESPONSE_ID_PATTERN } from '../../server/schemas/responses.js';

const DEFINITION: FormDefinition = Object.freeze({
  experiment: 'water-bill-2027',
  status: 'open',
  conditions: ['bill-first', 'service-first'],
  measures: [
    { id: 'satisfaction', min: 0, max: 10, integer: true, required: true },
    { id: 'trust', min: 1, max: 7, integer: true, required: true },
    { id: 'fair_price', min: 0, max: 200, integer: false, required: false },
  ],
}) as FormDefinition;

/** The same study as the service holds it (for comparing the client's checks with the service's). */
const EXPERIMENT: ExperimentRecord = {
  key: 1,
  id: DEFINITION.experiment,
  title: 'Invented water-utility study',
  status: 'open',
  plannedPerCondition: null,
  alpha: 0.05,
  thankYouUrl: null,
  options: {},
  dataVersion: 0,
  createdAt: '2027-01-01T00:00:00Z',
  updatedAt: '2027-01-01T00:00:00Z',
  conditions: DEFINITION.conditions.map((id, i) => ({ key: i + 1, id, label: id, position: i, responses: 0, excluded: 0 })),
  measures: DEFINITION.measures.map((m, i) => ({ key: i + 1, label: m.id, position: i, role: 'outcome' as const, ...m })),
};

describe('backoffDelay (equal jitter)', () => {
  it('stays in [c/2, c) with c = min(max, base·2^attempt)', () => {
    fc.assert(
      fc.property(fc.integer({ min: 0, max: 60 }), fc.double({ min: 0, max: 1, maxExcluded: true, noNaN: true }), (attempt, u) => {
        const c = Math.min(60_000, 1000 * 2 ** attempt);
        const d = backoffDelay(attempt, 1000, 60_000, () => u);
        return d >= c / 2 && d < c;
      }),
    );
    expect(backoffDelay(0, 1000, 60_000, () => 0)).toBe(500);
    expect(backoffDelay(3, 1000, 60_000, () => 0.5)).toBe(6000); // c = 8000: 4000 + 0.5·4000
    expect(backoffDelay(20, 1000, 60_000, () => 0)).toBe(30_000); // capped: c = 60 000
  });
});

describe('parseRetryAfter', () => {
  const now = Date.parse('2027-03-01T12:00:00Z');
  it.each([
    ['120', 120_000],
    ['0', 0],
    [' 3 ', 3000],
    ['Mon, 01 Mar 2027 12:00:05 GMT', 5000],
    ['Mon, 01 Mar 2027 11:59:00 GMT', 0], // in the past: no wait
    ['1.5', null],
    ['-1', null],
    ['soon', null],
    ['', null],
    ['2027-03-01T12:00:05Z', null], // not an HTTP date
    [null, null],
    [undefined, null],
  ])('%j → %j ms', (value, expected) => {
    expect(parseRetryAfter(value as string | null | undefined, now)).toBe(expected);
  });
});

describe('isRetryable', () => {
  it('retries no answer, 408, 425, 429 and 5xx; nothing else', () => {
    const retried = [0, 408, 425, 429, 500, 502, 503, 504, 599].filter(isRetryable);
    expect(retried).toEqual([0, 408, 425, 429, 500, 502, 503, 504, 599]);
    expect([200, 201, 303, 400, 401, 403, 404, 409, 413, 415, 422].filter(isRetryable)).toEqual([]);
  });
});

describe('fieldName: a problem path → the form field', () => {
  it.each([
    ['values.satisfaction', 'satisfaction'],
    ['values.fair_price', 'fair_price'],
    ['values["how much?"]', 'how much?'],
    ['values["say \\"hi\\""]', 'say "hi"'],
    ['responses[3].values.trust', 'trust'],
    ['condition', 'condition'],
    ['respondent', 'respondent'],
    ['', null],
  ])('%j → %j', (path, expected) => {
    expect(fieldName(path)).toBe(expected);
  });
});

describe('checkAnswers', () => {
  it('reads form text, and reports range, whole-number, required and not-a-number problems with the service paths', () => {
    expect(checkAnswers(DEFINITION, { satisfaction: '7', trust: 4, fair_price: '' })).toEqual({ values: { satisfaction: 7, trust: 4 }, errors: [] });
    expect(checkAnswers(DEFINITION, { satisfaction: '11', trust: '2.5', fair_price: 'abc' }).errors).toEqual([
      { path: 'values.satisfaction', message: '11 is outside the scale from 0 to 10', value: 11, limit: { min: 0, max: 10 } },
      { path: 'values.trust', message: 'must be a whole number (got 2.5)', value: 2.5 },
      { path: 'values.fair_price', message: '"abc" is not a number', value: 'abc' },
    ]);
    expect(checkAnswers(DEFINITION, { fair_price: '1e3', other: '3' }).errors.map((e) => `${e.path}: ${e.message}`)).toEqual([
      'values.other: is not a measure of this experiment',
      'values.satisfaction: is required',
      'values.trust: is required',
      'values.fair_price: 1000 is outside the scale from 0 to 200',
    ]);
    // Without a definition only the conversion: the service checks the rest.
    expect(checkAnswers(null, { a: '3', b: '', c: 99 })).toEqual({ values: { a: 3, c: 99 }, errors: [] });
  });

  it('finds exactly the value problems the service finds (same paths, same messages)', () => {
    const answer = fc.option(fc.oneof(fc.integer({ min: -5, max: 250 }), fc.double({ min: -5, max: 250, noNaN: true })), { nil: null });
    fc.assert(
      fc.property(fc.record({ satisfaction: answer, trust: answer, fair_price: answer }, { requiredKeys: [] }), (values) => {
        const client = checkAnswers(DEFINITION, values).errors.map((e) => `${e.path}: ${e.message}`).sort();
        const service = checkSingle(EXPERIMENT, { condition: 'bill-first', values }, '2027-03-01T12:00:00Z').errors.map((e) => `${e.path}: ${e.message}`).sort();
        expect(client, JSON.stringify(values)).toEqual(service);
      }),
      { numRuns: 500 },
    );
  });
});

describe('formBody', () => {
  it('every finite number survives the form grammar of the service exactly', () => {
    fc.assert(
      fc.property(fc.double({ noNaN: true, noDefaultInfinity: true }), (v) => {
        const fields = Object.fromEntries(formBody({ responseId: 'r1', condition: 'bill-first', respondent: 'p', submittedAt: '2027-03-01T12:00:00.000Z', values: { fair_price: v } }, 'sb_k'));
        const item = formToItem(fields).item as { values: Record<string, unknown> };
        expect(item.values.fair_price, String(v)).toBe(v === 0 ? 0 : v); // -0 is written "0"
      }),
      { numRuns: 1000 },
    );
  });
});

describe('newId', () => {
  it('is 128 bits as 32 hex digits, a valid responseId', () => {
    const bytes = Uint8Array.from({ length: 16 }, (_, i) => i * 17);
    expect(newId(() => bytes)).toBe('00112233445566778899aabbccddeeff');
    const ids = new Set(Array.from({ length: 1000 }, () => newId()));
    expect(ids.size).toBe(1000);
    for (const id of ids) expect(id).toMatch(RESPONSE_ID_PATTERN);
    for (const id of ids) expect(id).toMatch(/^[0-9a-f]{32}$/);
  });
});

// ------------------------------------------------------------------------------------------------------------
// The client against a fake service
// ------------------------------------------------------------------------------------------------------------

type Handler = (req: { method: string; url: string; body: unknown; mode: string | undefined }) => Response | 'network-error' | 'lost-after-storing';

/** A fake service with the real one's idempotency: the same responseId with the same content is stored once. */
class FakeService {
  readonly stored = new Map<string, { condition: string; values: Record<string, number> }>();
  readonly calls: { method: string; url: string; body: unknown }[] = [];
  readonly assignments = new Map<string, string>();
  script: Handler[] = [];

  /** Headers of every request, for the "no preflight" check. */
  readonly headers: Record<string, string>[] = [];

  readonly fetch = async (url: string, init: RequestInit): Promise<Response> => {
    // An answer arrives as form fields (a CORS simple request); the other calls as JSON.
    const body =
      init.body instanceof URLSearchParams
        ? Object.fromEntries(init.body)
        : init.body === undefined
          ? undefined
          : JSON.parse(String(init.body));
    const req = { method: init.method ?? 'GET', url, body, mode: init.mode };
    this.headers.push({ ...(init.headers as Record<string, string>) });
    if (init.mode === 'no-cors') throw new TypeError('Failed to fetch');
    this.calls.push(req);
    const scripted = this.script.shift();
    const outcome = scripted ? scripted(req) : this.answer(req);
    if (outcome === 'network-error') throw new TypeError('Failed to fetch');
    if (outcome === 'lost-after-storing') {
      this.answer(req);
      throw new TypeError('Failed to fetch');
    }
    return outcome;
  };

  answer(req: { method: string; url: string; body: unknown }): Response {
    const json = (status: number, body: unknown, headers: Record<string, string> = {}) =>
      new Response(JSON.stringify(body), { status, headers: { 'content-type': status >= 400 ? 'application/problem+json' : 'application/json', ...headers } });
    if (req.url.endsWith('/form')) return json(200, DEFINITION);
    if (req.url.endsWith('/assignments')) {
      const r = (req.body as { respondent: string }).respondent;
      const existing = this.assignments.get(r);
      if (existing) return json(200, { condition: existing, respondent: r, new: false });
      const c = this.assignments.size % 2 === 0 ? 'bill-first' : 'service-first';
      this.assignments.set(r, c);
      return json(201, { condition: c, respondent: r, new: true });
    }
    const fields = req.body as Record<string, string>;
    expect(fields.ingestKey).toBe('sb_test');
    const item = formToItem(fields).item as { responseId: string; condition: string; values: Record<string, number> };
    const checked = checkSingle(EXPERIMENT, item, '2027-03-01T12:00:00Z');
    if (checked.errors.length > 0) return json(422, { type: 'urn:splitballot:problem:validation', title: 'Invalid', status: 422, detail: 'invalid', errors: checked.errors });
    const before = this.stored.get(item.responseId);
    const content = { condition: item.condition, values: item.values };
    if (before) {
      if (JSON.stringify(before) !== JSON.stringify(content)) return json(409, { type: 'urn:splitballot:problem:response-conflict', title: 'Conflict', status: 409, detail: 'conflict' });
      return json(200, { responseId: item.responseId, ...content });
    }
    this.stored.set(item.responseId, content);
    return json(201, { responseId: item.responseId, ...content });
  }

  posts(): number {
    return this.calls.filter((c) => c.url.endsWith('/responses')).length;
  }
}

function makeClient(service: FakeService, storage: AnswerStorage, extra: Partial<ClientOptions> = {}) {
  let clock = Date.parse('2027-03-01T12:00:00Z');
  const sleeps: number[] = [];
  const scheduled: number[] = [];
  const client = createClient({
    service: 'http://svc.test/',
    study: 'water-bill-2027',
    key: 'sb_test',
    storage,
    fetch: service.fetch,
    now: () => clock,
    random: () => 0.5,
    sleep: async (ms) => {
      sleeps.push(ms);
      clock += ms;
    },
    schedule: (_fn, ms) => {
      scheduled.push(ms);
      return () => undefined;
    },
    autoFlush: false,
    ...extra,
  });
  return { client, sleeps, scheduled };
}

const GOOD = Object.freeze({ satisfaction: '8', trust: '6', fair_price: '35.5' });

describe('createClient', () => {
  it('assigns once (remembered: no second request), checks, writes before sending and removes only when acknowledged', async () => {
    const service = new FakeService();
    const storage = memoryStorage();
    const { client } = makeClient(service, storage);
    await client.load();
    const a = await client.assign('resp-1');
    expect(a).toEqual({ respondent: 'resp-1', condition: 'bill-first', responseId: expect.stringMatching(/^[0-9a-f]{32}$/) });
    expect(await client.assign('resp-1')).toEqual(a);
    expect(service.calls.filter((c) => c.url.endsWith('/assignments'))).toHaveLength(1);

    let pendingWhileSending = -1;
    service.script.push((req) => {
      void client.pending().then((n) => (pendingWhileSending = n));
      return service.answer(req);
    });
    const result = await client.submit(GOOD);
    expect(result).toMatchObject({ status: 'stored', responseId: a.responseId, repeated: false });
    expect(pendingWhileSending).toBe(1);
    expect(await client.pending()).toBe(0);
    expect([...service.stored.values()]).toEqual([{ condition: 'bill-first', values: { satisfaction: 8, trust: 6, fair_price: 35.5 } }]);
    const sent = service.calls.at(-1)!;
    expect(sent.url).toBe('http://svc.test/v1/experiments/water-bill-2027/responses');
    expect(sent.body).toEqual({
      responseId: a.responseId,
      condition: 'bill-first',
      respondent: 'resp-1',
      submittedAt: '2027-03-01T12:00:00.000Z',
      satisfaction: '8',
      trust: '6',
      fair_price: '35.5',
      ingestKey: 'sb_test',
    });
    // A CORS simple request (no preflight: one round trip): no Authorization header, only Accept; the body is a
    // URLSearchParams, which fetch sends as application/x-www-form-urlencoded. Assignment and definition use the header.
    expect(service.headers.at(-1)).toEqual({ accept: 'application/json' });
    expect(service.headers[0]).toEqual({ authorization: 'Bearer sb_test', accept: 'application/json' });
  });

  it('an invalid answer is shown, not sent and not kept', async () => {
    const service = new FakeService();
    const { client } = makeClient(service, memoryStorage());
    await client.load();
    await client.assign('resp-2');
    const result = await client.submit({ ...GOOD, satisfaction: '12' });
    expect(result).toEqual({ status: 'invalid', errors: [{ path: 'values.satisfaction', message: '12 is outside the scale from 0 to 10', value: 12, limit: { min: 0, max: 10 } }] });
    expect(service.posts()).toBe(0);
    expect(await client.pending()).toBe(0);
  });

  it('a network error keeps the answer (queued, retry scheduled); a later flush sends it once', async () => {
    const service = new FakeService();
    const storage = memoryStorage();
    const { client, scheduled } = makeClient(service, storage);
    await client.assign('resp-3');
    service.script.push(() => 'network-error');
    const first = await client.submit(GOOD);
    expect(first).toMatchObject({ status: 'queued', reason: 'network' });
    expect(scheduled).toEqual([750]); // first retry: c = 1000, random 0.5 → 500 + 0.5·500
    expect(await client.pending()).toBe(1);
    expect(service.stored.size).toBe(0);
    // "Reload": a new client on the same storage flushes the queue.
    const reloaded = makeClient(service, storage).client;
    expect(await reloaded.flush()).toEqual({ stored: 1, refused: 0, queued: 0 });
    expect(service.stored.size).toBe(1);
    expect(await reloaded.pending()).toBe(0);
  });

  it('an answer stored by the service whose acknowledgement was lost is not stored again', async () => {
    const service = new FakeService();
    const storage = memoryStorage();
    const { client } = makeClient(service, storage);
    await client.assign('resp-4');
    service.script.push(() => 'lost-after-storing');
    expect((await client.submit(GOOD)).status).toBe('queued');
    expect(service.stored.size).toBe(1);
    expect(await client.flush()).toEqual({ stored: 1, refused: 0, queued: 0 });
    expect(service.stored.size).toBe(1);
    expect(service.posts()).toBe(2);
  });

  it('503 then 429: waits as Retry-After says (plus at most 20 % jitter), then succeeds inside one submit', async () => {
    const service = new FakeService();
    const { client, sleeps } = makeClient(service, memoryStorage(), { random: () => 0.999 });
    await client.assign('resp-5');
    const problem = (status: number, retryAfter: string) => () =>
      new Response(JSON.stringify({ type: 'x', title: 't', status, detail: 'd' }), { status, headers: { 'content-type': 'application/problem+json', 'retry-after': retryAfter } });
    service.script.push(problem(503, '1'), problem(429, '2'));
    const result = await client.submit(GOOD);
    expect(result.status).toBe('stored');
    expect(sleeps).toHaveLength(2);
    expect(sleeps[0]).toBeGreaterThanOrEqual(1000);
    expect(sleeps[0]).toBeLessThanOrEqual(1200);
    expect(sleeps[1]).toBeGreaterThanOrEqual(2000);
    expect(sleeps[1]).toBeLessThanOrEqual(2400);
    expect(service.posts()).toBe(3);
    expect(service.stored.size).toBe(1);
  });

  it('a long outage: submit answers "queued" once its patience (waitMs) is spent, without waiting longer', async () => {
    const service = new FakeService();
    const { client, sleeps, scheduled } = makeClient(service, memoryStorage(), { waitMs: 5000 });
    await client.assign('resp-6');
    for (let i = 0; i < 10; i++) service.script.push(() => new Response('{}', { status: 503, headers: { 'content-type': 'application/json' } }));
    const result = await client.submit(GOOD);
    expect(result).toMatchObject({ status: 'queued', reason: 'unavailable' });
    // Back-off with random 0.5: 750, 1500, 3000 … — the third would pass 5000 ms in total.
    expect(sleeps).toEqual([750, 1500]);
    expect(scheduled).toEqual([3000]);
    expect(await client.pending()).toBe(1);
  });

  it('a refusal (422) returns the field errors and keeps nothing for retry', async () => {
    const service = new FakeService();
    const { client, scheduled } = makeClient(service, memoryStorage());
    await client.assign('resp-7');
    // No definition loaded: the service is the one that refuses.
    const result = await client.submit({ ...GOOD, trust: '9' });
    expect(result).toMatchObject({ status: 'refused', httpStatus: 422, errors: [{ path: 'values.trust', message: '9 is outside the scale from 1 to 7' }] });
    expect(await client.pending()).toBe(0);
    expect(scheduled).toEqual([]);
  });

  it('double submit and a second tab of the same respondent: the same responseId, one stored answer', async () => {
    const service = new FakeService();
    const shared = memoryStorage();
    const tab1 = makeClient(service, shared).client;
    const tab2 = makeClient(service, shared).client;
    const [a1, a2] = await Promise.all([tab1.assign(), tab2.assign()]);
    expect(a1.respondent).toBe(a2.respondent); // one respondent id made for this browser
    expect(a1.responseId).toBe(a2.responseId);
    const results = await Promise.all([tab1.submit(GOOD), tab1.submit(GOOD), tab2.submit(GOOD)]);
    expect(results.map((r) => r.status)).toEqual(['stored', 'stored', 'stored']);
    expect(results.filter((r) => r.status === 'stored' && !r.repeated)).toHaveLength(1);
    expect(service.stored.size).toBe(1);
    // A changed answer after it was stored is refused by the service (409), not stored twice.
    const changed = await tab2.submit({ ...GOOD, satisfaction: '2' });
    expect(changed).toMatchObject({ status: 'refused', httpStatus: 409 });
    expect(service.stored.size).toBe(1);
  });

  it('tells a page from an origin the service does not allow (CORS) from an unreachable service', async () => {
    const service = new FakeService();
    // CORS: every cors-mode request fails, a no-cors probe gets through.
    const corsRefused: ClientOptions['fetch'] = async (url, init) => {
      if (init.mode === 'no-cors') return new Response(null, { status: 200 });
      throw new TypeError('Failed to fetch');
    };
    const refused = makeClient(service, memoryStorage(), { fetch: corsRefused }).client;
    const err = await refused.assign('resp-9').catch((e: unknown) => e);
    expect(err).toBeInstanceOf(CollectError);
    expect((err as CollectError).kind).toBe('origin-not-allowed');
    expect((err as CollectError).message).toContain('not among its allowed origins (CORS)');
    // Unreachable: the probe fails too.
    const down = makeClient(service, memoryStorage(), { fetch: async () => Promise.reject(new TypeError('Failed to fetch')), waitMs: 0 }).client;
    const err2 = await down.assign('resp-9').catch((e: unknown) => e);
    expect((err2 as CollectError).kind).toBe('network');
  });
});

describe('webStorage (the localStorage fallback)', () => {
  it('keeps records as JSON, lists by prefix and updates in one step', async () => {
    const map = new Map<string, string>();
    const fake = {
      get length() {
        return map.size;
      },
      key: (i: number) => [...map.keys()][i] ?? null,
      getItem: (k: string) => map.get(k) ?? null,
      setItem: (k: string, v: string) => void map.set(k, v),
      removeItem: (k: string) => void map.delete(k),
      clear: () => map.clear(),
    } as Storage;
    const s = webStorage(fake);
    expect(await s.update('p|a', (cur) => cur ?? { n: 1 })).toEqual({ n: 1 });
    expect(await s.update('p|a', (cur) => cur ?? { n: 2 })).toEqual({ n: 1 });
    await s.update('q|b', () => ({ n: 3 }));
    expect(await s.entries('p|')).toEqual([{ n: 1 }]);
    expect(map.get('p|a')).toBe('{"n":1}');
    await s.update('p|a', () => undefined);
    expect(await s.get('p|a')).toBeUndefined();
    // The client works on it.
    const service = new FakeService();
    const { client } = makeClient(service, s);
    await client.assign('resp-10');
    expect((await client.submit(GOOD)).status).toBe('stored');
    expect(service.stored.size).toBe(1);
  });
});
