/**
 * API keys (PostgreSQL). Only SHA-256 hashes of secrets are stored. syncEnvironmentKey runs under a transaction
 * advisory lock, so two processes starting at once with the same SPLITBALLOT_ADMIN_KEY do not both insert it.
 */
import type { ApiKeyRecord, ApiKeyRepository, NewApiKey } from '../types.js';
import { apiKeyRecord as toRecord, SELECT_KEYS, type KeyRow } from '../api-key-rows.js';
import { toBuffer, type PostgresDatabase, type PreparedStatement } from './pool.js';

/** Advisory lock (two-int form) namespaces of this store. */
export const LOCK_NAMESPACE = { environmentKey: 0x5342_0001, assignment: 0x5342_0002 } as const;

const KEY_BY_HASH: PreparedStatement = { name: 'sb_key_by_hash', text: `${SELECT_KEYS} WHERE k.hash = $1` };

export class PostgresApiKeyRepository implements ApiKeyRepository {
  constructor(private readonly db: PostgresDatabase) {}

  async create(key: NewApiKey): Promise<ApiKeyRecord> {
    return this.db.write(async (c) => {
      const r = await c.query<{ id: number }>(
        `INSERT INTO api_keys (hash, scope, form, experiment_id, label, origin, created_at) VALUES ($1, $2, $3, $4, $5, $6, $7) RETURNING id`,
        [toBuffer(key.hash), key.scope === 'form' ? 'ingest' : key.scope, key.scope === 'form' ? 1 : 0, key.experimentKey, key.label, key.origin, key.createdAt],
      );
      const row = (await c.query<KeyRow>(`${SELECT_KEYS} WHERE k.id = $1`, [r.rows[0].id])).rows[0];
      return toRecord(row);
    });
  }

  async findByHash(hash: Uint8Array): Promise<(ApiKeyRecord & { hash: Uint8Array }) | null> {
    // Every authenticated request runs this: one prepared statement (pool.ts PreparedStatement).
    const row = (await this.db.prepared<KeyRow>(KEY_BY_HASH, [toBuffer(hash)])).rows[0];
    return row ? { ...toRecord(row), hash: new Uint8Array(row.hash) } : null;
  }

  async list(): Promise<ApiKeyRecord[]> {
    return (await this.db.query<KeyRow>(`${SELECT_KEYS} ORDER BY k.id`)).rows.map(toRecord);
  }

  async revoke(id: number, now: string): Promise<'revoked' | 'already-revoked' | 'not-found'> {
    return this.db.write(async (c) => {
      const row = (await c.query<{ revoked_at: string | null }>(`SELECT revoked_at FROM api_keys WHERE id = $1 FOR UPDATE`, [id])).rows[0];
      if (!row) return 'not-found';
      if (row.revoked_at !== null) return 'already-revoked';
      await c.query(`UPDATE api_keys SET revoked_at = $1 WHERE id = $2`, [now, id]);
      return 'revoked';
    });
  }

  async touch(id: number, now: string): Promise<void> {
    await this.db.query(`UPDATE api_keys SET last_used_at = $1 WHERE id = $2`, [now, id]);
  }

  async countActiveAdmin(): Promise<number> {
    const r = await this.db.query<{ n: number }>(
      `SELECT count(*) AS n FROM api_keys WHERE scope = 'admin' AND experiment_id IS NULL AND revoked_at IS NULL`,
    );
    return r.rows[0].n;
  }

  async syncEnvironmentKey(hash: Uint8Array | null, now: string): Promise<void> {
    const wanted = hash === null ? null : toBuffer(hash);
    await this.db.write(async (c) => {
      await c.query(`SELECT pg_advisory_xact_lock($1, 0)`, [LOCK_NAMESPACE.environmentKey]);
      let present = false;
      const env = (await c.query<KeyRow>(`${SELECT_KEYS} WHERE k.origin = 'environment' AND k.revoked_at IS NULL`)).rows;
      for (const row of env) {
        if (wanted !== null && Buffer.compare(row.hash, wanted) === 0) present = true;
        else await c.query(`UPDATE api_keys SET revoked_at = $1 WHERE id = $2 AND revoked_at IS NULL`, [now, row.id]);
      }
      if (wanted !== null && !present) {
        const existing = (await c.query<{ id: number }>(`SELECT id FROM api_keys WHERE hash = $1`, [wanted])).rows[0];
        if (existing) {
          // The same secret was used before (revoked) or exists as another key: reinstate it as the environment key.
          await c.query(`UPDATE api_keys SET revoked_at = NULL, scope = 'admin', form = 0, experiment_id = NULL, origin = 'environment' WHERE id = $1`, [existing.id]);
        } else {
          await c.query(`INSERT INTO api_keys (hash, scope, experiment_id, label, origin, created_at) VALUES ($1, 'admin', NULL, 'SPLITBALLOT_ADMIN_KEY', 'environment', $2)`, [
            wanted,
            now,
          ]);
        }
      }
    });
  }
}
