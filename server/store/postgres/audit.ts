/**
 * The audit trail (PostgreSQL; table audit_log of migrations/postgres/0002_exclusions_audit.sql, with the
 * 'primary-change' action and its from_measure / to_measure columns of 0007). Rows are written by the repositories
 * inside the transaction that makes the change (responses.ts, experiments.ts), so a change and its audit row commit
 * together or not at all. Erasure rows hold only the count and the time; an erasure redacts the response_id of earlier
 * exclude/restore rows of the erased responses.
 */
import type { AuditRecordInput } from '../primary-outcome.js';
import type { AuditAction, AuditEntry, AuditRepository } from '../types.js';
import type { PostgresDatabase, Queryable } from './pool.js';

export async function recordAudit(c: Queryable, entry: AuditRecordInput): Promise<void> {
  await c.query(
    `INSERT INTO audit_log (experiment_id, action, response_id, reason, count, api_key_id, at, data_version, from_measure, to_measure)
     VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)`,
    [
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
    ],
  );
}

/** Remove the link between earlier audit rows and erased responses. */
export async function redactAudit(c: Queryable, experimentKey: number, responseIds: string[]): Promise<void> {
  if (responseIds.length === 0) return;
  await c.query(`UPDATE audit_log SET response_id = NULL, redacted = true WHERE experiment_id = $1 AND response_id = ANY($2::text[])`, [
    experimentKey,
    responseIds,
  ]);
}

interface AuditRow {
  id: number;
  action: AuditAction;
  response_id: string | null;
  reason: string | null;
  count: number;
  api_key_id: number | null;
  at: string;
  data_version: number;
  redacted: boolean;
  from_measure: string | null;
  to_measure: string | null;
}

export class PostgresAuditRepository implements AuditRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async list(experimentKey: number, limit = 1000): Promise<AuditEntry[]> {
    const r = await this.db.query<AuditRow>(
      `SELECT id, action, response_id, reason, count, api_key_id, at, data_version, redacted, from_measure, to_measure
       FROM audit_log WHERE experiment_id = $1 ORDER BY id DESC LIMIT $2`,
      [experimentKey, limit],
    );
    return r.rows.map((x) => ({
      id: x.id,
      action: x.action,
      responseId: x.response_id,
      reason: x.reason,
      count: x.count,
      apiKeyId: x.api_key_id,
      at: x.at,
      dataVersion: x.data_version,
      redacted: x.redacted,
      fromMeasure: x.from_measure,
      toMeasure: x.to_measure,
    }));
  }
}
