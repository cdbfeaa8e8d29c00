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
 * collection began" and the record stays with the definition.
 */
import type { ExperimentRecord, MeasureRole } from '../store/types.js';

export const MEASURE_ROLES: readonly MeasureRole[] = ['outcome', 'covariate', 'process'];
export type { MeasureRole };

export interface PrimaryChange {
  from: string | null;
  to: string | null;
  at: string;
  dataVersion: number;
  apiKeyId: number | null;
}

export function roleOf(e: Pick<ExperimentRecord, 'measures'>, measureId: string): MeasureRole {
  return e.measures.find((m) => m.id === measureId)?.role ?? 'outcome';
}

export function primaryOf(e: Pick<ExperimentRecord, 'options'>): string | null {
  const p = e.options.primaryMeasure;
  return typeof p === 'string' ? p : null;
}

export function primaryChangesOf(e: Pick<ExperimentRecord, 'options'>): PrimaryChange[] {
  return Array.isArray(e.options.primaryChanges) ? (e.options.primaryChanges as PrimaryChange[]) : [];
}

/** The options of a new definition from its measures' primary fields (at most one primary; checked by the schema). */
export function definitionRoleOptions(measures: readonly { id: string; primary?: boolean }[]): Record<string, unknown> {
  const primary = measures.find((m) => m.primary === true)?.id ?? null;
  return primary !== null ? { primaryMeasure: primary } : {};
}

/**
 * The options patch for a PATCH of measures' primary fields (empty when nothing changes): `primary: true` makes that
 * measure the primary one, `primary: false` on the current primary leaves none. A primary change once answers exist
 * appends to primaryChanges.
 */
export function patchRoleOptions(
  e: ExperimentRecord,
  measures: readonly { id: string; primary?: boolean }[],
  now: string,
  apiKeyId: number | null,
): Record<string, unknown> {
  const out: Record<string, unknown> = {};
  const current = primaryOf(e);
  let next = current;
  for (const m of measures) {
    if (m.primary === true) next = m.id;
    else if (m.primary === false && next === m.id) next = null;
  }
  if (next !== current) {
    out.primaryMeasure = next;
    if (e.dataVersion > 0) {
      out.primaryChanges = [...primaryChangesOf(e), { from: current, to: next, at: now, dataVersion: e.dataVersion, apiKeyId }];
    }
  }
  return out;
}
