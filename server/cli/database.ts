/** The database commands: splitballot migrate | backup PATH | restore BACKUP | check. Long operations write progress to stderr and one summary line to stdout. */
import { existsSync } from 'node:fs';
import { resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { loadConfig } from '../config.js';
import { backupFile, restoreDatabase, type BackupProgress } from '../store/sqlite/backup.js';
import { BackupError, checkFile, checkSummary } from '../store/sqlite/check.js';
import { HELP, openConfigured, UsageError, type CliIo } from './io.js';

export async function migrateCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.migrate);
    return 0;
  }
  const config = loadConfig(io.env);
  const { store, where } = await openConfigured(config, io);
  try {
    const { applied, alreadyApplied } = store.migration;
    io.stdout.write(
      applied.length > 0
        ? `Applied ${applied.length} migration${applied.length === 1 ? '' : 's'} to ${where}: ${applied.join(', ')}\n`
        : `${where} is up to date (${alreadyApplied} migration${alreadyApplied === 1 ? '' : 's'} applied earlier).\n`,
    );
    return 0;
  } finally {
    await store.close();
  }
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

export async function backupCommand(args: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
  if (values.help) {
    io.stdout.write(HELP.backup);
    return 0;
  }
  if (positionals.length !== 1) throw new UsageError('backup needs one PATH (the file to write; it must not exist)');
  const config = loadConfig(io.env);
  if (config.databaseUrl !== undefined) return refusePostgres(io, 'backup');
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

export async function restoreCommand(args: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
  if (values.help) {
    io.stdout.write(HELP.restore);
    return 0;
  }
  if (positionals.length !== 1) throw new UsageError('restore needs one BACKUP file');
  const config = loadConfig(io.env);
  if (config.databaseUrl !== undefined) return refusePostgres(io, 'restore');
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

export async function checkCommand(args: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({ args, options: { db: { type: 'string' }, help: { type: 'boolean', short: 'h' } }, strict: true });
  if (values.help) {
    io.stdout.write(HELP.check);
    return 0;
  }
  const config = loadConfig(io.env);
  if (values.db === undefined && config.databaseUrl !== undefined) {
    // PostgreSQL: every invariant recomputed in one read-only snapshot (store/postgres/check.ts).
    const { store, where } = await openConfigured(config);
    try {
      if (!('check' in store)) throw new Error('unreachable: a PostgreSQL store has check()');
      const report = await store.check((stage) => io.stderr.write(`check: ${stage}\n`));
      for (const p of [...report.integrity, ...report.problems]) io.stderr.write(`  ${p}\n`);
      io.stdout.write(`${checkSummary(report, where)}\n`);
      return report.ok ? 0 : 1;
    } finally {
      await store.close();
    }
  }
  const path = values.db ?? config.dbPath;
  const report = checkFile(path, (stage) => io.stderr.write(`check: ${stage}\n`));
  for (const p of [...report.integrity, ...report.problems]) io.stderr.write(`  ${p}\n`);
  io.stdout.write(`${checkSummary(report, path)}\n`);
  return report.ok ? 0 : 1;
}

/** backup and restore are SQLite file operations; PostgreSQL has its own tools (docs/operating.md). */
function refusePostgres(io: CliIo, command: 'backup' | 'restore'): number {
  io.stderr.write(
    `splitballot: ${command} works on the SQLite file (SPLITBALLOT_DB); SPLITBALLOT_DATABASE_URL is set, so use PostgreSQL's own tools ` +
      `(${command === 'backup' ? 'pg_dump --format=custom' : 'pg_restore --clean --if-exists'}), then run "splitballot check" (see docs/operating.md)\n`,
  );
  return 1;
}
