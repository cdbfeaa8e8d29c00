/**
 * The audit_log table as both engines write and read it: the one column list, the values of a new row in that order,
 * and the one mapping from a stored row to the port's AuditEntry. Engines differ only in how `redacted` arrives
 * (SQLite 0/1, PostgreSQL a boolean) and in their placeholders.
 */
import type { AuditRecordInput } from './primary-outcome.js';
import type { AuditAction, AuditEntry } from './types.js';

export interface AuditRow {
  id: number;
  action: AuditAction;
  response_id: string | null;
  reason: string | null;
  count: number;
  api_key_id: number | null;
  at: string;
  data_version: number;
  redacted: number | boolean;
  from_measure: string | null;
  to_measure: string | null;
}

/** The columns a new audit row fills, in the order of auditInsertValues. */
export const AUDIT_INSERT_COLUMNS = 'experiment_id, action, response_id, reason, count, api_key_id, at, data_version, from_measure, to_measure';

/** The columns a reader selects, in the shape of AuditRow. */
export const AUDIT_COLUMNS = 'id, action, response_id, reason, count, api_key_id, at, data_version, redacted, from_measure, to_measure';

export type AuditInsertValues = [number, AuditAction, string | null, string | null, number, number | null, string, number, string | null, string | null];

export function auditInsertValues(entry: AuditRecordInput): AuditInsertValues {
  return [
    entry.experimentKey,
    entry.action,
    entry.responseId,
    entry.reason,
    entry.count,
    entry.apiKeyId,
    entry.at,
    entry.dataVersion,
    entry.fromMeasure ?? null,
    entry.toMeasure ?? null,
  ];
}

export function auditEntry(r: AuditRow): AuditEntry {
  return {
    id: r.id,
    action: r.action,
    responseId: r.response_id,
    reason: r.reason,
    count: r.count,
    apiKeyId: r.api_key_id,
    at: r.at,
    dataVersion: r.data_version,
    redacted: r.redacted === true || r.redacted === 1,
    fromMeasure: r.from_measure,
    toMeasure: r.to_measure,
  };
}
