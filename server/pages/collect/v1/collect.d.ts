// Types for collect.js, the Splitballot browser client (version 1). Served at /client/v1/collect.d.ts.

export declare const VERSION: string;
/** Form field names that are not measures: condition, responseId, respondent, submittedAt, ingestKey. */
export declare const RESERVED_FIELDS: readonly string[];

/** What GET /v1/experiments/{id}/form returns: only what a form needs to check answers. */
export interface FormDefinition {
  experiment: string;
  status: 'open' | 'closed';
  conditions: string[];
  measures: { id: string; min: number; max: number; integer: boolean; required: boolean }[];
}

/** One problem with one field, as in the service's problem+json `errors`. */
export interface FieldError {
  /** e.g. "values.satisfaction"; "" for the whole body. */
  path: string;
  message: string;
  value?: unknown;
  limit?: { min: number; max: number };
}

/** RFC 9457 problem details as the service sends them. */
export interface Problem {
  type: string;
  title: string;
  status: number;
  detail: string;
  errors?: FieldError[];
}

/** The service's answer to a stored response. */
export interface StoredResponse {
  responseId: string;
  condition: string;
  respondent: string | null;
  values: Record<string, number>;
  submittedAt: string;
  receivedAt: string;
}

/** Why a request got no answer: unreachable (or cut), timed out, or refused by the browser (CORS). */
export type Failure = 'network' | 'timeout' | 'origin-not-allowed';

export type SubmitResult =
  /** The service acknowledged the answer (201, or 200 when it had it already: `repeated`). */
  | { status: 'stored'; responseId: string; repeated: boolean; response: StoredResponse | null }
  /** Kept in this browser and sent later (next page load, "online" event, or the retry timer). */
  | { status: 'queued'; responseId: string; reason: Failure | 'rate-limited' | 'unavailable'; retryInMs: number }
  /** Refused before sending: nothing was sent or kept. */
  | { status: 'invalid'; errors: FieldError[] }
  /** Refused by the service for good (4xx): not kept, not retried. `errors` lists the field errors, if any. */
  | { status: 'refused'; responseId: string; httpStatus: number; problem: Problem | null; errors: FieldError[] };

export interface FlushResult {
  stored: number;
  refused: number;
  queued: number;
}

export type ClientEvent =
  | { type: 'queued'; respondent: string; responseId: string }
  | { type: 'stored'; respondent: string; responseId: string; result: Extract<SubmitResult, { status: 'stored' }> }
  | { type: 'refused'; respondent: string; responseId: string; result: Extract<SubmitResult, { status: 'refused' }> };

/** Where answers wait: a key-value store whose `update` is atomic (read and write in one step). */
export interface AnswerStorage {
  kind: 'indexeddb' | 'localstorage' | 'memory' | string;
  get(key: string): Promise<any>;
  /** Every value whose key starts with prefix, in key order. */
  entries(prefix: string): Promise<any[]>;
  /** Replace the value by change(current); undefined deletes. Returns the new value. */
  update(key: string, change: (current: any) => any): Promise<any>;
}

export interface ClientOptions {
  /** The service's address, e.g. "https://survey.example.org". */
  service: string;
  /** Experiment id. */
  study: string;
  /** An INGEST key limited to this experiment (never an admin or read key: the page is public). */
  key: string;
  /** Give up waiting inside submit()/assign()/load() after this long and report "queued" (default 10 000 ms). */
  waitMs?: number;
  /** One request's time limit (default 15 000 ms). */
  timeoutMs?: number;
  /** Back-off base and ceiling (defaults 1 000 and 60 000 ms). */
  baseDelayMs?: number;
  maxDelayMs?: number;
  /** Longest Retry-After obeyed (default 600 000 ms). */
  maxRetryAfterMs?: number;
  /** Send the queue at start and on the "online" event (default true). */
  autoFlush?: boolean;
  /** Replacements for tests: storage, fetch, clock, randomness, timers. */
  storage?: AnswerStorage | Promise<AnswerStorage>;
  fetch?: (input: string, init: RequestInit) => Promise<Response>;
  now?: () => number;
  random?: () => number;
  randomBytes?: (n: number) => Uint8Array;
  sleep?: (ms: number) => Promise<void>;
  schedule?: (fn: () => void, ms: number) => () => void;
}

export interface Client {
  readonly version: string;
  /** Read the form definition (limits) so that submit() checks answers before sending. */
  load(): Promise<FormDefinition>;
  /**
   * Assign this respondent (sticky): the given id, or one made once and kept for this browser. Remembered in
   * storage, so a reload asks the service nothing. Throws CollectError.
   */
  assign(respondent?: string): Promise<{ respondent: string; condition: string; responseId: string }>;
  /** Check, store, send (one request). Answers are numbers or form text; "" or null = not answered. */
  submit(answers: Record<string, unknown>, options?: { respondent?: string; condition?: string }): Promise<SubmitResult>;
  /** Send every waiting answer of this study now. */
  flush(): Promise<FlushResult>;
  /** How many answers of this study wait in this browser. */
  pending(): Promise<number>;
  /** Check answers against the loaded definition without sending. */
  check(answers: Record<string, unknown>): { values: Record<string, number>; errors: FieldError[] };
  storageKind(): Promise<string>;
  /** Listen to queued / stored / refused events (also for answers sent later). Returns the unsubscribe function. */
  subscribe(listener: (event: ClientEvent) => void): () => void;
  readonly definition: FormDefinition | null;
  readonly respondent: string | null;
  readonly condition: string | null;
}

export type CollectErrorKind = 'origin-not-allowed' | 'network' | 'key' | 'closed' | 'not-found' | 'refused' | 'not-assigned';

export declare class CollectError extends Error {
  readonly kind: CollectErrorKind;
  readonly status: number;
  readonly problem: Problem | null;
  constructor(kind: CollectErrorKind, message: string, status?: number, problem?: Problem | null);
}

/** Internal: one HTTP exchange as the client sees it. */
export interface Answer {
  status: number;
  body: unknown;
  retryAfterMs: number | null;
  failure: Failure | null;
}

/** An answer waiting in storage (sent as it is, every time). */
export interface PendingAnswer {
  responseId: string;
  condition: string;
  respondent: string;
  values: Record<string, number>;
  submittedAt: string;
}

export declare function createClient(options: ClientOptions): Client;
/** The answer as HTML form fields, with the key in ingestKey (a CORS simple request: no preflight). */
export declare function formBody(answer: PendingAnswer, key: string): URLSearchParams;
export declare function newId(randomBytes?: (n: number) => Uint8Array): string;
export declare function backoffDelay(attempt: number, baseMs?: number, maxMs?: number, random?: () => number): number;
export declare function parseRetryAfter(value: string | null | undefined, nowMs: number): number | null;
export declare function isRetryable(status: number): boolean;
export declare function fieldName(path: string): string | null;
export declare function checkAnswers(definition: FormDefinition | null, answers: Record<string, unknown>): { values: Record<string, number>; errors: FieldError[] };
export declare function fieldFor(form: HTMLFormElement, path: string): HTMLElement | null;
export declare function readForm(form: HTMLFormElement, definition?: FormDefinition | null): Record<string, string>;
export declare function showErrors(form: HTMLFormElement, errors: readonly FieldError[]): FieldError[];
export declare function clearErrors(form: HTMLFormElement): void;
export declare function indexedDbStorage(idb: IDBFactory, name?: string): Promise<AnswerStorage>;
export declare function webStorage(storage: Storage): AnswerStorage;
export declare function memoryStorage(): AnswerStorage;
export declare function openStorage(): Promise<AnswerStorage>;
