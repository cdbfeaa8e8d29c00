// @ts-check
/**
 * Splitballot collect, version 1: the browser client for survey pages. Plain ES module, no dependencies, no build
 * step. Served by the service at /client/v1/collect.js (types: /client/v1/collect.d.ts); the same file can be
 * copied into a bundle.
 *
 *   const client = createClient({ service: 'https://survey.example.org', study: 'water-bill-2027', key: 'sb_…' });
 *   await client.load();                        // the public form definition (limits), for checks before sending
 *   const { condition } = await client.assign(); // sticky assignment, remembered for this page
 *   const result = await client.submit({ satisfaction: 7, trust: '5' });
 *   // result.status: 'stored' | 'queued' (kept in this browser, sent later) | 'invalid' (nothing sent) | 'refused'
 *
 * Never loses an answer, never stores one twice:
 *  - one responseId per respondent (128 random bits), made once and kept in browser storage with the pending
 *    answer, so a retry, a double click, a reload or a second tab sends the same id and the service stores it once;
 *  - a submit is written to storage (IndexedDB, else localStorage) BEFORE it is sent, and removed only when the
 *    service acknowledged it (201, or 200 for a repeat) or refused it for good (4xx other than 408/425/429);
 *  - network errors, timeouts, 408, 425, 429 and 5xx are retried with exponential back-off and jitter, and a
 *    Retry-After header is honoured; the queue is sent again on the next page load and on the browser's
 *    "online" event.
 * Back-off: "equal jitter": the n-th retry waits a uniformly random time in [c/2, c), c = min(max, base·2^n)
 * (M. Brooker, "Exponential Backoff and Jitter", AWS Architecture Blog, 2015).
 */

export const VERSION = '1.0.0';

/** Names of form fields that are not measures. */
export const RESERVED_FIELDS = Object.freeze(['condition', 'responseId', 'respondent', 'submittedAt', 'ingestKey']);

