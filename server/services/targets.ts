/**
 * What a request is about, resolved once for every route and use case: an experiment by its id (404), a measure
 * of it (404), and an ordered pair of its conditions (field errors), plus the targets of a comparison family.
 *
 * Two routes answer a bad pair differently, and their replies are part of the API: the comparison routes default a
 * missing a or b only when the experiment has exactly two conditions and list the conditions in the message; the
 * interim-look routes default to the first two conditions in definition order and keep the short message. Both go
 * through resolvePair below with their PairRule; the rule of which condition is which lives only here.
 */
import { ProblemError } from '../errors.js';
import type { FieldError } from '../schemas/common.js';
import type { ConditionRecord, ExperimentRecord, MeasureRecord, Store } from '../store/types.js';

/** A measure and an ordered pair of conditions of one experiment. */
export interface ComparisonTarget {
  experiment: ExperimentRecord;
  measure: MeasureRecord;
  a: ConditionRecord;
  b: ConditionRecord;
}

/** An id as shown in a message: JSON-quoted, cut at `max` characters. */
export function quoteId(s: string, max = 80): string {
  return JSON.stringify(s.length > max ? `${s.slice(0, max)}…` : s);
}

export function experimentNotFound(id: string): ProblemError {
  return new ProblemError('not-found', `There is no experiment ${quoteId(id)}.`);
}

/** The experiment with this id (slug), or a 404 problem. */
export async function loadExperiment(store: Store, id: string): Promise<ExperimentRecord> {
  const e = await store.experiments.getBySlug(id);
  if (!e) throw experimentNotFound(id);
  return e;
}

/** The measure with this id, or a 404 problem (`listMeasures`: the detail names the experiment's measures). */
export function resolveMeasure(experiment: ExperimentRecord, measureId: string, options: { listMeasures?: boolean } = { listMeasures: true }): MeasureRecord {
  const m = experiment.measures.find((x) => x.id === measureId);
  if (!m) {
    const list = options.listMeasures ? `; its measures are ${experiment.measures.map((x) => x.id).join(', ')}` : '';
    throw new ProblemError('not-found', `Experiment ${experiment.id} has no measure ${quoteId(measureId)}${list}.`);
  }
  return m;
}

/** How a route fills in and reports the pair (see the header). */
export interface PairRule {
  /** 'when-two': a missing a or b is the other condition only when there are exactly two; 'first-two': a = first, b = second. */
  defaults: 'when-two' | 'first-two';
  /** Name the experiment and its conditions in the message about an unknown id (else the short message). */
  listConditions: boolean;
}

export const COMPARISON_PAIR: PairRule = Object.freeze({ defaults: 'when-two', listConditions: true });
export const LOOK_PAIR: PairRule = Object.freeze({ defaults: 'first-two', listConditions: false });

/** The ordered pair (a, b), or every field error. Unknown ids, a missing one that has no default, and a = b are errors. */
export function resolvePair(
  experiment: ExperimentRecord,
  a: string | undefined,
  b: string | undefined,
  rule: PairRule = COMPARISON_PAIR,
): { ok: true; pair: [ConditionRecord, ConditionRecord] } | { ok: false; errors: FieldError[] } {
  const all = experiment.conditions;
  const ids = all.map((c) => c.id).join(', ');
  const errors: FieldError[] = [];
  const find = (name: 'a' | 'b', id: string | undefined): ConditionRecord | null => {
    if (id === undefined) return null;
    const c = all.find((x) => x.id === id);
    if (!c) {
      errors.push(
        rule.listConditions
          ? { path: name, message: `is not a condition of experiment ${experiment.id} (${ids})`, value: id }
          : { path: name, message: 'is not a condition of this experiment', value: id.length > 100 ? `${id.slice(0, 100)}…` : id },
      );
    }
    return c ?? null;
  };
  let ca = find('a', a);
  let cb = find('b', b);
  if (errors.length === 0) {
    if (rule.defaults === 'first-two') {
      if (a === undefined) ca = all[0] ?? null;
      if (b === undefined) cb = all[1] ?? null;
    } else if (all.length === 2) {
      if (!ca) ca = all.find((c) => c !== cb) ?? null;
      if (!cb) cb = all.find((c) => c !== ca) ?? null;
    }
    if (a === undefined && !ca) errors.push({ path: 'a', message: `is required: experiment ${experiment.id} has ${all.length} conditions (${ids})` });
    if (b === undefined && !cb) errors.push({ path: 'b', message: `is required: experiment ${experiment.id} has ${all.length} conditions (${ids})` });
  }
  if (errors.length === 0 && ca && cb && ca.key === cb.key) errors.push({ path: 'b', message: 'must differ from a', value: b ?? cb.id });
  if (errors.length > 0 || !ca || !cb) return { ok: false, errors };
  return { ok: true, pair: [ca, cb] };
}

/** The pair for a comparison route, or 422 validation-failed with every field error. */
export function comparisonPair(experiment: ExperimentRecord, a: string | undefined, b: string | undefined): [ConditionRecord, ConditionRecord] {
  const r = resolvePair(experiment, a, b, COMPARISON_PAIR);
  if (!r.ok) throw new ProblemError('validation-failed', `The query string does not name two different conditions to compare (a and b).`, { errors: r.errors });
  return r.pair;
}

/**
 * The targets of a family: every outcome measure (definition order; covariates too with `includeCovariates`) × every
 * pair, in that order.
 */
export function familyTargets(experiment: ExperimentRecord, pairs: 'first' | 'all', includeCovariates = false): ComparisonTarget[] {
  const out: ComparisonTarget[] = [];
  const measures = includeCovariates ? experiment.measures : experiment.measures.filter((m) => m.role !== 'covariate');
  for (const measure of measures) for (const [a, b] of familyPairs(experiment, pairs)) out.push({ experiment, measure, a, b });
  return out;
}

/** The pairs of a family: the first two conditions, or every pair (i < j) in definition order. */
export function familyPairs(experiment: ExperimentRecord, pairs: 'first' | 'all'): [ConditionRecord, ConditionRecord][] {
  const c = experiment.conditions;
  if (pairs === 'first') return [[c[0], c[1]]];
  const out: [ConditionRecord, ConditionRecord][] = [];
  for (let i = 0; i < c.length; i++) for (let j = i + 1; j < c.length; j++) out.push([c[i], c[j]]);
  return out;
}
