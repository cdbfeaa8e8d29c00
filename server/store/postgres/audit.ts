/**
 * The audit trail (PostgreSQL; table audit_log of migrations/postgres/0002_exclusions_audit.sql, with the
 * 'primary-change' action and its from_measure / to_measure columns of 0007). Rows are written by the repositories
 * inside the transaction that makes the change (responses.ts, experiments.ts), so a change and its audit row commit
 * together or not at all. Erasure rows hold only the count and the time; an erasure redacts the response_id of earlier
 * exclude/restore rows of the erased responses.
 */
import { AUDIT_COLUMNS, AUDIT_INSERT_COLUMNS, auditEntry, auditInsertValues, type AuditRow } from '../audit-rows.js';
import type { AuditRecordInput } from '../primary-outcome.js';
import type { AuditEntry, AuditRepository } from '../types.js';
import type { PostgresDatabase, Queryable } from './pool.js';

export async function recordAudit(c: Queryable, entry: AuditRecordInput): Promise<void> {
  await c.query(`INSERT INTO audit_log (${AUDIT_INSERT_COLUMNS}) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)`, auditInsertValues(entry));
}

/** Remove the link between earlier audit rows and erased responses. */
export async function redactAudit(c: Queryable, experimentKey: number, responseIds: string[]): Promise<void> {
  if (responseIds.length === 0) return;
  await c.query(`UPDATE audit_log SET response_id = NULL, redacted = true WHERE experiment_id = $1 AND response_id = ANY($2::text[])`, [
    experimentKey,
    responseIds,
  ]);
}

export class PostgresAuditRepository implements AuditRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async list(experimentKey: number, limit = 1000): Promise<AuditEntry[]> {
    const r = await this.db.query<AuditRow>(`SELECT ${AUDIT_COLUMNS} FROM audit_log WHERE experiment_id = $1 ORDER BY id DESC LIMIT $2`, [
      experimentKey,
      limit,
    ]);
    return r.rows.map(auditEntry);
  }
}
