/**
 * Measure roles and the primary outcome.
 *
 * A measure's `role` says what it is for: "outcome" (the default; compared between conditions and part of the
 * adjusted family), "covariate" (asked before the treatment; adjusts comparisons, not compared unless asked) or
 * "process" (time spent, device type and the like: compared and shown, but never part of the family adjustment). The
 * role is part of the measure (stored with it, fixed when the experiment is created). At most one measure is
 * `primary: true`: the outcome the study was designed to test, shown first on the results page.
 *
 * The primary outcome lives in the experiment's options (no table change): `primaryMeasure` holds its id (absent:
 * none). A change of the primary outcome after answers exist (the experiment's dataVersion is above 0) is appended to
 * `primaryChanges` — who, when, from, to, and the dataVersion at the time — so the page can say "changed after data
 * collection began" and the record stays with the definition; the same change is written to the audit trail
 * (action 'primary-change'). Both are decided and written by the repository inside the update's transaction
 * (store/primary-outcome.ts): this file only says which measure the request makes primary.
 */
import type { ExperimentRecord, MeasureRole } from '../store/types.js';
import { storedPrimary, storedPrimaryChanges, type PrimaryChange } from '../store/primary-outcome.js';

export const MEASURE_ROLES: readonly MeasureRole[] = ['outcome', 'covariate', 'process'];
export type { MeasureRole, PrimaryChange };

export function roleOf(e: Pick<ExperimentRecord, 'measures'>, measureId: string): MeasureRole {
  return e.measures.find((m) => m.id === measureId)?.role ?? 'outcome';
}

export function primaryOf(e: Pick<ExperimentRecord, 'options'>): string | null {
  return storedPrimary(e.options);
}

export function primaryChangesOf(e: Pick<ExperimentRecord, 'options'>): PrimaryChange[] {
  return storedPrimaryChanges(e.options);
}

/** The options of a new definition from its measures' primary fields (at most one primary; checked by the schema). */
export function definitionRoleOptions(measures: readonly { id: string; primary?: boolean }[]): Record<string, unknown> {
  const primary = measures.find((m) => m.primary === true)?.id ?? null;
  return primary !== null ? { primaryMeasure: primary } : {};
}

/**
 * The primary outcome a PATCH of measures' primary fields asks for, or undefined when it leaves it as it is:
 * `primary: true` makes that measure the primary one, `primary: false` on the current primary leaves none.
 */
export function requestedPrimary(e: ExperimentRecord, measures: readonly { id: string; primary?: boolean }[]): string | null | undefined {
  const current = primaryOf(e);
  let next = current;
  for (const m of measures) {
    if (m.primary === true) next = m.id;
    else if (m.primary === false && next === m.id) next = null;
  }
  return next !== current ? next : undefined;
}
