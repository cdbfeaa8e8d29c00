/**
 * The auth hooks: who may call which route (secrets, hashes and the first admin key are services/keys.ts).
 *
 * Scopes: admin (everything), ingest (post responses singly, in batches or as CSV, and assign respondents — it can
 * never read results; server-side only), read (definitions, comparisons, exports), form (what a respondent's page
 * does: FORM_SCOPE_ROUTES below). A key may be limited to one experiment.
 *
 * Every route declares `config.access`; a route without one cannot be registered (onRoute throws), so nothing
 * is public by accident. Missing/malformed/unknown/revoked key → 401; wrong scope or experiment → 403.
 *
 * HTML forms cannot send headers: on routes with `formKey`, a form post without an Authorization header may carry
 * a form (or, for older pages, an ingest) key in the form field `ingestKey`, checked after the body is parsed. Admin
 * and read keys are refused there (403), because a key in a web page is visible to everyone who opens it.
 */
import type { FastifyInstance, FastifyRequest } from 'fastify';
import { activeKeyByHash, hashSecret } from '../services/keys.js';
import type { ApiKeyRecord, Scope, Store } from '../store/types.js';
import { FORM_KEY_FIELD } from '../schemas/responses.js';
import { isFormContentType } from './negotiate.js';
import { ProblemError } from '../errors.js';

/**
 * THE list of what a public form key may do: the routes a respondent's page calls. A route that a survey page needs
 * (posting one answer, a new respondent's assignment, a public form definition) lists `'form'` among its scopes by
 * spreading `RESPONDENT_SCOPES`; everything else (batches, CSV imports, reads, admin) must not. The access matrix
 * (tests/reliability/access-matrix.test.ts) checks the routes one by one.
 */
export const FORM_SCOPE_ROUTES: readonly string[] = [
  'POST /v1/experiments/:id/responses',
  'POST /v1/experiments/:id/assignments',
  'GET /v1/experiments/:id/form',
];
/** Scopes of a route a respondent's page calls: the public form key, plus server-side ingest and admin keys. */
export const RESPONDENT_SCOPES: readonly Scope[] = ['form', 'ingest', 'admin'];
/** Scopes that may arrive in the `ingestKey` field of a form post. */
const FORM_FIELD_SCOPES: readonly Scope[] = ['form', 'ingest'];

/** last_used_at is written at most this often per key (ms), so that reads do not turn into writes. */
export const TOUCH_INTERVAL_MS = 60_000;

export type RouteAccess =
  | { public: true }
  | {
      public?: false;
      scopes: readonly Scope[];
      /** Route parameter holding the experiment id; a key limited to another experiment gets 403. */
      experimentParam?: string;
      /** May a key limited to one experiment use this route at all (routes without an experiment parameter)? Default true. */
      allowExperimentLimited?: boolean;
      /** May an ingest key arrive in the `ingestKey` field of a form post? */
      formKey?: boolean;
    };

export interface Principal {
  keyId: number;
  scope: Scope;
  /** Experiment slug the key is limited to, or null. */
  experiment: string | null;
  experimentKey: number | null;
  via: 'header' | 'form';
}

declare module 'fastify' {
  interface FastifyContextConfig {
    access?: RouteAccess;
  }
  interface FastifyRequest {
    principal: Principal | null;
    /** Set when authentication waits for the form body (formKey routes). */
    formKeyPending: boolean;
  }
}

const BEARER = /^Bearer[ \t]+([\x21-\x7e]{1,512})[ \t]*$/i;
const WWW_AUTHENTICATE = { 'www-authenticate': 'Bearer realm="splitballot"' };

/** 401 with the WWW-Authenticate challenge. */
export function unauthorized(detail: string): ProblemError {
  return new ProblemError('unauthorized', detail, { headers: WWW_AUTHENTICATE });
}

/** The secret of an "Authorization: Bearer <secret>" header; 401 (with `missing` as the detail) when absent, 401 when malformed. */
export function bearerSecret(header: string | undefined, missing: string): string {
  if (header === undefined) throw unauthorized(missing);
  const m = BEARER.exec(header);
  if (!m) throw unauthorized('The Authorization header must be "Bearer <key>".');
  return m[1];
}

async function authenticate(store: Store, secret: string): Promise<ApiKeyRecord> {
  const key = await activeKeyByHash(store, hashSecret(secret));
  if (!key) throw unauthorized('The API key is not valid (unknown or revoked).');
  return key;
}

