/**
 * splitballot serve: open and migrate the database (SQLite: after taking the single-process server lock;
 * PostgreSQL: any number of nodes may serve one database, and each opens a LISTEN connection for live updates),
 * make the first admin key, listen, and shut down gracefully on SIGTERM/SIGINT.
 */
import { parseArgs } from 'node:util';
import { buildApp } from '../http/app.js';
import { warmUp } from '../services/comparisons/service.js';
import { ensureAdminKey } from '../services/keys.js';
import { loadConfig } from '../config.js';
import { acquireServerLock, lockPathOf } from '../store/sqlite/lock.js';
import type { ChangeNotifier } from '../store/types.js';
import { describeDatabase, HELP, openConfigured, SHUTDOWN_GRACE_MS, type CliIo, type OpenedStore } from './io.js';

function defaultShutdownSignal(): Promise<string> {
  return new Promise((resolve) => {
    const on = (sig: string) => () => resolve(sig);
    process.once('SIGTERM', on('SIGTERM'));
    process.once('SIGINT', on('SIGINT'));
  });
}

export async function serveCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.serve);
    return 0;
  }
  const config = loadConfig(io.env);
  // The single-process file lock is the SQLite store's concern; on PostgreSQL any number of nodes may serve.
  const lock = config.databaseUrl === undefined ? acquireServerLock(config.dbPath) : { release: () => undefined };
  if (lock === null) {
    io.stderr.write(`splitballot: another splitballot process (serve or restore) is using ${config.dbPath} (it holds ${lockPathOf(config.dbPath)})\n`);
    return 1;
  }
  let opened: OpenedStore;
  try {
    opened = await openConfigured(config);
  } catch (err) {
    lock.release();
    throw err;
  }
  const store = opened.store;
  let notifier: ChangeNotifier | undefined;
  if (opened.engine === 'postgres') {
    notifier = await opened.store.openNotifier({ onError: (err) => io.stderr.write(`splitballot: live-update connection: ${(err as Error).message}\n`) });
  }
  let secret: string | null;
  try {
    secret = await ensureAdminKey(store, config.adminKeyHash);
  } catch (err) {
    await store.close();
    lock.release();
    throw err;
  }
  const app = buildApp(config, { store, processMetrics: true, notifier });
  // Which database this server uses, in its log (stdout): a `keys create` must be run with the same SPLITBALLOT_DB
  // (or SPLITBALLOT_DATABASE_URL).
  app.log.info({ database: describeDatabase(config, io.env) }, 'database opened');
  try {
    await app.listen({ port: config.port, host: config.host });
  } catch (err) {
    await app.close().catch(() => undefined);
    await store.close(); // closes the notifier too
    lock.release();
    io.stderr.write(`splitballot: cannot listen on ${config.host}:${config.port}: ${(err as Error).message}\n`);
    return 1;
  }
  // Compile the stats path and start a comparison worker now, not on the first real request (see warmUp).
  setImmediate(() => warmUp());
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
