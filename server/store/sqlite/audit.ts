/**
 * The audit trail (table audit_log, migrations/sqlite/0002_exclusions_audit.sql): who excluded, restored or erased what,
 * when and why. Rows are written by the repositories inside the transaction that makes the change (see
 * AuditWriter, used by responses.ts), so a change and its audit row commit together or not at all.
 *
 * Erasure rows hold only the count and the time (and the key that did it): no respondent id, no response ids.
 * An erasure also redacts the response_id of earlier exclude/restore rows of the erased responses.
 */
import type { SqliteDatabase } from './open.js';
import type { AuditAction, AuditEntry, AuditRepository } from '../types.js';

interface AuditRow {
  id: number;
  action: AuditAction;
  response_id: string | null;
  reason: string | null;
  count: number;
  api_key_id: number | null;
  at: string;
  data_version: number;
  redacted: number;
}

/** Prepared statements that write audit rows; call them only inside a write transaction. */
export class AuditWriter {
  private readonly insert;
  private readonly redact;

  constructor(db: SqliteDatabase) {
    this.insert = db.prepare<[number, AuditAction, string | null, string | null, number, number | null, string, number]>(
      `INSERT INTO audit_log (experiment_id, action, response_id, reason, count, api_key_id, at, data_version)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.redact = db.prepare<[number, string]>(
      `UPDATE audit_log SET response_id = NULL, redacted = 1 WHERE experiment_id = ? AND response_id = ?`,
    );
  }

  record(entry: Omit<AuditEntry, 'id' | 'redacted'> & { experimentKey: number }): void {
    this.insert.run(entry.experimentKey, entry.action, entry.responseId, entry.reason, entry.count, entry.apiKeyId, entry.at, entry.dataVersion);
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
      `SELECT id, action, response_id, reason, count, api_key_id, at, data_version, redacted
       FROM audit_log WHERE experiment_id = ? ORDER BY id DESC LIMIT ?`,
    );
  }

  async list(experimentKey: number, limit = 1000): Promise<AuditEntry[]> {
    return this.listOf.all(experimentKey, limit).map((r) => ({
      id: r.id,
      action: r.action,
      responseId: r.response_id,
      reason: r.reason,
      count: r.count,
      apiKeyId: r.api_key_id,
      at: r.at,
      dataVersion: r.data_version,
      redacted: r.redacted === 1,
    }));
  }
}
