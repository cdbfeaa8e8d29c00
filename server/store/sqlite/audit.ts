/**
 * The audit trail (table audit_log, migrations/sqlite/0002_exclusions_audit.sql, rebuilt by 0007): who excluded,
 * restored or erased what, when and why, and who changed the primary outcome after answers existed (from which
 * measure to which). Rows are written by the repositories inside the transaction that makes the change (see
 * AuditWriter, used by responses.ts and experiments.ts), so a change and its audit row commit together or not at all.
 *
 * Erasure rows hold only the count and the time (and the key that did it): no respondent id, no response ids.
 * An erasure also redacts the response_id of earlier exclude/restore rows of the erased responses.
 */
import type { SqliteDatabase } from './open.js';
import { AUDIT_COLUMNS, AUDIT_INSERT_COLUMNS, auditEntry, auditInsertValues, type AuditInsertValues, type AuditRow } from '../audit-rows.js';
import type { AuditRecordInput } from '../primary-outcome.js';
import type { AuditEntry, AuditRepository } from '../types.js';

/** Prepared statements that write audit rows; call them only inside a write transaction. */
export class AuditWriter {
  private readonly insert;
  private readonly redact;

  constructor(db: SqliteDatabase) {
    this.insert = db.prepare<AuditInsertValues>(`INSERT INTO audit_log (${AUDIT_INSERT_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`);
    this.redact = db.prepare<[number, string]>(
      `UPDATE audit_log SET response_id = NULL, redacted = 1 WHERE experiment_id = ? AND response_id = ?`,
    );
  }

  record(entry: AuditRecordInput): void {
    this.insert.run(...auditInsertValues(entry));
  }

  /** Remove the link between earlier audit rows and an erased response. */
  redactResponse(experimentKey: number, responseId: string): void {
    this.redact.run(experimentKey, responseId);
  }
}

export class SqliteAuditRepository implements AuditRepository {
  private readonly listOf;

  constructor(db: SqliteDatabase) {
    this.listOf = db.prepare<[number, number], AuditRow>(
      `SELECT ${AUDIT_COLUMNS} FROM audit_log WHERE experiment_id = ? ORDER BY id DESC LIMIT ?`,
    );
  }

  async list(experimentKey: number, limit = 1000): Promise<AuditEntry[]> {
    return this.listOf.all(experimentKey, limit).map(auditEntry);
  }
}
