/**
 * `splitballot import --experiment ID FILE.csv [--skip-invalid] [--rejects FILE]`: stream a CSV of responses into
 * an experiment (server/services/ingest/csv-import.ts). Progress on stderr, a one-line summary on stdout.
 *
 * Exit codes: 0 stored (or nothing to store), 1 refused (problems in all-or-nothing mode, unreadable file, closed
 * experiment), 2 usage error.
 */
import { closeSync, existsSync, openSync, writeSync } from 'node:fs';
import { parseArgs } from 'node:util';
import { stringify } from 'csv-stringify/sync';
import { describeDatabase, openStore, type CliIo } from './io.js';
import { loadConfig } from '../config.js';
import { importCsvFile } from '../services/ingest/csv-import.js';
import { describeProblem, type ImportProblem } from '../services/ingest/csv-rows.js';

export const IMPORT_HELP = `Usage: splitballot import --experiment ID FILE.csv [--skip-invalid] [--rejects FILE]

Import responses from a CSV file into experiment ID (database SPLITBALLOT_DB).

Columns (header row required): responseId and condition (required), respondent and submittedAt (optional),
and one column per measure id (an empty cell = not answered). Columns receivedAt, excluded and excludedReason,
as written by the CSV export, are ignored. Every row is checked exactly like a posted response.

  --experiment ID     the experiment to import into (it must be open)
  --skip-invalid      store the good rows and write the bad ones to the rejects file
                      (default: all or nothing; any problem stores nothing)
  --rejects FILE      write every problem as CSV (line, column, message, value) to FILE
                      (default with --skip-invalid: FILE.csv.rejects.csv next to the input)

The file is read twice (check, then store), never held in memory; the rows are stored in chunks of 10,000
inside ONE transaction, so an interrupted import stores nothing. While it runs, the write lock is held:
a service on the same database keeps answering reads, but its writes wait (up to 5 s each). Importing the
same file again is safe: rows already stored with the same content are counted as repeated.

Example: splitballot import --experiment water-bill-2027 answers.csv --skip-invalid
`;

function fmt(n: number): string {
  return n.toLocaleString('en');
}

export async function importCommand(argv: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({
    args: argv,
    options: {
      experiment: { type: 'string' },
      'skip-invalid': { type: 'boolean' },
      rejects: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
    strict: true,
    allowPositionals: true,
  });
  if (values.help) {
    io.stdout.write(IMPORT_HELP);
    return 0;
  }
  if (!values.experiment) {
    io.stderr.write(`splitballot import: --experiment ID is required\n\n${IMPORT_HELP}`);
    return 2;
  }
  if (positionals.length !== 1) {
    io.stderr.write(`splitballot import: give exactly one CSV file\n\n${IMPORT_HELP}`);
    return 2;
  }
  const file = positionals[0];
  if (!existsSync(file)) {
    io.stderr.write(`splitballot import: ${file} does not exist\n`);
    return 1;
  }
  const skipInvalid = values['skip-invalid'] === true;
  const rejectsPath = values.rejects ?? (skipInvalid ? `${file}.rejects.csv` : null);

  const config = loadConfig(io.env);
  // Which database is used, on stderr (PostgreSQL: once connected, so a refused connection stays one line).
  const sayDatabase = () => io.stderr.write(`splitballot import: database ${describeDatabase(config, io.env)}\n`);
  if (config.databaseUrl === undefined) sayDatabase();
  const store = await openStore(config);
  if (config.databaseUrl !== undefined) sayDatabase();
  let rejectsFd: number | null = null;
  const started = Date.now();
  try {
    const experiment = await store.experiments.getBySlug(values.experiment);
    if (!experiment) {
      io.stderr.write(`splitballot import: there is no experiment ${values.experiment} in ${describeDatabase(config, io.env)}\n`);
      return 1;
    }
    if (experiment.status !== 'open') {
      io.stderr.write(`splitballot import: experiment ${experiment.id} is closed and accepts no new responses\n`);
      return 1;
    }
    if (rejectsPath !== null) {
      rejectsFd = openSync(rejectsPath, 'w');
      writeSync(rejectsFd, stringify([['line', 'column', 'message', 'value']]));
    }
    const shown: ImportProblem[] = [];
    const SHOW = 20;
    const summary = await importCsvFile(
      {
        store,
        experiment,
        receivedAt: new Date().toISOString(),
        skipInvalid,
        apiKeyId: null,
        onProblem: (p) => {
          if (rejectsFd !== null) writeSync(rejectsFd, stringify([[p.line, p.column, p.message, p.value ?? '']]));
          if (shown.length < SHOW) shown.push(p);
        },
        onProgress: (pass, rows) => {
          io.stderr.write(pass === 1 ? `checking: ${fmt(rows)} rows read\n` : `storing: ${fmt(rows)} rows\n`);
        },
      },
      file,
    );
    const seconds = (Date.now() - started) / 1000;
    const rate = seconds > 0 ? Math.round(summary.rows / seconds) : summary.rows;
    if (summary.ignoredColumns.length > 0) io.stderr.write(`note: ignored the export columns ${summary.ignoredColumns.join(', ')} (exclusions are not imported)\n`);
    if (!skipInvalid || summary.fatal) {
      for (const p of shown) io.stderr.write(`  ${describeProblem(p)}${p.value !== undefined ? ` (value: ${JSON.stringify(p.value)})` : ''}\n`);
      if (summary.problems > shown.length) {
        io.stderr.write(`  … and ${fmt(summary.problems - shown.length)} more${rejectsPath ? ` (all in ${rejectsPath})` : '; use --rejects FILE for the full list'}\n`);
      }
    }
    if (!summary.committed && (summary.fatal || summary.problems > 0)) {
      const why = summary.fatal ? describeProblem(summary.fatal) : `${fmt(summary.rejectedRows)} of ${fmt(summary.rows)} rows have problems`;
      io.stdout.write(
        `import refused: ${why}; nothing was stored${!summary.fatal && !skipInvalid ? ' (fix them, or use --skip-invalid)' : ''}` +
          `${rejectsPath && summary.problems > 0 ? `; problems in ${rejectsPath}` : ''}\n`,
      );
      return 1;
    }
    io.stdout.write(
      `imported ${experiment.id}: ${fmt(summary.rows)} rows, ${fmt(summary.created)} stored, ${fmt(summary.repeated)} repeated, ` +
        `${fmt(summary.rejectedRows)} rejected${summary.rejectedRows > 0 && rejectsPath ? ` (see ${rejectsPath})` : ''} ` +
        `in ${seconds.toFixed(1)} s (${fmt(rate)} rows/s)\n`,
    );
    return 0;
  } finally {
    if (rejectsFd !== null) closeSync(rejectsFd);
    await store.close();
  }
}
