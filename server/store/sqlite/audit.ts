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
import type { AuditRecordInput } from '../primary-outcome.js';
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
  from_measure: string | null;
  to_measure: string | null;
}

/** Prepared statements that write audit rows; call them only inside a write transaction. */
export class AuditWriter {
  private readonly insert;
  private readonly redact;

  constructor(db: SqliteDatabase) {
    this.insert = db.prepare<[number, AuditAction, string | null, string | null, number, number | null, string, number, string | null, string | null]>(
      `INSERT INTO audit_log (experiment_id, action, response_id, reason, count, api_key_id, at, data_version, from_measure, to_measure)
       VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
    );
    this.redact = db.prepare<[number, string]>(
      `UPDATE audit_log SET response_id = NULL, redacted = 1 WHERE experiment_id = ? AND response_id = ?`,
    );
  }

  record(entry: AuditRecordInput): void {
    this.insert.run(
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
    );
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
      `SELECT id, action, response_id, reason, count, api_key_id, at, data_version, redacted, from_measure, to_measure
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
      fromMeasure: r.from_measure,
      toMeasure: r.to_measure,
    }));
  }
}
