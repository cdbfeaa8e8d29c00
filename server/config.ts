/**
 * Configuration from the environment, validated with zod. A bad value stops start-up with ONE line naming the
 * variable (ConfigError.message). The admin secret from SPLITBALLOT_ADMIN_KEY is turned into its SHA-256 hash
 * here and the secret itself is not kept in the returned object.
 */
import { createHash } from 'node:crypto';
import { z } from 'zod';

export const LOG_LEVELS = ['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent'] as const;
export type LogLevel = (typeof LOG_LEVELS)[number];

export interface Config {
  port: number;
  host: string;
  /** Path of the SQLite file (created with its folder). */
  dbPath: string;
  /** SHA-256 of SPLITBALLOT_ADMIN_KEY, or null when unset. The secret itself is never kept. */
  adminKeyHash: Uint8Array | null;
  /** Exact origins allowed to call the API from a browser; empty = no cross-origin access. */
  corsOrigins: string[];
  logLevel: LogLevel;
}

export class ConfigError extends Error {
  override name = 'ConfigError';
}

/** Minimum length of SPLITBALLOT_ADMIN_KEY: 32 characters (e.g. `openssl rand -hex 32` gives 64). */
export const MIN_ADMIN_KEY_LENGTH = 32;

const emptyToUndefined = (v: unknown) => (typeof v === 'string' && v.trim() === '' ? undefined : v);

function parseOrigin(raw: string): string {
  let url: URL;
  try {
    url = new URL(raw);
  } catch {
    throw new Error(`"${raw}" is not an origin like https://survey.example.org`);
  }
  if (url.protocol !== 'http:' && url.protocol !== 'https:') throw new Error(`"${raw}" must start with http:// or https://`);
  if (url.pathname !== '/' || url.search || url.hash || url.username || url.password || raw.endsWith('/')) {
    throw new Error(`"${raw}" must be an origin only (scheme, host and optional port), without a path or trailing slash`);
  }
  return url.origin;
}

const EnvSchema = z.object({
  PORT: z.preprocess(
    emptyToUndefined,
    z
      .string()
      .regex(/^\d{1,5}$/, 'must be a whole number from 0 to 65535')
      .transform(Number)
      .refine((n) => n <= 65535, 'must be a whole number from 0 to 65535')
      .default(8080),
  ),
  HOST: z.preprocess(emptyToUndefined, z.string().regex(/^[^\s/]+$/, 'must be a host name or address').default('127.0.0.1')),
  SPLITBALLOT_DB: z.preprocess(emptyToUndefined, z.string().default('./data/splitballot.db')),
  SPLITBALLOT_ADMIN_KEY: z.preprocess(
    emptyToUndefined,
    z
      .string()
      .min(MIN_ADMIN_KEY_LENGTH, `must be at least ${MIN_ADMIN_KEY_LENGTH} characters (for example the output of \`openssl rand -hex 32\`)`)
      .regex(/^[\x21-\x7e]+$/, 'must be printable ASCII without spaces')
      .optional(),
  ),
  SPLITBALLOT_CORS_ORIGINS: z.preprocess(
    emptyToUndefined,
    z
      .string()
      .optional()
      .transform((v, ctx) => {
        if (v === undefined) return [];
        const out: string[] = [];
        for (const part of v.split(',').map((s) => s.trim()).filter((s) => s !== '')) {
          try {
            out.push(parseOrigin(part));
          } catch (err) {
            ctx.addIssue({ code: 'custom', message: (err as Error).message });
            return z.NEVER;
          }
        }
        return out;
      }),
  ),
  LOG_LEVEL: z.preprocess(
    (v) => (typeof v === 'string' ? emptyToUndefined(v.toLowerCase()) : v),
    z.enum(LOG_LEVELS, { error: `must be one of ${LOG_LEVELS.join(', ')}` }).default('info'),
  ),
});

/** Read and validate the configuration; throws ConfigError with a one-line message naming the variable. */
export function loadConfig(env: NodeJS.ProcessEnv = process.env): Config {
  const result = EnvSchema.safeParse(env);
  if (!result.success) {
    const issue = result.error.issues[0];
    const name = String(issue.path[0] ?? 'environment');
    const raw = env[name];
    const shown = name === 'SPLITBALLOT_ADMIN_KEY' || raw === undefined ? '' : ` (got ${JSON.stringify(raw)})`;
    throw new ConfigError(`Configuration error: ${name} ${issue.message}${shown}`);
  }
  const e = result.data;
  return {
    port: e.PORT,
    host: e.HOST,
    dbPath: e.SPLITBALLOT_DB,
    adminKeyHash: e.SPLITBALLOT_ADMIN_KEY === undefined ? null : sha256(e.SPLITBALLOT_ADMIN_KEY),
    corsOrigins: e.SPLITBALLOT_CORS_ORIGINS,
    logLevel: e.LOG_LEVEL,
  };
}

export function sha256(text: string): Uint8Array {
  return new Uint8Array(createHash('sha256').update(text, 'utf8').digest());
}
