/**
 * One stored response as both engines read it (the responses row with its condition's slug; values apart), and the
 * two shapes the port gives it: a StoredResponse (getStored) and an ExportRow (the export's pages).
 */
import type { ExportRow, StoredResponse } from './types.js';

export interface StoredResponseRow {
  id: number;
  response_id: string;
  condition: string;
  respondent: string | null;
  submitted_at: string;
  received_at: string;
  excluded: number;
  excluded_reason: string | null;
  weight: number | null;
}

/** The columns of a StoredResponseRow, from `responses r JOIN conditions c ON c.id = r.condition_id`. */
export const STORED_RESPONSE_COLUMNS =
  'r.id, r.response_id, c.slug AS condition, r.respondent, r.submitted_at, r.received_at, r.excluded, r.excluded_reason, r.weight';

export function storedResponse(row: StoredResponseRow, values: Record<string, number>): StoredResponse {
  return {
    responseId: row.response_id,
    condition: row.condition,
    respondent: row.respondent,
    values,
    weight: row.weight,
    submittedAt: row.submitted_at,
    receivedAt: row.received_at,
    excluded: row.excluded === 1,
    excludedReason: row.excluded_reason,
  };
}

/** An export row with `width` value slots, all null until the caller fills them. */
export function exportRow(row: StoredResponseRow, width: number): ExportRow {
  return {
    responseId: row.response_id,
    condition: row.condition,
    respondent: row.respondent,
    submittedAt: row.submitted_at,
    receivedAt: row.received_at,
    excluded: row.excluded === 1,
    excludedReason: row.excluded_reason,
    weight: row.weight,
    values: new Array<number | null>(width).fill(null),
  };
}