function authorize(key: ApiKeyRecord, access: Exclude<RouteAccess, { public: true }>, request: FastifyRequest): void {
  if (!access.scopes.includes(key.scope)) {
    throw new ProblemError('forbidden', `This key has the ${key.scope} scope; this route needs ${access.scopes.join(' or ')}.`);
  }
  if (key.experiment !== null) {
    if (access.experimentParam) {
      const wanted = (request.params as Record<string, string | undefined>)[access.experimentParam];
      if (wanted !== key.experiment) throw new ProblemError('forbidden', `This key is limited to experiment ${key.experiment}.`);
    } else if (access.allowExperimentLimited === false) {
      throw new ProblemError('forbidden', `This key is limited to experiment ${key.experiment}; this route needs a key for every experiment.`);
    }
  }
}

function toPrincipal(key: ApiKeyRecord, via: Principal['via']): Principal {
  return { keyId: key.id, scope: key.scope, experiment: key.experiment, experimentKey: key.experimentKey, via };
}

/** A POST to a route that an ingest or form key may call (what the ingest rate limit and the refused-response counter watch). */
export function isIngestRoute(request: FastifyRequest): boolean {
  if (request.method !== 'POST' || request.is404) return false;
  const access = request.routeOptions.config.access;
  return access !== undefined && !access.public && (access.scopes.includes('ingest') || access.scopes.includes('form'));
}

export function registerAuth(app: FastifyInstance, store: Store, now: () => Date = () => new Date()): void {
  app.decorateRequest('principal', null);
  app.decorateRequest('formKeyPending', false);
  const lastTouched = new Map<number, number>();

  app.addHook('onRoute', (route) => {
    if (!route.config?.access && route.method === 'OPTIONS' && route.url === '*') {
      // The CORS preflight route of @fastify/cors: public by nature (it answers with headers only).
      route.config = { ...route.config, access: { public: true } };
      route.schema = { ...route.schema, hide: true } as typeof route.schema;
      return;
    }
    if (!route.config?.access) {
      throw new Error(`route ${String(route.method)} ${route.url} declares no config.access; every route must say who may call it`);
    }
  });

  async function touch(key: ApiKeyRecord): Promise<void> {
    const t = now().getTime();
    const previous = lastTouched.get(key.id) ?? (key.lastUsedAt ? Date.parse(key.lastUsedAt) : 0);
    if (t - previous >= TOUCH_INTERVAL_MS) {
      lastTouched.set(key.id, t);
      await store.apiKeys.touch(key.id, new Date(t).toISOString());
    }
  }

  app.addHook('onRequest', async (request) => {
    if (request.is404) return;
    const access = request.routeOptions.config.access;
    if (!access || access.public) return;
    const header = request.headers.authorization;
    if (header === undefined) {
      if (access.formKey && isFormContentType(request.headers['content-type'])) {
        request.formKeyPending = true;
        return;
      }
      throw unauthorized('Send an API key in the header Authorization: Bearer <key>.');
    }
    const key = await authenticate(store, bearerSecret(header, ''));
    authorize(key, access, request);
    request.principal = toPrincipal(key, 'header');
    await touch(key);
  });

  app.addHook('preValidation', async (request) => {
    if (!request.formKeyPending) return;
    const access = request.routeOptions.config.access;
    if (!access || access.public) return;
    const body = request.body as Record<string, unknown> | null | undefined;
    const secret = body && typeof body === 'object' ? body[FORM_KEY_FIELD] : undefined;
    if (typeof secret !== 'string' || secret === '') {
      throw unauthorized(`Send an ingest key in the form field ${FORM_KEY_FIELD}, or an API key in the Authorization header.`);
    }
    if (secret.length > 512) throw unauthorized('The API key is not valid (unknown or revoked).');
    const key = await authenticate(store, secret);
    if (!FORM_FIELD_SCOPES.includes(key.scope)) {
      request.log.warn({ keyId: key.id, scope: key.scope }, `a key with the ${key.scope} scope was sent in a form field and refused; it may be exposed in a web page, consider revoking it`);
      throw new ProblemError('forbidden', `Only a form (or ingest) key may be sent in the form field ${FORM_KEY_FIELD}; admin and read keys are refused there.`);
    }
    authorize(key, access, request);
    request.principal = toPrincipal(key, 'form');
    request.formKeyPending = false;
    await touch(key);
  });
}
