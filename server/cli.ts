/**
 * The `splitballot` command line: serve, migrate, keys create/list/revoke, each with --help.
 * runCli() returns the exit code (0 ok, 1 failure, 2 usage error); server/main.ts is the executable wrapper.
 */
import { parseArgs } from 'node:util';
import { buildApp } from './app.js';
import { importCommand } from './commands/import.js';
import { ensureAdminKey, generateSecret, hashSecret, SCOPES } from './auth.js';
import { ConfigError, loadConfig, type Config } from './config.js';
import { MigrationError } from './db/migrate.js';
import { openSqliteStore, type SqliteStore } from './db/store.js';
import type { Scope } from './db/types.js';

export interface CliIo {
  stdout: { write(text: string): unknown };
  stderr: { write(text: string): unknown };
  env: NodeJS.ProcessEnv;
  /** For serve: resolves when the process should shut down (default: SIGTERM or SIGINT). */
  shutdownSignal?: Promise<string>;
}

export const SHUTDOWN_GRACE_MS = 10_000;

const ENVIRONMENT_HELP = `Environment:
  PORT                      port to listen on (default 8080)
  HOST                      address to listen on (default 127.0.0.1)
  SPLITBALLOT_DB            SQLite database file (default ./data/splitballot.db; the folder is created)
  SPLITBALLOT_ADMIN_KEY     optional: this exact secret (32+ characters) is accepted as an admin key
  SPLITBALLOT_CORS_ORIGINS  comma-separated browser origins allowed to call the API (default: none)
  LOG_LEVEL                 fatal, error, warn, info (default), debug, trace or silent`;

const HELP: Record<string, string> = {
  main: `Usage: splitballot <command> [options]

Self-hosted results service for split-ballot survey experiments.

Commands:
  serve                 start the HTTP service (applies pending migrations first)
  migrate               apply pending database migrations and exit
  keys create           make an API key and print its secret once
  keys list             list API keys (never their secrets)
  keys revoke ID        revoke an API key at once

Run "splitballot <command> --help" for a command's options.

${ENVIRONMENT_HELP}
`,
  serve: `Usage: splitballot serve

Start the HTTP service on HOST:PORT with the database SPLITBALLOT_DB. Pending migrations are applied first;
an edited or missing applied migration stops start-up. If no admin key is configured and none exists, one is
created and printed once. SIGTERM or SIGINT stop it gracefully: no new connections, in-flight requests finish
(up to ${SHUTDOWN_GRACE_MS / 1000} s), the WAL is checkpointed and the database closed.

${ENVIRONMENT_HELP}
`,
  migrate: `Usage: splitballot migrate

Apply pending migrations (migrations/NNNN_*.sql, in name order, each in its own transaction) to SPLITBALLOT_DB
and exit. Refuses, changing nothing, when an applied migration was edited or is missing.
`,
  keys: `Usage: splitballot keys <create|list|revoke> [options]

  keys create --scope admin|ingest|read [--experiment ID] [--label TEXT]
  keys list [--json]
  keys revoke ID

Run "splitballot keys <subcommand> --help" for details. Works on SPLITBALLOT_DB while the service runs.
`,
  'keys create': `Usage: splitballot keys create --scope admin|ingest|read [--experiment ID] [--label TEXT]

Make an API key and print its secret on stdout, once (only its SHA-256 hash is stored).
  --scope admin|ingest|read   admin: everything; ingest: post responses only; read: definitions and results
  --experiment ID             limit the key to one experiment (it must exist)
  --label TEXT                a note for "keys list", e.g. "panel form, wave 2"

Example: KEY=$(splitballot keys create --scope ingest --experiment water-bill-2027 --label "web form")
`,
  'keys list': `Usage: splitballot keys list [--json]

List API keys: id, scope, experiment, label, origin, created, last used (to the minute) and revoked times.
Secrets are never shown (they are not stored).
`,
  'keys revoke': `Usage: splitballot keys revoke ID

Revoke the key with this id (see "keys list"). Takes effect at once, also in a running service.
`,
};

