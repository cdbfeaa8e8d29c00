/** Placeholder: `splitballot import --experiment ID FILE.csv` (results-page / import issue). */
import type { CliIo } from '../cli.js';

export const IMPORT_HELP = `Usage: splitballot import --experiment ID FILE.csv [--skip-invalid]\n\n(not yet available)\n`;

export async function importCommand(_argv: string[], io: CliIo): Promise<number> {
  io.stderr.write('splitballot import: not yet available\n');
  return 1;
}
