/**
 * API keys (SQLite). Only SHA-256 hashes of secrets are stored; see server/http/auth.ts for how secrets are made
 * and compared.
 */
import type { SqliteDatabase } from './open.js';
import type { ApiKeyRecord, ApiKeyRepository, NewApiKey, Scope } from '../types.js';
import { apiKeyRecord as toRecord, SELECT_KEYS, type KeyRow } from '../api-key-rows.js';

export class SqliteApiKeyRepository implements ApiKeyRepository {
  private readonly insert;
  private readonly byId;
  private readonly byHash;
  private readonly all;
  private readonly revokeStmt;
  private readonly touchStmt;
  private readonly activeAdmin;
  private readonly envKeys;
  private readonly syncTx;

  constructor(db: SqliteDatabase) {
    this.insert = db.prepare<[Uint8Array, Exclude<Scope, 'form'>, number, number | null, string, string, string]>(
      `INSERT INTO api_keys (hash, scope, form, experiment_id, label, origin, created_at) VALUES (?, ?, ?, ?, ?, ?, ?)`,
    );
    this.byId = db.prepare<[number], KeyRow>(`${SELECT_KEYS} WHERE k.id = ?`);
    this.byHash = db.prepare<[Uint8Array], KeyRow>(`${SELECT_KEYS} WHERE k.hash = ?`);
    this.all = db.prepare<[], KeyRow>(`${SELECT_KEYS} ORDER BY k.id`);
    this.revokeStmt = db.prepare<[string, number]>(`UPDATE api_keys SET revoked_at = ? WHERE id = ? AND revoked_at IS NULL`);
    this.touchStmt = db.prepare<[string, number]>(`UPDATE api_keys SET last_used_at = ? WHERE id = ?`);
    this.activeAdmin = db
      .prepare<[], number>(`SELECT count(*) FROM api_keys WHERE scope = 'admin' AND experiment_id IS NULL AND revoked_at IS NULL`)
      .pluck();
    this.envKeys = db.prepare<[], KeyRow>(`${SELECT_KEYS} WHERE k.origin = 'environment' AND k.revoked_at IS NULL`);
    this.syncTx = db.transaction((hash: Uint8Array | null, now: string) => {
      let present = false;
      for (const row of this.envKeys.all()) {
        if (hash !== null && Buffer.compare(row.hash, hash) === 0) present = true;
        else this.revokeStmt.run(now, row.id);
      }
      if (hash !== null && !present) {
        const existing = this.byHash.get(hash);
        if (existing) {
          // The same secret was used before (revoked) or exists as another key: reinstate it as the environment key.
          db.prepare(`UPDATE api_keys SET revoked_at = NULL, scope = 'admin', form = 0, experiment_id = NULL, origin = 'environment' WHERE id = ?`).run(existing.id);
        } else {
          this.insert.run(hash, 'admin', 0, null, 'SPLITBALLOT_ADMIN_KEY', 'environment', now);
        }
      }
    });
  }

  async create(key: NewApiKey): Promise<ApiKeyRecord> {
    const info = this.insert.run(key.hash, key.scope === 'form' ? 'ingest' : key.scope, key.scope === 'form' ? 1 : 0, key.experimentKey, key.label, key.origin, key.createdAt);
    const row = this.byId.get(Number(info.lastInsertRowid));
    if (!row) throw new Error('API key vanished after insert');
    return toRecord(row);
  }

  async findByHash(hash: Uint8Array): Promise<(ApiKeyRecord & { hash: Uint8Array }) | null> {
    const row = this.byHash.get(hash);
    return row ? { ...toRecord(row), hash: new Uint8Array(row.hash) } : null;
  }

  async list(): Promise<ApiKeyRecord[]> {
    return this.all.all().map(toRecord);
  }

  async revoke(id: number, now: string): Promise<'revoked' | 'already-revoked' | 'not-found'> {
    const row = this.byId.get(id);
    if (!row) return 'not-found';
    if (row.revoked_at !== null) return 'already-revoked';
    this.revokeStmt.run(now, id);
    return 'revoked';
  }

  async touch(id: number, now: string): Promise<void> {
    this.touchStmt.run(now, id);
  }

  async countActiveAdmin(): Promise<number> {
    return this.activeAdmin.get() as number;
  }

  async syncEnvironmentKey(hash: Uint8Array | null, now: string): Promise<void> {
    this.syncTx.immediate(hash, now);
  }
}