class UsageError extends Error {}

function openStore(config: Config): SqliteStore {
  return openSqliteStore(config.dbPath);
}

function pad(s: string, n: number): string {
  return s.length >= n ? s : s + ' '.repeat(n - s.length);
}

async function keysCommand(args: string[], io: CliIo): Promise<number> {
  const sub = args[0];
  const rest = args.slice(1);
  if (sub === undefined || sub === '--help' || sub === '-h') {
    io.stdout.write(HELP.keys);
    return sub === undefined ? 2 : 0;
  }
  if (sub === 'create') {
    const { values } = parseArgs({
      args: rest,
      options: { scope: { type: 'string' }, experiment: { type: 'string' }, label: { type: 'string' }, help: { type: 'boolean', short: 'h' } },
      strict: true,
      allowPositionals: false,
    });
    if (values.help) {
      io.stdout.write(HELP['keys create']);
      return 0;
    }
    if (!values.scope || !(SCOPES as readonly string[]).includes(values.scope)) {
      throw new UsageError(`--scope must be one of ${SCOPES.join(', ')}`);
    }
    const config = loadConfig(io.env);
    const store = openStore(config);
    try {
      let experimentKey: number | null = null;
      if (values.experiment !== undefined) {
        const e = await store.experiments.getBySlug(values.experiment);
        if (!e) {
          io.stderr.write(`splitballot: there is no experiment ${values.experiment}\n`);
          return 1;
        }
        experimentKey = e.key;
      }
      const secret = generateSecret();
      const key = await store.apiKeys.create({
        hash: hashSecret(secret),
        scope: values.scope as Scope,
        experimentKey,
        label: values.label ?? '',
        origin: 'cli',
        createdAt: new Date().toISOString(),
      });
      io.stdout.write(`${secret}\n`);
      io.stderr.write(
        `Created key ${key.id} (${key.scope}${key.experiment ? `, experiment ${key.experiment}` : ''}). ` +
          `The secret above is shown only this once; store it now.\n`,
      );
      return 0;
    } finally {
      await store.close();
    }
  }
  if (sub === 'list') {
    const { values } = parseArgs({ args: rest, options: { json: { type: 'boolean' }, help: { type: 'boolean', short: 'h' } }, strict: true });
    if (values.help) {
      io.stdout.write(HELP['keys list']);
      return 0;
    }
    const store = openStore(loadConfig(io.env));
    try {
      const keys = await store.apiKeys.list();
      if (values.json) {
        io.stdout.write(`${JSON.stringify(keys, null, 2)}\n`);
        return 0;
      }
      const rows = [['ID', 'SCOPE', 'EXPERIMENT', 'ORIGIN', 'CREATED', 'LAST USED', 'REVOKED', 'LABEL']];
      for (const k of keys) {
        rows.push([String(k.id), k.scope, k.experiment ?? '*', k.origin, k.createdAt, k.lastUsedAt ?? '-', k.revokedAt ?? '-', k.label]);
      }
      const widths = rows[0].map((_, i) => Math.max(...rows.map((r) => r[i].length)));
      for (const r of rows) io.stdout.write(`${r.map((c, i) => (i === r.length - 1 ? c : pad(c, widths[i]))).join('  ')}\n`);
      return 0;
    } finally {
      await store.close();
    }
  }
  if (sub === 'revoke') {
    const { values, positionals } = parseArgs({ args: rest, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
    if (values.help) {
      io.stdout.write(HELP['keys revoke']);
      return 0;
    }
    if (positionals.length !== 1 || !/^\d+$/.test(positionals[0])) throw new UsageError('keys revoke needs one key id (a number; see "keys list")');
    const id = Number(positionals[0]);
    const store = openStore(loadConfig(io.env));
    try {
      const r = await store.apiKeys.revoke(id, new Date().toISOString());
      if (r === 'not-found') {
        io.stderr.write(`splitballot: there is no key ${id}\n`);
        return 1;
      }
      io.stdout.write(r === 'revoked' ? `Revoked key ${id}.\n` : `Key ${id} was already revoked.\n`);
      return 0;
    } finally {
      await store.close();
    }
  }
  throw new UsageError(`unknown keys subcommand "${sub}"`);
}

async function migrateCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.migrate);
    return 0;
  }
  const config = loadConfig(io.env);
  const store = openStore(config);
  try {
    const { applied, alreadyApplied } = store.migration;
    io.stdout.write(
      applied.length > 0
        ? `Applied ${applied.length} migration${applied.length === 1 ? '' : 's'} to ${config.dbPath}: ${applied.join(', ')}\n`
        : `${config.dbPath} is up to date (${alreadyApplied} migration${alreadyApplied === 1 ? '' : 's'} applied earlier).\n`,
    );
    return 0;
  } finally {
    await store.close();
  }
}

