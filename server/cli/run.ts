/**
 * The `splitballot` command line: serve, migrate, keys create/list/revoke, import, backup, restore, check, copy-to-postgres, each
 * with --help. runCli() returns the exit code (0 ok, 1 failure, 2 usage error); server/main.ts is the executable
 * wrapper. Long operations (backup, restore, check) write progress to stderr and one summary line to stdout.
 */
import { ConfigError } from '../config.js';
import { BackupError } from '../store/sqlite/check.js';
import { MigrationError, StoreOpenError } from '../store/types.js';
import { copyToPostgresCommand } from './copy.js';
import { backupCommand, checkCommand, migrateCommand, restoreCommand } from './database.js';
import { importCommand } from './import.js';
import { HELP, UsageError, type CliIo } from './io.js';
import { keysCommand } from './keys.js';
import { serveCommand } from './serve.js';

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
      case 'copy-to-postgres':
        return await copyToPostgresCommand(rest, io);
      default:
        throw new UsageError(`unknown command "${command}"`);
    }
  } catch (err) {
    // BackupError: backup and check report it this way; restore words its own ("restore refused: …").
    if (err instanceof ConfigError || err instanceof MigrationError || err instanceof StoreOpenError || err instanceof BackupError) {
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
