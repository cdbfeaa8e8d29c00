/**
 * Ingest validation: from a parsed body (JSON or HTML form) to ValidResponse items, or to the complete list
 * of problems. Pure: no database; the caller stores the items and the rejected-value counters.
 *
 * Order of checks for one value (the first that fails gives the reason; one reason per value):
 *   not a number (string, boolean, object, unparseable form text) → not_a_number
 *   more than 40 characters                                      → too_many_digits
 *   not finite (1e999 → Infinity)                                → not_finite
 *   outside [min, max]                                           → out_of_range
 *   fractional on an integer measure                             → not_integer
 * A missing, null or (in a form) empty value is "not answered": an error only for a required measure, and not
 * counted as a rejected value. An unknown measure or condition is an error but has no counter.
 *
 * Idempotency content: SHA-256 over the canonical JSON of [condition, respondent, [[measure, value] … in
 * definition order]], with the weight appended ([…, weight]) when the response carries one (so the hashes of
 * unweighted responses are unchanged). submittedAt and responseId are not part of it, so a retry with a fresh
 * client timestamp is still the same response. The canonical text is written directly (canonicalContent: the exact
 * bytes JSON.stringify gives for that array, built while the values are checked) and hashed with one crypto.hash
 * call; tests/services/ingest/content-hash.test.ts compares it with JSON.stringify + createHash over random responses.
 *
 * The survey weight (top-level `weight`, form field `weight`; experiments with weights "optional" or "required"):
 * refused like an impossible value, in this order: sent although the experiment takes none → not_allowed; absent or
 * null where required → missing; then not a number → too many characters → not finite → not > 0 or above the
 * definition's maxWeight (out_of_range). Every refusal is counted per (experiment, reason).
 */
import { hash, randomUUID } from 'node:crypto';
import { z } from 'zod';
import type {
  ExperimentRecord,
  MeasureRecord,
  RejectedIncrement,
  RejectedWeightIncrement,
  RejectionReason,
  ValidResponse,
  WeightRejectionReason,
} from '../../store/types.js';
import { WEIGHT_FIELD, weightsOf } from '../../schemas/weights.js';
import { OverlongNumber } from '../../schemas/field-errors.js';
import { FormNumberFailure, parseFormNumber } from './numbers.js';
import { echoValue, formatPath, type FieldError } from '../../schemas/common.js';
import { BatchEnvelopeSchema, FORM_KEY_FIELD, FORM_RESERVED_FIELDS, RESPONSE_ID_PATTERN, ResponseInputSchema } from '../../schemas/responses.js';
import { zodFieldErrors } from '../../schemas/field-errors.js';

export interface CheckResult {
  valid: ValidResponse[];
  errors: FieldError[];
  rejected: RejectedIncrement[];
  /** Refused weights to count (absent: none). */
  rejectedWeights?: RejectedWeightIncrement[];
}

type WeightCheck = { ok: true; weight: number | null } | { ok: false; reason: WeightRejectionReason; error: Omit<FieldError, 'path'> };

/** Check a response's weight against the experiment's policy (see the header for the order of checks). */
export function checkWeight(experiment: ExperimentRecord, raw: unknown): WeightCheck {
  const policy = weightsOf(experiment.options);
  const absent = raw === undefined || raw === null;
  if (policy.weights === 'none') {
    if (absent) return { ok: true, weight: null };
    return { ok: false, reason: 'not_allowed', error: { message: 'is not accepted: this experiment takes no survey weights', value: echoValue(raw) } };
  }
  if (absent) {
    if (policy.weights === 'required') return { ok: false, reason: 'missing', error: { message: 'is required: this experiment needs a survey weight on every response' } };
    return { ok: true, weight: null };
  }
  const limit = { min: 0, max: policy.maxWeight };
  const asMeasure: MeasureRecord = { key: -1, id: WEIGHT_FIELD, label: WEIGHT_FIELD, min: -Infinity, max: Infinity, integer: false, required: false, position: -1, role: 'outcome' };
  const c = checkValue(asMeasure, raw);
  if (!c.ok) {
    const reason = c.reason === 'not_integer' ? 'not_a_number' : c.reason;
    return { ok: false, reason, error: c.error };
  }
  if (!(c.value > 0) || c.value > policy.maxWeight) {
    return {
      ok: false,
      reason: 'out_of_range',
      error: { message: `${c.value} is not a valid weight: a weight must be greater than 0 and at most ${policy.maxWeight}`, value: c.value, limit },
    };
  }
  return { ok: true, weight: c.value };
}

