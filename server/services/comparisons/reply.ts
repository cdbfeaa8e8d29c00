/** The reply of a comparison (ids, dataVersion, statistics, flags, monitoring) and the flags' context from a snapshot. */
import { type FlagContext, type FlagThresholds } from '../../../stats/flags.js';
import type { ConditionRecord, MeasureSnapshot } from '../../store/types.js';
import { type CompareResult } from './worker-pool.js';
import { computeMonitoring } from '../monitoring/interim.js';
import { type ComparisonTarget } from '../targets.js';
import { type ComparisonBody } from '../../schemas/comparisons.js';
import type { WeightedBlock } from '../../schemas/weighted.js';
import type { FlaggedAnswers } from './flagged-answers.js';

export const REJECTION_GROUPS: Record<string, 'out_of_range' | 'not_integer' | 'not_a_number'> = {
  out_of_range: 'out_of_range',
  not_integer: 'not_integer',
  not_a_number: 'not_a_number',
  not_finite: 'not_a_number',
  too_many_digits: 'not_a_number',
};

/** The reply of one comparison: the ids, the dataVersion, the statistics and flags, and the monitoring block. */
export function comparisonBody(
  ids: { experiment: string; measure: string; a: string; b: string },
  dataVersion: number,
  { cmp, flags, sensitivity }: CompareResult,
  monitoring: Awaited<ReturnType<typeof computeMonitoring>> | null,
  extras: { weighted?: WeightedBlock | null; flaggedAnswers?: FlaggedAnswers | null } = {},
): ComparisonBody {
  return {
    experiment: ids.experiment,
    measure: ids.measure,
    a: ids.a,
    b: ids.b,
    dataVersion,
    computedAt: new Date().toISOString(),
    groups: cmp.groups,
    welch: cmp.welch,
    student: cmp.student,
    mannWhitney: cmp.mannWhitney,
    hodgesLehmann: cmp.hodgesLehmann,
    effectSizes: cmp.effectSizes,
    robust: cmp.robust,
    flags: flags as ComparisonBody['flags'],
    monitoring: (monitoring ?? null) as ComparisonBody['monitoring'],
    equivalence: null,
    weighted: extras.weighted ?? null,
    sensitivity: (sensitivity ?? null) as ComparisonBody['sensitivity'],
    flaggedAnswers: extras.flaggedAnswers ?? null,
  };
}

/** The flags' context from the experiment and the snapshot (all data-dependent parts from the snapshot). */
export function flagContext(t: ComparisonTarget, snapshot: MeasureSnapshot, includeExcluded: boolean): FlagContext {
  const { experiment: e, measure: m } = t;
  const rejected: Record<string, number> = {};
  for (const r of snapshot.rejected) {
    const group = REJECTION_GROUPS[r.reason] ?? r.reason;
    rejected[group] = (rejected[group] ?? 0) + r.count;
  }
  const counters = new Map(snapshot.conditions.map((c) => [c.key, c]));
  const observed = e.conditions.map((c) => {
    const k = counters.get(c.key);
    return k ? k.responses - k.excluded : 0;
  });
  const allocation = e.options.allocation as Record<string, number> | null | undefined;
  const excludedOf = (c: ConditionRecord): number => counters.get(c.key)?.excluded ?? 0;
  return {
    alpha: e.alpha,
    labels: { a: t.a.label, b: t.b.label },
    scale: { min: m.min, max: m.max, integer: m.integer },
    rejected,
    plannedPerCondition: e.plannedPerCondition,
    allocation: {
      conditions: e.conditions.map((c) => c.label),
      observed,
      ...(allocation ? { weights: e.conditions.map((c) => allocation[c.id] ?? 1) } : {}),
    },
    excludedCount: includeExcluded ? 0 : excludedOf(t.a) + excludedOf(t.b),
    thresholds: (e.options.flagThresholds as Partial<FlagThresholds> | null | undefined) ?? undefined,
  };
}