const HTML_FLOAT = /^-?(?:[0-9]+(?:\.[0-9]+)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/;
const HTTP_DATE = /^[A-Z][a-z]{2}, \d{2} [A-Z][a-z]{2} \d{4} \d{2}:\d{2}:\d{2} GMT$/;

// ------------------------------------------------------------------------------------------------------------
// Pure helpers (exported for tests and for pages that want them)
// ------------------------------------------------------------------------------------------------------------

/**
 * Hex id of 128 random bits (crypto.getRandomValues unless `randomBytes` is given).
 * @param {(n: number) => Uint8Array} [randomBytes]
 */
export function newId(randomBytes = defaultRandomBytes) {
  let out = '';
  for (const b of randomBytes(16)) out += (b < 16 ? '0' : '') + b.toString(16);
  return out;
}

/** @param {number} n */
function defaultRandomBytes(n) {
  return crypto.getRandomValues(new Uint8Array(n));
}

/**
 * Wait before retry number `attempt` (0 = the first retry): uniform in [c/2, c), c = min(maxMs, baseMs·2^attempt).
 * @param {number} attempt @param {number} [baseMs] @param {number} [maxMs] @param {() => number} [random]
 */
export function backoffDelay(attempt, baseMs = 1000, maxMs = 60000, random = Math.random) {
  const ceiling = Math.min(maxMs, baseMs * 2 ** Math.min(Math.max(0, attempt), 40));
  return Math.floor(ceiling / 2 + (random() * ceiling) / 2);
}

/**
 * A Retry-After header in milliseconds: delay-seconds ("120") or an IMF-fixdate HTTP date (relative to nowMs,
 * never negative). Anything else → null.
 * @param {string | null | undefined} value @param {number} nowMs
 */
export function parseRetryAfter(value, nowMs) {
  if (value == null) return null;
  const text = String(value).trim();
  if (/^\d{1,9}$/.test(text)) return Number(text) * 1000;
  if (!HTTP_DATE.test(text)) return null;
  const at = Date.parse(text);
  return Number.isNaN(at) ? null : Math.max(0, at - nowMs);
}

/** Should an answer with this HTTP status (0 = no answer: network error or timeout) be sent again later? @param {number} status */
export function isRetryable(status) {
  return status === 0 || status === 408 || status === 425 || status === 429 || status >= 500;
}

/**
 * The form field a problem's `errors[].path` points at: "values.trust" → "trust", 'values["a b"]' → "a b",
 * "responses[2].values.trust" → "trust", "condition" → "condition"; "" (the whole body) → null.
 * @param {string} path
 */
export function fieldName(path) {
  const m = /(?:^|\.)values(?:\.([^.[\]]+)|\[("(?:[^"\\]|\\.)*")\])$/.exec(path);
  if (m) return m[1] ?? JSON.parse(m[2]);
  const last = /(?:^|\.)([A-Za-z0-9_-]+)$/.exec(path);
  return last ? last[1] : null;
}

/**
 * Check answers against the form definition, as the service will: required items, numbers only, scale limits,
 * whole numbers. Text (from form fields) is read with the HTML number grammar; "" and null mean "no answer".
 * Returns the numbers to send and every problem, with the service's paths and messages.
 * Without a definition only the conversion to numbers is done (the service checks the rest).
 * @param {import('./collect.js').FormDefinition | null} definition
 * @param {Record<string, unknown>} answers
 */
export function checkAnswers(definition, answers) {
  /** @type {Record<string, number>} */
  const values = {};
  /** @type {import('./collect.js').FieldError[]} */
  const errors = [];
  const measures = definition ? definition.measures : Object.keys(answers).map((id) => ({ id, min: -Infinity, max: Infinity, integer: false, required: false }));
  const known = new Set(measures.map((m) => m.id));
  for (const id of Object.keys(answers)) {
    if (!known.has(id) && answers[id] != null && answers[id] !== '') errors.push({ path: pathOf(id), message: 'is not a measure of this experiment', value: answers[id] });
  }
  for (const m of measures) {
    const raw = answers[m.id];
    const path = pathOf(m.id);
    if (raw == null || (typeof raw === 'string' && raw.trim() === '')) {
      if (m.required) errors.push({ path, message: 'is required' });
      continue;
    }
    let v;
    if (typeof raw === 'number') v = raw;
    else if (typeof raw === 'string' && HTML_FLOAT.test(raw.trim())) v = Number(raw.trim());
    else {
      errors.push({ path, message: `"${String(raw).slice(0, 100)}" is not a number`, value: raw });
      continue;
    }
    if (!Number.isFinite(v)) errors.push({ path, message: 'is not a finite number', value: String(v) });
    else if (v < m.min || v > m.max) errors.push({ path, message: `${v} is outside the scale from ${m.min} to ${m.max}`, value: v, limit: { min: m.min, max: m.max } });
    else if (m.integer && !Number.isInteger(v)) errors.push({ path, message: `must be a whole number (got ${v})`, value: v });
    else values[m.id] = v === 0 ? 0 : v;
  }
  return { values, errors };
}

/**
 * An answer as the fields of an HTML form post (what the service's ingest route reads from a form): condition,
 * responseId, respondent, submittedAt, one field per measure, and the ingest key in ingestKey. Numbers are
 * written as JavaScript writes them ("42.5", "1e-7"), which the service's form number grammar accepts.
 * @param {import('./collect.js').PendingAnswer} answer @param {string} key
 */
export function formBody(answer, key) {
  const fields = new URLSearchParams();
  fields.set('responseId', answer.responseId);
  fields.set('condition', answer.condition);
  fields.set('respondent', answer.respondent);
  fields.set('submittedAt', answer.submittedAt);
  for (const [id, v] of Object.entries(answer.values)) fields.set(id, String(v));
  fields.set('ingestKey', key);
  return fields;
}

/** Is the answer in storage still the one that was sent? @param {unknown} a @param {unknown} b */
function same(a, b) {
  return JSON.stringify(a) === JSON.stringify(b);
}

/** @param {string} id */
function pathOf(id) {
  return /^[A-Za-z0-9_-]+$/.test(id) ? `values.${id}` : `values[${JSON.stringify(id)}]`;
}

// ------------------------------------------------------------------------------------------------------------
// Page helpers (DOM)
// ------------------------------------------------------------------------------------------------------------

/**
 * The form control a problem path points at, or null.
 * @param {HTMLFormElement} form @param {string} path
 */
export function fieldFor(form, path) {
  const name = fieldName(path);
  const item = name === null ? null : form.elements.namedItem(name);
  // A radio group is a RadioNodeList: its first button stands for the group.
  return item && 'length' in item && !('tagName' in item) ? /** @type {HTMLElement} */ (item[0] ?? null) : /** @type {HTMLElement | null} */ (item);
}

/**
 * The answers in a form: every field named after a measure of the definition (all fields but the reserved ones
 * when there is no definition). A radio group gives its checked value; an unchecked group gives "".
 * @param {HTMLFormElement} form @param {import('./collect.js').FormDefinition | null} [definition]
 */
export function readForm(form, definition = null) {
  /** @type {Record<string, string>} */
  const answers = {};
  const data = new FormData(form);
  const names = definition ? definition.measures.map((m) => m.id) : [...new Set([...data.keys()])].filter((n) => !RESERVED_FIELDS.includes(n));
  for (const name of names) {
    const v = data.get(name);
    answers[name] = typeof v === 'string' ? v : '';
  }
  return answers;
}

/**
 * Show each error next to its field: the text goes into the form's element with data-error-for="<field>" (made
 * after the field when the page has none), and the field gets aria-invalid and aria-describedby. Errors that
 * name no field of this form are returned, for a message above the form.
 * @param {HTMLFormElement} form @param {readonly import('./collect.js').FieldError[]} errors
 */
export function showErrors(form, errors) {
  clearErrors(form);
  /** @type {import('./collect.js').FieldError[]} */
  const unplaced = [];
  for (const e of errors) {
    const field = fieldFor(form, e.path);
    const name = fieldName(e.path);
    if (!field || name === null) {
      unplaced.push(e);
      continue;
    }
    let slot = [...form.querySelectorAll('[data-error-for]')].find((el) => el.getAttribute('data-error-for') === name);
    if (!slot) {
      slot = document.createElement('span');
      slot.setAttribute('data-error-for', name);
      slot.setAttribute('data-made-by', 'collect');
      field.insertAdjacentElement('afterend', slot);
    }
    if (!slot.id) slot.id = `collect-error-${name.replace(/[^A-Za-z0-9_-]/g, '_')}`;
    slot.textContent = slot.textContent ? `${slot.textContent} ${e.message}` : e.message;
    field.setAttribute('aria-invalid', 'true');
    field.setAttribute('aria-describedby', slot.id);
  }
  return unplaced;
}

/** Remove what showErrors() put on the form. @param {HTMLFormElement} form */
export function clearErrors(form) {
  for (const el of form.querySelectorAll('[data-error-for]')) {
    if (el.getAttribute('data-made-by') === 'collect') el.remove();
    else el.textContent = '';
  }
  for (const el of form.querySelectorAll('[aria-invalid]')) {
    el.removeAttribute('aria-invalid');
    el.removeAttribute('aria-describedby');
  }
}

// ------------------------------------------------------------------------------------------------------------
// Storage: IndexedDB, else localStorage, else memory (the answer then survives only while the page is open)
// ------------------------------------------------------------------------------------------------------------

/**
 * A key-value store over IndexedDB. `update` reads and writes in one readwrite transaction, so two tabs can never
 * both make a responseId for the same respondent.
 * @param {IDBFactory} idb @param {string} [name]
 * @returns {Promise<import('./collect.js').AnswerStorage>}
 */
export function indexedDbStorage(idb, name = 'splitballot-collect') {
  return new Promise((resolve, reject) => {
    const open = idb.open(name, 1);
    open.onupgradeneeded = () => open.result.createObjectStore('kv');
    open.onerror = () => reject(open.error);
    open.onblocked = () => reject(new Error('IndexedDB blocked'));
    open.onsuccess = () => {
      const db = open.result;
      /** @param {IDBTransactionMode} mode @param {(s: IDBObjectStore) => IDBRequest | void} body */
      const run = (mode, body) =>
        new Promise((res, rej) => {
          const tx = db.transaction('kv', mode);
          const req = body(tx.objectStore('kv'));
          tx.oncomplete = () => res(req ? req.result : undefined);
          tx.onerror = tx.onabort = () => rej(tx.error);
        });
      resolve({
        kind: 'indexeddb',
        get: (key) => run('readonly', (s) => s.get(key)),
        entries: (prefix) =>
          run('readonly', (s) => s.getAll(IDBKeyRange.bound(prefix, `${prefix}\uffff`))),
        update: (key, change) =>
          new Promise((res, rej) => {
            const tx = db.transaction('kv', 'readwrite');
            const store = tx.objectStore('kv');
            /** @type {any} */
            let next;
            const req = store.get(key);
            req.onsuccess = () => {
              next = change(req.result);
              if (next === undefined) store.delete(key);
              else store.put(next, key);
            };
            tx.oncomplete = () => res(next);
            tx.onerror = tx.onabort = () => rej(tx.error);
          }),
      });
    };
  });
}

/**
 * The same over a Web Storage object (localStorage), values as JSON.
 * @param {Storage} ls @returns {import('./collect.js').AnswerStorage}
 */
export function webStorage(ls) {
  /** @param {string} key */
  const get = (key) => {
    const text = ls.getItem(key);
    return text === null ? undefined : JSON.parse(text);
  };
  return {
    kind: 'localstorage',
    get: async (key) => get(key),
    entries: async (prefix) => {
      const out = [];
      for (let i = 0; i < ls.length; i++) {
        const k = ls.key(i);
        if (k !== null && k.startsWith(prefix)) out.push(get(k));
      }
      return out;
    },
    update: async (key, change) => {
      const next = change(get(key));
      if (next === undefined) ls.removeItem(key);
      else ls.setItem(key, JSON.stringify(next));
      return next;
    },
  };
}

/** Storage kept in memory only (tests, or a browser that refuses both). @returns {import('./collect.js').AnswerStorage} */
export function memoryStorage() {
  const map = new Map();
  return {
    kind: 'memory',
    get: async (key) => structuredClone(map.get(key)),
    entries: async (prefix) => [...map.keys()].filter((k) => k.startsWith(prefix)).sort().map((k) => structuredClone(map.get(k))),
    update: async (key, change) => {
      const next = change(structuredClone(map.get(key)));
      if (next === undefined) map.delete(key);
      else map.set(key, structuredClone(next));
      return structuredClone(next);
    },
  };
}

/** The best storage this browser offers. @returns {Promise<import('./collect.js').AnswerStorage>} */
export async function openStorage() {
  try {
    if (typeof indexedDB !== 'undefined') return await indexedDbStorage(indexedDB);
  } catch {
    // fall through
  }
  try {
    if (typeof localStorage !== 'undefined') {
      localStorage.setItem('splitballot-collect-probe', '1');
      localStorage.removeItem('splitballot-collect-probe');
      return webStorage(localStorage);
    }
  } catch {
    // fall through
  }
  return memoryStorage();
}

// ------------------------------------------------------------------------------------------------------------
// The client
// ------------------------------------------------------------------------------------------------------------

/** An error of assign() or load(): `kind` says what to tell the respondent. */
export class CollectError extends Error {
  /**
   * @param {import('./collect.js').CollectErrorKind} kind @param {string} message
   * @param {number} [status] @param {import('./collect.js').Problem | null} [problem]
   */
  constructor(kind, message, status = 0, problem = null) {
    super(message);
    this.name = 'CollectError';
    this.kind = kind;
    this.status = status;
    this.problem = problem;
  }
}

/**
 * @param {import('./collect.js').ClientOptions} options
 * @returns {import('./collect.js').Client}
 */
export function createClient(options) {
  const base = String(options.service).replace(/\/+$/, '');
  const study = options.study;
  const key = options.key;
  const doFetch = options.fetch ?? ((input, init) => globalThis.fetch(input, init));
  const now = options.now ?? Date.now;
  const random = options.random ?? Math.random;
  const randomBytes = options.randomBytes ?? defaultRandomBytes;
  const sleep = options.sleep ?? ((ms) => new Promise((r) => setTimeout(r, ms)));
  const schedule = options.schedule ?? ((fn, ms) => {
    const t = setTimeout(fn, ms);
    return () => clearTimeout(t);
  });
  const timeoutMs = options.timeoutMs ?? 15000;
  const waitMs = options.waitMs ?? 10000;
  const baseDelayMs = options.baseDelayMs ?? 1000;
  const maxDelayMs = options.maxDelayMs ?? 60000;
  const maxRetryAfterMs = options.maxRetryAfterMs ?? 600000;
  const storage = Promise.resolve(options.storage ?? openStorage());
  const ns = `splitballot|v1|${base}|${study}|`;
  const studyPath = `/v1/experiments/${encodeURIComponent(study)}`;
  /** @type {Set<(event: import('./collect.js').ClientEvent) => void>} */
  const listeners = new Set();
  /** @type {import('./collect.js').FormDefinition | null} */
  let definition = null;
  /** @type {string | null} */
  let respondent = null;
  /** @type {string | null} */
  let condition = null;
  let backgroundAttempt = 0;
  /** @type {(() => void) | null} */
  let cancelTimer = null;
  /** @type {Promise<import('./collect.js').FlushResult> | null} */
  let flushing = null;

  /** @param {string} r */
  const recordKey = (r) => `${ns}r|${r}`;
  /** @param {import('./collect.js').ClientEvent} event */
  const emit = (event) => {
    for (const l of listeners) {
      try {
        l(event);
      } catch {
        // a listener's error must not stop the queue
      }
    }
  };

  /**
   * One request; never throws. status 0 = no answer (network error, refused by CORS, or timeout).
   * @param {string} method @param {string} path @param {unknown} [body] @param {Record<string, string>} [extraHeaders]
   * @returns {Promise<import('./collect.js').Answer>}
   */
  async function send(method, path, body, extraHeaders = {}) {
    const abort = new AbortController();
    const timer = setTimeout(() => abort.abort(), timeoutMs);
    try {
      const res = await doFetch(base + path, {
        method,
        mode: 'cors',
        credentials: 'omit',
        cache: 'no-store',
        // A URLSearchParams body (an answer, with the key in its ingestKey field) is a CORS "simple request": no
        // preflight, so a submit costs exactly one round trip. Other calls send the key as a header.
        headers:
          body instanceof URLSearchParams
            ? { accept: 'application/json' }
            : { authorization: `Bearer ${key}`, accept: 'application/json', ...(body === undefined ? {} : { 'content-type': 'application/json' }), ...extraHeaders },
        body: body === undefined || body instanceof URLSearchParams ? body : JSON.stringify(body),
        signal: abort.signal,
      });
      let json = null;
      if (/json/.test(res.headers.get('content-type') ?? '')) json = await res.json().catch(() => null);
      return { status: res.status, body: json, retryAfterMs: parseRetryAfter(res.headers.get('retry-after'), now()), failure: null };
    } catch (err) {
      const timedOut = abort.signal.aborted;
      return { status: 0, body: null, retryAfterMs: null, failure: timedOut ? 'timeout' : await diagnose(abort.signal) };
    } finally {
      clearTimeout(timer);
    }
  }

  /**
   * A fetch that failed without an answer: is the service unreachable, or did the browser refuse to show this
   * page its answer (CORS)? A no-cors request for the client's own file (the one answer the service lets any
   * origin load: Cross-Origin-Resource-Policy: cross-origin) succeeds whenever the service is reachable.
   * The probe runs under the same time limit as the request it explains.
   * @param {AbortSignal} signal @returns {Promise<import('./collect.js').Failure>}
   */
  async function diagnose(signal) {
    try {
      await doFetch(`${base}/client/v1/collect.js`, { mode: 'no-cors', credentials: 'omit', cache: 'no-store', signal });
      return 'origin-not-allowed';
    } catch {
      return 'network';
    }
  }

  /** @param {import('./collect.js').Answer} a @param {number} attempt */
  const delayAfter = (a, attempt) =>
    a.retryAfterMs !== null ? Math.min(maxRetryAfterMs, a.retryAfterMs) * (1 + random() * 0.2) : backoffDelay(attempt, baseDelayMs, maxDelayMs, random);

  /**
   * Send until an answer that is final or the deadline; a CORS refusal is final for assign/load (not for answers).
   * @param {string} method @param {string} path @param {unknown} [body] @param {Record<string, string>} [headers]
   */
  async function sendPatiently(method, path, body, headers) {
    const deadline = now() + waitMs;
    for (let attempt = 0; ; attempt++) {
      const a = await send(method, path, body, headers);
      if (!isRetryable(a.status) || a.failure === 'origin-not-allowed') return a;
      const wait = delayAfter(a, attempt);
      if (now() + wait > deadline) return a;
      await sleep(wait);
    }
  }

  /** @param {import('./collect.js').Answer} a @param {string} what */
  function failure(a, what) {
    const origin = typeof location !== 'undefined' ? location.origin : 'this page';
    if (a.failure === 'origin-not-allowed') {
      return new CollectError('origin-not-allowed', `The survey service at ${base} does not accept requests from ${origin}: this page's origin is not among its allowed origins (CORS).`);
    }
    if (a.status === 0) return new CollectError('network', `The survey service at ${base} could not be reached (${a.failure ?? 'network'}) while ${what}.`);
    const problem = /** @type {import('./collect.js').Problem | null} */ (a.body);
    const kind = a.status === 401 || a.status === 403 ? 'key' : a.status === 409 ? 'closed' : a.status === 404 ? 'not-found' : 'refused';
    return new CollectError(kind, problem?.detail ?? `The survey service answered ${a.status} while ${what}.`, a.status, problem);
  }

  /** The stored record of a respondent, made (with its responseId) if new. @param {string} r */
  const ensureRecord = async (r) =>
    (await storage).update(recordKey(r), (cur) => cur ?? { respondent: r, responseId: newId(randomBytes), condition: null, pending: null, stored: false });

  async function load() {
    const a = await sendPatiently('GET', `${studyPath}/form`);
    if (a.status !== 200 || !a.body) throw failure(a, 'reading the form definition');
    definition = /** @type {import('./collect.js').FormDefinition} */ (a.body);
    return definition;
  }

  /** @param {string} [given] */
  async function assign(given) {
    const s = await storage;
    const r = given ?? (await s.update(`${ns}respondent`, (cur) => cur ?? newId(randomBytes)));
    let record = await ensureRecord(r);
    if (record.condition === null) {
      const a = await sendPatiently('POST', `${studyPath}/assignments`, { respondent: r });
      if ((a.status !== 200 && a.status !== 201) || !a.body) throw failure(a, 'assigning this respondent');
      const assigned = /** @type {{ condition: string }} */ (a.body).condition;
      record = await s.update(recordKey(r), (cur) => ({ ...cur, condition: cur.condition ?? assigned }));
    }
    respondent = r;
    condition = record.condition;
    return { respondent: r, condition: /** @type {string} */ (condition), responseId: record.responseId };
  }

  /**
   * Deliver one respondent's pending answer. `patient`: keep retrying (5xx, 429) until waitMs has passed.
   * @param {string} r @param {boolean} patient @param {number} attempt
   * @returns {Promise<import('./collect.js').SubmitResult>}
   */
  async function deliver(r, patient, attempt) {
    const s = await storage;
    const deadline = now() + (patient ? waitMs : 0);
    for (;;) {
      const record = await s.get(recordKey(r));
      if (!record || !record.pending) return { status: 'stored', responseId: record?.responseId ?? '', repeated: true, response: null };
      const pending = record.pending;
      const a = await send('POST', `${studyPath}/responses`, formBody(pending, key));
      if (a.status === 200 || a.status === 201) {
        await s.update(recordKey(r), (cur) => (cur && same(cur.pending, pending) ? { ...cur, pending: null, stored: true } : cur));
        /** @type {import('./collect.js').SubmitResult} */
        const done = { status: 'stored', responseId: pending.responseId, repeated: a.status === 200, response: /** @type {any} */ (a.body) };
        emit({ type: 'stored', respondent: r, responseId: pending.responseId, result: done });
        return done;
      }
      if (!isRetryable(a.status)) {
        await s.update(recordKey(r), (cur) => (cur && same(cur.pending, pending) ? { ...cur, pending: null } : cur));
        const problem = /** @type {import('./collect.js').Problem | null} */ (a.body);
        /** @type {import('./collect.js').SubmitResult} */
        const refused = { status: 'refused', responseId: pending.responseId, httpStatus: a.status, problem, errors: problem?.errors ?? [] };
        emit({ type: 'refused', respondent: r, responseId: pending.responseId, result: refused });
        return refused;
      }
      const wait = delayAfter(a, attempt++);
      const reason = a.status === 0 ? a.failure ?? 'network' : a.status === 429 ? 'rate-limited' : 'unavailable';
      if (a.status === 0 || now() + wait > deadline) {
        return { status: 'queued', responseId: pending.responseId, reason, retryInMs: wait };
      }
      await sleep(wait);
    }
  }

  /** @param {number} ms */
  function scheduleFlush(ms) {
    cancelTimer?.();
    cancelTimer = schedule(() => {
      cancelTimer = null;
      void flush();
    }, ms);
  }

  /** Send every queued answer of this study once; schedule the next try for those still waiting. */
  function flush() {
    flushing ??= (async () => {
      const s = await storage;
      const records = await s.entries(`${ns}r|`);
      /** @type {import('./collect.js').FlushResult} */
      const out = { stored: 0, refused: 0, queued: 0 };
      let next = Infinity;
      for (const record of records) {
        if (!record || !record.pending) continue;
        const result = await deliver(record.respondent, false, backgroundAttempt);
        if (result.status === 'queued') {
          out.queued++;
          next = Math.min(next, result.retryInMs);
        } else out[result.status === 'stored' ? 'stored' : 'refused']++;
      }
      if (out.queued > 0) {
        backgroundAttempt++;
        scheduleFlush(next);
      } else backgroundAttempt = 0;
      return out;
    })().finally(() => {
      flushing = null;
    });
    return flushing;
  }

  /**
   * @param {Record<string, unknown>} answers
   * @param {{ respondent?: string; condition?: string }} [opts]
   * @returns {Promise<import('./collect.js').SubmitResult>}
   */
  async function submit(answers, opts = {}) {
    const r = opts.respondent ?? respondent;
    if (r == null) throw new CollectError('not-assigned', 'Call assign() (or pass a respondent and a condition) before submit().');
    const checked = checkAnswers(definition, answers);
    if (checked.errors.length > 0) return { status: 'invalid', errors: checked.errors };
    const s = await storage;
    await ensureRecord(r);
    // Written before it is sent; an answer already waiting keeps its responseId (and is replaced by the newer one).
    const record = await s.update(recordKey(r), (cur) => {
      const c = opts.condition ?? cur.condition;
      if (c == null) return cur;
      return { ...cur, condition: cur.condition ?? c, pending: { responseId: cur.responseId, condition: c, respondent: r, values: checked.values, submittedAt: new Date(now()).toISOString() } };
    });
    if (!record.pending) throw new CollectError('not-assigned', 'No condition for this respondent: call assign() first or pass a condition.');
    emit({ type: 'queued', respondent: r, responseId: record.responseId });
    const result = await deliver(r, true, 0);
    if (result.status === 'queued') scheduleFlush(result.retryInMs);
    return result;
  }

  async function pending() {
    const records = await (await storage).entries(`${ns}r|`);
    return records.filter((x) => x && x.pending).length;
  }

  if (options.autoFlush !== false) {
    if (typeof addEventListener === 'function') addEventListener('online', () => void flush());
    void storage.then(() => flush()).catch(() => undefined);
  }

  return {
    version: VERSION,
    load,
    assign,
    submit,
    flush,
    pending,
    get definition() {
      return definition;
    },
    get respondent() {
      return respondent;
    },
    get condition() {
      return condition;
    },
    check: (answers) => checkAnswers(definition, answers),
    storageKind: async () => (await storage).kind,
    subscribe(listener) {
      listeners.add(listener);
      return () => listeners.delete(listener);
    },
  };
}