function weightOfItem(experiment: ExperimentRecord, raw: unknown, prefix: readonly PropertyKey[], out: CheckResult): WeightCheck {
  const c = checkWeight(experiment, raw);
  if (!c.ok) {
    out.errors.push({ path: formatPath([...prefix, WEIGHT_FIELD]), ...c.error });
    (out.rejectedWeights ??= []).push({ reason: c.reason, count: 1 });
  }
  return c;
}

type ValueCheck = { ok: true; value: number } | { ok: false; reason: RejectionReason; error: Omit<FieldError, 'path'> };

function typeName(v: unknown): string {
  if (Array.isArray(v)) return 'an array';
  if (v === null) return 'null';
  if (typeof v === 'object') return 'an object';
  if (typeof v === 'string') return 'a string';
  if (typeof v === 'boolean') return 'a boolean';
  return typeof v;
}

export function checkValue(measure: MeasureRecord, raw: unknown): ValueCheck {
  if (raw instanceof FormNumberFailure) {
    if (raw.reason === 'too_many_digits') {
      return { ok: false, reason: raw.reason, error: { message: 'has more than 40 characters', value: echoValue(raw.text) } };
    }
    if (raw.reason === 'not_finite') {
      return { ok: false, reason: raw.reason, error: { message: `"${raw.text}" is too large to be a finite number`, value: raw.text } };
    }
    return { ok: false, reason: 'not_a_number', error: { message: `"${echoValue(raw.text)}" is not a number`, value: echoValue(raw.text) } };
  }
  if (raw instanceof OverlongNumber) {
    return { ok: false, reason: 'too_many_digits', error: { message: 'is a number with more than 40 characters', value: raw.text } };
  }
  if (typeof raw !== 'number') {
    return { ok: false, reason: 'not_a_number', error: { message: `must be a number, not ${typeName(raw)}`, value: echoValue(raw) } };
  }
  if (!Number.isFinite(raw)) {
    return { ok: false, reason: 'not_finite', error: { message: 'is not a finite number', value: String(raw) } };
  }
  const value = raw === 0 ? 0 : raw; // -0 → 0
  if (value < measure.min || value > measure.max) {
    return {
      ok: false,
      reason: 'out_of_range',
      error: { message: `${value} is outside the scale from ${measure.min} to ${measure.max}`, value, limit: { min: measure.min, max: measure.max } },
    };
  }
  if (measure.integer && !Number.isInteger(value)) {
    return { ok: false, reason: 'not_integer', error: { message: `must be a whole number (got ${value})`, value } };
  }
  return { ok: true, value };
}

function listIds(ids: string[]): string {
  return ids.length <= 20 ? ids.join(', ') : `${ids.slice(0, 20).join(', ')}, …`;
}

/**
 * The canonical content text: exactly JSON.stringify([condition, respondent, [[measure, value] …], weight?]), written
 * from parts. `pairs` is the inner list without its brackets: `["m1",4],["m2",0.5]` (canonicalPair gives one).
 */
export function canonicalContent(condition: string, respondent: string | null, pairs: string, weight: number | null): string {
  const head = `[${JSON.stringify(condition)},${respondent === null ? 'null' : JSON.stringify(respondent)},[${pairs}]`;
  return weight === null ? `${head}]` : `${head},${numberJson(weight)}]`;
}

/** JSON text of a finite number: what JSON.stringify writes (String(n); -0 is written "0" by both). */
function numberJson(n: number): string {
  return String(n);
}

/** One `["measure",value]` pair of the canonical text; `measurePrefix` is `["measure",` (see lookupOf). */
export function canonicalPair(measurePrefix: string, value: number): string {
  return `${measurePrefix}${numberJson(value)}]`;
}

/** SHA-256 of a canonical content text (one crypto.hash call), as a view on the digest. */
export function hashCanonical(canonical: string): Uint8Array {
  const digest = hash('sha256', canonical, 'buffer');
  return new Uint8Array(digest.buffer, digest.byteOffset, digest.byteLength);
}

export function contentHash(condition: string, respondent: string | null, values: [string, number][], weight: number | null = null): Uint8Array {
  let pairs = '';
  for (const [measure, value] of values) pairs += (pairs.length === 0 ? '' : ',') + canonicalPair(`[${JSON.stringify(measure)},`, value);
  return hashCanonical(canonicalContent(condition, respondent, pairs, weight));
}

/** Conditions and measures of an experiment by id, made once per experiment record (records are not mutated). */
interface Lookup {
  conditions: Map<string, ExperimentRecord['conditions'][number]>;
  measures: Map<string, MeasureRecord>;
  /** `["measure",` per measure, in definition order: the start of its canonical pair. */
  measurePrefixes: string[];
}

const lookups = new WeakMap<ExperimentRecord, Lookup>();

