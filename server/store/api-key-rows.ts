/**
 * The api_keys table as both engines read it (joined with the experiment's id), and the one mapping to the port's
 * record. A public form key is stored with scope 'ingest' and form = 1 (migration 0006 of each engine: the scope
 * CHECK predates form keys), and read back as scope 'form'.
 */
import type { ApiKeyRecord, Scope } from './types.js';

export interface KeyRow {
  id: number;
  hash: Buffer;
  scope: Exclude<Scope, 'form'>;
  /** 1 for a public form key. */
  form: number;
  experiment_id: number | null;
  experiment: string | null;
  label: string;
  origin: ApiKeyRecord['origin'];
  created_at: string;
  revoked_at: string | null;
  last_used_at: string | null;
}

export const SELECT_KEYS = `SELECT k.id, k.hash, k.scope, k.form, k.experiment_id, e.slug AS experiment, k.label, k.origin,
  k.created_at, k.revoked_at, k.last_used_at FROM api_keys k LEFT JOIN experiments e ON e.id = k.experiment_id`;

export function apiKeyRecord(row: KeyRow): ApiKeyRecord {
  return {
    id: row.id,
    scope: row.form === 1 ? 'form' : row.scope,
    experiment: row.experiment,
    experimentKey: row.experiment_id,
    label: row.label,
    origin: row.origin,
    createdAt: row.created_at,
    revokedAt: row.revoked_at,
    lastUsedAt: row.last_used_at,
  };
}
