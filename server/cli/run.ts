/**
 * The `splitballot` command line: serve, migrate, keys create/list/revoke, import, backup, restore, check, each
 * with --help. runCli() returns the exit code (0 ok, 1 failure, 2 usage error); server/main.ts is the executable
 * wrapper. Long operations (backup, restore, check) write progress to stderr and one summary line to stdout.
 */
import { existsSync } from 'node:fs';
import { resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { buildApp } from '../http/app.js';
import { acquireServerLock, BackupError, backupFile, checkFile, checkSummary, lockPathOf, restoreDatabase, type BackupProgress } from '../store/sqlite/backup.js';
import { importCommand } from './import.js';
import { ensureAdminKey, generateSecret, hashSecret, SCOPES } from '../http/auth.js';
import { ConfigError, loadConfig, SHUTDOWN_GRACE_DEFAULT_MS, type Config } from '../config.js';
import { MigrationError } from '../store/sqlite/migrate.js';
import { openSqliteStore, type SqliteStore } from '../store/sqlite/store.js';
import type { Scope } from '../store/types.js';

export interface CliIo {
  stdout: { write(text: string): unknown };
  stderr: { write(text: string): unknown };
  env: NodeJS.ProcessEnv;
  /** For serve: resolves when the process should shut down (default: SIGTERM or SIGINT). */
  shutdownSignal?: Promise<string>;
}

/** Default bound on the wait for in-flight requests at shutdown (SPLITBALLOT_SHUTDOWN_TIMEOUT overrides). */
export const SHUTDOWN_GRACE_MS = SHUTDOWN_GRACE_DEFAULT_MS;

const ENVIRONMENT_HELP = `Environment:
  PORT                      port to listen on (default 8080)
  HOST                      address to listen on (default 127.0.0.1)
  SPLITBALLOT_DB            SQLite database file (default ./data/splitballot.db; the folder is created)
  SPLITBALLOT_ADMIN_KEY     optional: this exact secret (32+ characters) is accepted as an admin key
  SPLITBALLOT_CORS_ORIGINS  comma-separated browser origins allowed to call the API (default: none)
  SPLITBALLOT_RATE_LIMIT_INGEST  ingest requests per minute per API key and client address (default 600; 0 = off)
  SPLITBALLOT_REQUEST_TIMEOUT    seconds within which a whole request must arrive (default 60)
  SPLITBALLOT_SHUTDOWN_TIMEOUT   seconds in-flight requests may take after SIGTERM (default 10)
  SPLITBALLOT_BACKUP_DIR    folder for POST /v1/admin/backup (default: "backups" beside the database)
  SPLITBALLOT_METRICS_TOKEN optional: a token (32+ characters) that may read GET /metrics and nothing else
  SPLITBALLOT_TRUST_PROXY   proxies trusted for X-Forwarded-For: a hop count or addresses/CIDRs (default: none)
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
  import                import responses from a CSV file
  backup PATH           copy the database to PATH while the service keeps running
  restore BACKUP        replace the database by a backup (the service must be stopped)
  check                 verify the database: integrity and the stored counts

Run "splitballot <command> --help" for a command's options.

${ENVIRONMENT_HELP}
`,
  serve: `Usage: splitballot serve

Start the HTTP service on HOST:PORT with the database SPLITBALLOT_DB. Pending migrations are applied first;
an edited or missing applied migration stops start-up. If no admin key is configured and none exists, one is
created and printed once. SIGTERM or SIGINT stop it gracefully: no new connections, in-flight requests finish
(up to SPLITBALLOT_SHUTDOWN_TIMEOUT, default ${SHUTDOWN_GRACE_MS / 1000} s), the WAL is checkpointed and the
database closed; exit code 0 (1 when requests had to be cut off; a second signal cuts them off at once).

While it runs, serve holds an exclusive lock on SPLITBALLOT_DB.lock: a second serve on the same database and
"splitballot restore" refuse to start. The operating system releases the lock when the process ends, however
it ends, so a crash never leaves a stale lock.

${ENVIRONMENT_HELP}
`,
  migrate: `Usage: splitballot migrate

Apply pending migrations (migrations/sqlite/NNNN_*.sql, in name order, each in its own transaction) to SPLITBALLOT_DB
and exit. Refuses, changing nothing, when an applied migration was edited or is missing.
`,
  keys: `Usage: splitballot keys <create|list|revoke> [options]

  keys create --scope admin|ingest|read [--experiment ID] [--label TEXT]
  keys list [--json]
  keys revoke ID

Run "splitballot keys <subcommand> --help" for details. Works on SPLITBALLOT_DB while the service runs.
`,
  backup: `Usage: splitballot backup PATH

Copy SPLITBALLOT_DB to PATH with SQLite's online backup API. The service may keep running and ingesting: the
copy is one consistent state that holds every response acknowledged before the backup started. PATH must not
exist; the copy is written next to it under a temporary name and renamed when complete (and fsync'ed), then
checked (integrity and counts). Progress on stderr, one summary line on stdout. Exit 0 ok, 1 failure.
`,
  restore: `Usage: splitballot restore BACKUP

Replace SPLITBALLOT_DB by the backup file BACKUP. Refuses, changing nothing, when a server is running on the
database (it holds SPLITBALLOT_DB.lock) or when the backup fails its check (integrity and counts). The current
database (with its -wal file) is kept as SPLITBALLOT_DB.pre-restore-<time>; nothing is deleted. Progress on
stderr, one summary line on stdout. Exit 0 ok, 1 refused or failed.
`,
  check: `Usage: splitballot check [--db FILE]

Verify a database (default SPLITBALLOT_DB; --db to check a backup): PRAGMA integrity_check and
foreign_key_check, then the counts the service keeps at ingest against the stored values: per-value counts
(value_counts), per-condition response and excluded counters, each value's condition, excluded flag and limits,
and every experiment's data version. Read-only; safe while the service runs. Prints one summary line; with
problems, one line per problem on stderr and exit code 1.
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
  const lock = acquireServerLock(config.dbPath);
  if (lock === null) {
    io.stderr.write(`splitballot: another splitballot process (serve or restore) is using ${config.dbPath} (it holds ${lockPathOf(config.dbPath)})\n`);
    return 1;
  }
  let store: SqliteStore;
  try {
    store = openStore(config);
  } catch (err) {
    lock.release();
    throw err;
  }
  let secret: string | null;
  try {
    secret = await ensureAdminKey(store, config.adminKeyHash);
  } catch (err) {
    await store.close();
    lock.release();
    throw err;
  }
  const app = buildApp(config, { store, processMetrics: true });
  try {
    await app.listen({ port: config.port, host: config.host });
  } catch (err) {
    await app.close().catch(() => undefined);
    await store.close();
    lock.release();
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
  const graceMs = config.shutdownGraceMs ?? SHUTDOWN_GRACE_MS;
  app.log.info({ signal, graceMs }, 'shutting down: no new connections; finishing in-flight requests');
  // Stop accepting, let in-flight requests finish (bounded), then close the database with a WAL checkpoint.
  let forced = false;
  const forceClose = (why: string) => {
    if (forced) return;
    forced = true;
    app.log.warn({ why }, 'shutting down: cutting off the requests still in flight');
    io.stderr.write(`splitballot: ${why}; closing the remaining connections\n`);
    app.server.closeAllConnections();
  };
  const timer = setTimeout(() => forceClose(`in-flight requests did not finish within ${graceMs / 1000} s`), graceMs);
  const again = (sig: string) => forceClose(`second ${sig}`);
  process.once('SIGTERM', again);
  process.once('SIGINT', again);
  try {
    await app.close();
  } finally {
    clearTimeout(timer);
    process.removeListener('SIGTERM', again);
    process.removeListener('SIGINT', again);
    try {
      await store.close();
    } finally {
      lock.release();
    }
  }
  app.log.info({ forced }, 'shut down: database checkpointed and closed');
  return forced ? 1 : 0;
}

function progressWriter(io: CliIo, what: string): (p: BackupProgress) => void {
  let lastShown = -1;
  return (p) => {
    if (p.totalPages === 0) return;
    const done = Math.floor(((p.totalPages - p.remainingPages) / p.totalPages) * 10) * 10;
    if (done !== lastShown) {
      lastShown = done;
      io.stderr.write(`${what}: ${done}% of ${p.totalPages.toLocaleString('en-US')} pages\n`);
    }
  };
}

async function backupCommand(args: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
  if (values.help) {
    io.stdout.write(HELP.backup);
    return 0;
  }
  if (positionals.length !== 1) throw new UsageError('backup needs one PATH (the file to write; it must not exist)');
  const config = loadConfig(io.env);
  const destination = resolve(positionals[0]);
  if (existsSync(destination)) {
    io.stderr.write(`splitballot: ${destination} already exists; choose a new file name\n`);
    return 1;
  }
  io.stderr.write(`backing up ${config.dbPath} to ${destination}\n`);
  const progress = progressWriter(io, 'backup');
  const result = await backupFile(config.dbPath, destination, { onProgress: progress });
  progress({ totalPages: result.pages, remainingPages: 0 });
  io.stderr.write(`checking the copy\n`);
  const report = checkFile(result.path, (stage) => io.stderr.write(`check: ${stage}\n`));
  const mib = (result.bytes / 1048576).toFixed(1);
  if (!report.ok) {
    for (const p of [...report.integrity, ...report.problems]) io.stderr.write(`  ${p}\n`);
    io.stdout.write(`backup written but its ${checkSummary(report, result.path)}\n`);
    return 1;
  }
  io.stdout.write(
    `backup ok: ${result.path} (${mib} MiB, ${result.pages.toLocaleString('en-US')} pages, ${report.counts.responses.toLocaleString('en-US')} responses ` +
      `in ${report.counts.experiments} experiment${report.counts.experiments === 1 ? '' : 's'}) in ${(result.durationMs / 1000).toFixed(1)} s; integrity and counts checked\n`,
  );
  return 0;
}

async function restoreCommand(args: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
  if (values.help) {
    io.stdout.write(HELP.restore);
    return 0;
  }
  if (positionals.length !== 1) throw new UsageError('restore needs one BACKUP file');
  const config = loadConfig(io.env);
  try {
    const r = await restoreDatabase(positionals[0], config.dbPath, {
      onStage: (stage) => io.stderr.write(`restore: ${stage}\n`),
      onProgress: progressWriter(io, 'restore: copy'),
    });
    io.stdout.write(
      `restore ok: ${r.target} now holds ${resolve(positionals[0])} (${r.report.counts.responses.toLocaleString('en-US')} responses in ` +
        `${r.report.counts.experiments} experiment${r.report.counts.experiments === 1 ? '' : 's'}; integrity and counts checked)` +
        `${r.previous ? `; the previous database was kept as ${r.previous}` : ''} in ${(r.durationMs / 1000).toFixed(1)} s\n`,
    );
    return 0;
  } catch (err) {
    if (err instanceof BackupError) {
      io.stderr.write(`splitballot: restore refused: ${err.message}\n`);
      return 1;
    }
    throw err;
  }
}

async function checkCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { db: { type: 'string' }, help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.check);
    return 0;
  }
  const path = values.db ?? loadConfig(io.env).dbPath;
  const report = checkFile(path, (stage) => io.stderr.write(`check: ${stage}\n`));
  for (const p of [...report.integrity, ...report.problems]) io.stderr.write(`  ${p}\n`);
  io.stdout.write(`${checkSummary(report, path)}\n`);
  return report.ok ? 0 : 1;
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
      case 'backup':
        return await backupCommand(rest, io);
      case 'restore':
        return await restoreCommand(rest, io);
      case 'check':
        return await checkCommand(rest, io);
      default:
        throw new UsageError(`unknown command "${command}"`);
    }
  } catch (err) {
    // BackupError: backup and check report it this way; restore words its own ("restore refused: …").
    if (err instanceof ConfigError || err instanceof MigrationError || err instanceof BackupError) {
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