function lookupOf(experiment: ExperimentRecord): Lookup {
  let l = lookups.get(experiment);
  if (!l) {
    l = {
      conditions: new Map(experiment.conditions.map((c) => [c.id, c])),
      measures: new Map(experiment.measures.map((m) => [m.id, m])),
      measurePrefixes: experiment.measures.map((m) => `[${JSON.stringify(m.id)},`),
    };
    lookups.set(experiment, l);
  }
  return l;
}

const NO_CONTROL_CHARS = /^[^\u0000-\u001f\u007f]+$/;

/**
 * The item itself when it is a plain object that ResponseInputSchema certainly accepts unchanged (known fields
 * only; responseId matching RESPONSE_ID_PATTERN; condition a string of at most 200 characters; respondent absent,
 * null or 1–256 characters without control characters; no submittedAt (its date-time rules stay with zod); values
 * a plain object). null means "ask zod", never "invalid". Equivalence with the schema is tested in
 * tests/server/performance-ingest.test.ts.
 */
export function plainlyValidShape(raw: unknown): z.infer<typeof ResponseInputSchema> | null {
  if (raw === null || typeof raw !== 'object' || Array.isArray(raw) || Object.getPrototypeOf(raw) !== Object.prototype) return null;
  const o = raw as Record<string, unknown>;
  for (const k in o) {
    if (k !== 'responseId' && k !== 'condition' && k !== 'respondent' && k !== 'values' && k !== 'weight') return null;
  }
  const { responseId, condition, respondent, values } = o;
  if (typeof condition !== 'string' || condition.length > 200) return null;
  if (responseId !== undefined && (typeof responseId !== 'string' || !RESPONSE_ID_PATTERN.test(responseId))) return null;
  if (respondent !== undefined && respondent !== null) {
    if (typeof respondent !== 'string' || respondent.length < 1 || respondent.length > 256 || !NO_CONTROL_CHARS.test(respondent)) return null;
  }
  if (values === null || typeof values !== 'object' || Array.isArray(values) || Object.getPrototypeOf(values) !== Object.prototype) return null;
  return o as z.infer<typeof ResponseInputSchema>;
}

/**
 * Check one raw item (already parsed JSON, or a form turned into the same shape by formToItem). Appends to
 * `out`; returns true when the item was valid.
 */
export function checkItem(experiment: ExperimentRecord, raw: unknown, prefix: readonly PropertyKey[], receivedAt: string, out: CheckResult): boolean {
  // The common case (a plain object whose fields are all plainly valid) skips zod; anything else, including every
  // invalid item, goes through the schema, which lists the problems.
  const fast = plainlyValidShape(raw);
  const shape = fast ? { ok: true as const, value: fast } : zodFieldErrors(ResponseInputSchema, raw, prefix);
  if (!shape.ok) {
    out.errors.push(...shape.errors);
    // Still check and count the values when they can be found (zod never looks inside them), so that every
    // bad value is listed and counted.
    const values = raw !== null && typeof raw === 'object' ? (raw as { values?: unknown }).values : undefined;
    if (values !== null && typeof values === 'object' && !Array.isArray(values)) {
      checkValues(experiment, values as Record<string, unknown>, prefix, out);
    }
    if (raw !== null && typeof raw === 'object' && !Array.isArray(raw)) weightOfItem(experiment, (raw as { weight?: unknown }).weight, prefix, out);
    return false;
  }
  const item = shape.value as z.infer<typeof ResponseInputSchema>;
  let ok = true;
  const condition = lookupOf(experiment).conditions.get(item.condition);
  if (!condition) {
    ok = false;
    out.errors.push({
      path: formatPath([...prefix, 'condition']),
      message: `is not a condition of this experiment (conditions: ${listIds(experiment.conditions.map((c) => c.id))})`,
      value: echoValue(item.condition),
    });
  }
  const checked = checkValues(experiment, item.values, prefix, out);
  const weight = weightOfItem(experiment, item.weight, prefix, out);
  if (!ok || checked === null || !weight.ok) return false;
  const respondent = item.respondent ?? null;
  out.valid.push({
    responseId: item.responseId ?? randomUUID(),
    generated: item.responseId === undefined,
    conditionKey: condition!.key,
    respondent,
    submittedAt: item.submittedAt === undefined ? receivedAt : new Date(item.submittedAt).toISOString(),
    values: checked.values,
    weight: weight.weight,
    contentHash: hashCanonical(canonicalContent(condition!.id, respondent, checked.pairs, weight.weight)),
  });
  return true;
}

