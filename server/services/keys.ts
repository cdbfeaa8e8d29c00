/**
 * API keys as a use case, without HTTP: making a secret, hashing it, finding the active key a secret belongs to, and
 * the first admin key at start-up.
 *
 * Secrets: "sb_" + 32 random bytes in base64url (256 bits), shown once when made. Stored only as SHA-256 hashes;
 * a presented secret is hashed, looked up by hash, and the stored hash compared with crypto.timingSafeEqual.
 * (A fast hash is right here: the secrets are long random strings, not passwords, so there is nothing to
 * brute-force, and every request needs the check.)
 */
import { randomBytes, timingSafeEqual } from 'node:crypto';
import { sha256 } from '../config.js';
import type { ApiKeyRecord, Scope, Store } from '../store/types.js';

export const SECRET_PREFIX = 'sb_';
export const SCOPES: readonly Scope[] = ['admin', 'ingest', 'read', 'form'];

export function generateSecret(): string {
  return SECRET_PREFIX + randomBytes(32).toString('base64url');
}

export function hashSecret(secret: string): Uint8Array {
  return sha256(secret);
}

/** Two hashes equal, compared in constant time. */
export function sameHash(a: Uint8Array, b: Uint8Array): boolean {
  return a.length === b.length && timingSafeEqual(a, b);
}

/** The active (not revoked) key whose hash is `hash`, or null. */
export async function activeKeyByHash(store: Store, hash: Uint8Array): Promise<ApiKeyRecord | null> {
  const key = await store.apiKeys.findByHash(hash);
  return key && sameHash(key.hash, hash) && key.revokedAt === null ? key : null;
}

/**
 * At start-up (serve): when no admin key is configured by SPLITBALLOT_ADMIN_KEY and no active admin key exists,
 * create one and return its secret (to print once). Otherwise null.
 */
export async function ensureAdminKey(store: Store, adminKeyHash: Uint8Array | null, nowIso = new Date().toISOString()): Promise<string | null> {
  await store.apiKeys.syncEnvironmentKey(adminKeyHash, nowIso);
  if (adminKeyHash !== null) return null;
  if ((await store.apiKeys.countActiveAdmin()) > 0) return null;
  const secret = generateSecret();
  await store.apiKeys.create({ hash: hashSecret(secret), scope: 'admin', experimentKey: null, label: 'first admin key', origin: 'bootstrap', createdAt: nowIso });
  return secret;
}