function defaultShutdownSignal(): Promise<string> {
  return new Promise((resolve) => {
    const on = (sig: string) => () => resolve(sig);
    process.once('SIGTERM', on('SIGTERM'));
    process.once('SIGINT', on('SIGINT'));
  });
}

async function serveCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.serve);
    return 0;
  }
  const config = loadConfig(io.env);
  const store = openStore(config);
  let secret: string | null;
  try {
    secret = await ensureAdminKey(store, config.adminKeyHash);
  } catch (err) {
    await store.close();
    throw err;
  }
  const app = buildApp(config, { store });
  try {
    await app.listen({ port: config.port, host: config.host });
  } catch (err) {
    await app.close().catch(() => undefined);
    await store.close();
    io.stderr.write(`splitballot: cannot listen on ${config.host}:${config.port}: ${(err as Error).message}\n`);
    return 1;
  }
  const address = app.server.address();
  const port = typeof address === 'object' && address ? address.port : config.port;
  const shownHost = config.host === '0.0.0.0' || config.host === '::' ? '127.0.0.1' : config.host.includes(':') ? `[${config.host}]` : config.host;
  if (secret !== null) {
    io.stdout.write(
      `\nNo admin key existed, so one was created. It is shown only this once; store it now:\n\n  ${secret}\n\n` +
        `Try it: curl -H "Authorization: Bearer ${secret}" http://${shownHost}:${port}/v1/experiments\n\n`,
    );
  }
  const signal = await (io.shutdownSignal ?? defaultShutdownSignal());
  app.log.info({ signal }, 'shutting down: finishing in-flight requests');
  const timer = setTimeout(() => {
    io.stderr.write(`splitballot: in-flight requests did not finish within ${SHUTDOWN_GRACE_MS / 1000} s; exiting\n`);
    process.exit(1);
  }, SHUTDOWN_GRACE_MS);
  timer.unref();
  try {
    await app.close();
  } finally {
    await store.close();
    clearTimeout(timer);
  }
  return 0;
}

export async function runCli(argv: string[], io: CliIo): Promise<number> {
  const [command, ...rest] = argv;
  try {
    switch (command) {
      case undefined:
        io.stderr.write(HELP.main);
        return 2;
      case '--help':
      case '-h':
      case 'help':
        io.stdout.write(HELP.main);
        return 0;
      case 'serve':
        return await serveCommand(rest, io);
      case 'migrate':
        return await migrateCommand(rest, io);
      case 'keys':
        return await keysCommand(rest, io);
      case 'import':
        return await importCommand(rest, io);
      default:
        throw new UsageError(`unknown command "${command}"`);
    }
  } catch (err) {
    if (err instanceof ConfigError || err instanceof MigrationError) {
      io.stderr.write(`splitballot: ${err.message}\n`);
      return 1;
    }
    if (err instanceof UsageError || (err as { code?: string }).code?.startsWith('ERR_PARSE_ARGS')) {
      io.stderr.write(`splitballot: ${(err as Error).message}\nRun "splitballot --help" for usage.\n`);
      return 2;
    }
    throw err;
  }
}