/**
 * Check every value. When all are valid: measureKey → value in definition order, and the canonical pairs of the
 * content hash (canonicalPair, same order), built in the same pass; else null (errors and counters appended). No
 * allocation per value on the common path beyond the map entry and the text.
 */
function checkValues(
  experiment: ExperimentRecord,
  values: Record<string, unknown>,
  prefix: readonly PropertyKey[],
  out: CheckResult,
): { values: Map<number, number>; pairs: string } | null {
  let ok = true;
  const result = new Map<number, number>();
  let pairs = '';
  const lookup = lookupOf(experiment);
  const known = lookup.measures;
  for (const key in values) {
    if (!Object.prototype.hasOwnProperty.call(values, key) || known.has(key)) continue;
    ok = false;
    out.errors.push({
      path: formatPath([...prefix, 'values', key]),
      message: `is not a measure of this experiment (measures: ${listIds(experiment.measures.map((m) => m.id))})`,
    });
  }
  const measures = experiment.measures;
  for (let i = 0; i < measures.length; i++) {
    const m = measures[i];
    const raw = Object.prototype.hasOwnProperty.call(values, m.id) ? values[m.id] : undefined;
    if (raw === undefined || raw === null) {
      if (m.required) {
        ok = false;
        out.errors.push({ path: formatPath([...prefix, 'values', m.id]), message: 'is required' });
      }
      continue;
    }
    let value: number;
    if (typeof raw === 'number' && raw >= m.min && raw <= m.max && (!m.integer || Number.isInteger(raw))) {
      // Fast path of checkValue for a plainly valid number (finite, because it lies within [min, max]).
      value = raw === 0 ? 0 : raw;
    } else {
      const c = checkValue(m, raw);
      if (!c.ok) {
        ok = false;
        // The path is only built for an error (a batch of 10,000 valid items would build 30,000 strings for nothing).
        out.errors.push({ path: formatPath([...prefix, 'values', m.id]), ...c.error });
        out.rejected.push({ measureKey: m.key, reason: c.reason, count: 1 });
        continue;
      }
      value = c.value;
    }
    if (!ok) continue;
    result.set(m.key, value);
    pairs += pairs.length === 0 ? canonicalPair(lookup.measurePrefixes[i], value) : `,${canonicalPair(lookup.measurePrefixes[i], value)}`;
  }
  return ok ? { values: result, pairs } : null;
}

/** Check a single JSON or form response body. */
export function checkSingle(experiment: ExperimentRecord, body: unknown, receivedAt: string): CheckResult {
  const out: CheckResult = { valid: [], errors: [], rejected: [] };
  checkItem(experiment, body, [], receivedAt, out);
  return out;
}

/** Check a batch body: the envelope, then every item (all problems listed, by index). */
export function checkBatch(experiment: ExperimentRecord, body: unknown, receivedAt: string): CheckResult {
  const out: CheckResult = { valid: [], errors: [], rejected: [] };
  const envelope = zodFieldErrors(BatchEnvelopeSchema, body);
  if (!envelope.ok) {
    out.errors.push(...envelope.errors);
    return out;
  }
  const items = (envelope.value as { responses: unknown[] }).responses;
  for (let i = 0; i < items.length; i++) checkItem(experiment, items[i], ['responses', i], receivedAt, out);
  return out;
}

/**
 * Turn parsed form fields into the JSON item shape. Measure fields are parsed strictly (numbers.ts); an empty
 * field means "not answered"; empty responseId/respondent/submittedAt fields are ignored; the ingest key field
 * is taken out. A field sent twice is an error.
 */
export function formToItem(fields: Record<string, unknown>, options: { weightField?: boolean } = {}): { item: Record<string, unknown>; errors: FieldError[] } {
  const errors: FieldError[] = [];
  const item: Record<string, unknown> = {};
  const values: Record<string, unknown> = {};
  for (const [name, raw] of Object.entries(fields)) {
    if (name === FORM_KEY_FIELD) continue;
    if (options.weightField && name === WEIGHT_FIELD) {
      if (typeof raw !== 'string') errors.push({ path: WEIGHT_FIELD, message: 'was sent more than once' });
      else if (raw !== '') item.weight = parseFormNumber(raw);
      continue;
    }
    const isReserved = (FORM_RESERVED_FIELDS as readonly string[]).includes(name);
    const path = isReserved ? name : formatPath(['values', name]);
    if (typeof raw !== 'string') {
      errors.push({ path, message: 'was sent more than once' });
      continue;
    }
    if (isReserved) {
      if (raw !== '' || name === 'condition') item[name] = raw;
    } else {
      values[name] = raw === '' ? undefined : parseFormNumber(raw);
    }
  }
  item.values = values;
  return { item, errors };
}
