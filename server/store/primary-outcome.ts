/**
 * The primary outcome as both engines store it: in the experiment's options, `primaryMeasure` holds the measure id
 * (absent: none) and `primaryChanges` lists the changes made after answers existed. A change once the experiment's
 * dataVersion is above 0 is also written to the audit trail (action 'primary-change', migration 0007) in the same
 * transaction as the definition update.
 *
 * primaryOutcomeChange() decides, from the definition as read INSIDE the writing transaction (so a response that
 * arrives between the request's read and the update is taken into account), what to write: the options patch and,
 * when the change comes after data collection began, the audit entry. Both repositories call it; it writes nothing.
 */
import type { AuditEntry, ExperimentPatch, ExperimentRecord } from './types.js';

export const PRIMARY_MEASURE_OPTION = 'primaryMeasure';
export const PRIMARY_CHANGES_OPTION = 'primaryChanges';

/** One entry of options.primaryChanges. */
export interface PrimaryChange {
  from: string | null;
  to: string | null;
  at: string;
  /** The experiment's dataVersion when the primary outcome changed (> 0: after data collection began). */
  dataVersion: number;
  apiKeyId: number | null;
}

/** What an audit writer of either engine takes: an entry without id and redaction, measures only for primary-change. */
export type AuditRecordInput = Omit<AuditEntry, 'id' | 'redacted' | 'fromMeasure' | 'toMeasure'> & {
  experimentKey: number;
  fromMeasure?: string | null;
  toMeasure?: string | null;
};

export function storedPrimary(options: Record<string, unknown>): string | null {
  const p = options[PRIMARY_MEASURE_OPTION];
  return typeof p === 'string' ? p : null;
}

export function storedPrimaryChanges(options: Record<string, unknown>): PrimaryChange[] {
  const list = options[PRIMARY_CHANGES_OPTION];
  return Array.isArray(list) ? (list as PrimaryChange[]) : [];
}

/**
 * The options keys to set (a null value removes the key) and the audit entry to write for `requested`, or null
 * when the primary outcome stays as it is. The audit entry's count is the number of stored responses (excluded
 * ones included) and its dataVersion the experiment's, both as read in the transaction.
 */
export function primaryOutcomeChange(
  current: ExperimentRecord,
  requested: ExperimentPatch['primary'],
  now: string,
): { options: Record<string, unknown>; audit: AuditRecordInput | null } | null {
  if (requested === undefined) return null;
  const from = storedPrimary(current.options);
  const to = requested.measure;
  if (from === to) return null;
  const options: Record<string, unknown> = { [PRIMARY_MEASURE_OPTION]: to };
  if (current.dataVersion === 0) return { options, audit: null };
  const change: PrimaryChange = { from, to, at: now, dataVersion: current.dataVersion, apiKeyId: requested.apiKeyId };
  options[PRIMARY_CHANGES_OPTION] = [...storedPrimaryChanges(current.options), change];
  const stored = current.conditions.reduce((sum, c) => sum + c.responses, 0);
  return {
    options,
    audit: {
      experimentKey: current.key,
      action: 'primary-change',
      responseId: null,
      reason: null,
      count: stored,
      apiKeyId: requested.apiKeyId,
      at: now,
      dataVersion: current.dataVersion,
      fromMeasure: from,
      toMeasure: to,
    },
  };
}
