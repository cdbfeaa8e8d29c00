/**
 * splitballot copy-to-postgres SQLITE_FILE: copy an embedded database into the empty PostgreSQL database named by
 * SPLITBALLOT_DATABASE_URL (store/postgres/copy.ts: every table, ids kept, one transaction), with a progress line
 * per table on stderr, then verify: every experiment's per-condition counts and dataVersion equal on both sides,
 * and `check` passes on PostgreSQL. Exit 0 when verified, 1 otherwise.
 */
import { existsSync } from 'node:fs';
import { parseArgs } from 'node:util';
import { loadConfig } from '../config.js';
import { CopyRefused, copyTablesInto } from '../store/postgres/copy.js';
import { openPostgresStore, redactUrl } from '../store/postgres/store.js';
import { checkSummary } from '../store/sqlite/check.js';
import { openSqliteStore } from '../store/sqlite/store.js';
import { sqliteTableSource } from '../store/sqlite/table-source.js';
import type { ExperimentRecord, Store } from '../store/types.js';
import { HELP, UsageError, type CliIo } from './io.js';

export async function copyToPostgresCommand(args: string[], io: CliIo): Promise<number> {
  const { values, positionals } = parseArgs({ args, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
  if (values.help) {
    io.stdout.write(HELP['copy-to-postgres']);
    return 0;
  }
  if (positionals.length !== 1) throw new UsageError('copy-to-postgres needs one SQLITE_FILE (the embedded database to copy)');
  const file = positionals[0];
  const config = loadConfig(io.env);
  if (config.databaseUrl === undefined) throw new UsageError('copy-to-postgres needs SPLITBALLOT_DATABASE_URL (the empty PostgreSQL database to copy into)');
  if (!existsSync(file)) {
    io.stderr.write(`splitballot: ${file} does not exist\n`);
    return 1;
  }
  const started = Date.now();
  const source = openSqliteStore(file); // applies pending SQLite migrations first, so both schemas are current
  try {
    const target = await openPostgresStore(config.databaseUrl, { pool: { poolSize: 2 } });
    try {
      const where = redactUrl(config.databaseUrl);
      io.stderr.write(`copying ${file} to ${where}\n`);
      const rows = sqliteTableSource(source.db);
      let copied: Record<string, number>;
      let lastLine = 0;
      try {
        copied = await copyTablesInto(target.database, rows, (p) => {
          const now = Date.now();
          if (p.rows === p.total || now - lastLine >= 1000) {
            lastLine = now;
            io.stderr.write(`copy: ${p.table}: ${p.rows.toLocaleString('en-US')} of ${p.total.toLocaleString('en-US')} rows\n`);
          }
        });
      } catch (err) {
        if (err instanceof CopyRefused) {
          io.stderr.write(`splitballot: copy refused: ${err.message}\n`);
          return 1;
        }
        throw err;
      } finally {
        rows.close();
      }
      io.stderr.write(`verifying: counts and data versions of every experiment\n`);
      const mismatches = await compareExperiments(source, target);
      for (const m of mismatches) io.stderr.write(`  ${m}\n`);
      const report = await target.check((stage) => io.stderr.write(`check: ${stage}\n`));
      for (const p of report.problems) io.stderr.write(`  ${p}\n`);
      const ok = mismatches.length === 0 && report.ok;
      const responses = copied.responses ?? 0;
      io.stdout.write(
        `${ok ? 'copy ok' : 'copy FAILED verification'}: ${(copied.experiments ?? 0).toLocaleString('en-US')} experiments, ${responses.toLocaleString('en-US')} responses, ` +
          `${(copied.response_values ?? 0).toLocaleString('en-US')} values, ${(copied.api_keys ?? 0).toLocaleString('en-US')} keys, ${(copied.audit_log ?? 0).toLocaleString('en-US')} audit entries, ` +
          `${(copied.interim_looks ?? 0).toLocaleString('en-US')} looks, ${(copied.assignments ?? 0).toLocaleString('en-US')} assignments in ${((Date.now() - started) / 1000).toFixed(1)} s; ` +
          `${mismatches.length === 0 ? 'counts and data versions match' : `${mismatches.length} mismatch${mismatches.length === 1 ? '' : 'es'}`}; ${checkSummary(report, where)}\n`,
      );
      return ok ? 0 : 1;
    } finally {
      await target.close();
    }
  } finally {
    await source.close();
  }
}

/** Every difference in dataVersion or per-condition counts between the two stores, one sentence each. */
export async function compareExperiments(a: Store, b: Store): Promise<string[]> {
  const out: string[] = [];
  const left = new Map((await a.experiments.list()).map((e) => [e.id, e]));
  const right = new Map((await b.experiments.list()).map((e) => [e.id, e]));
  for (const [id, e] of left) {
    const f = right.get(id);
    if (!f) {
      out.push(`experiment ${id} is missing in PostgreSQL`);
      continue;
    }
    if (e.dataVersion !== f.dataVersion) out.push(`experiment ${id}: dataVersion ${e.dataVersion} embedded, ${f.dataVersion} PostgreSQL`);
    const counts = (x: ExperimentRecord) => x.conditions.map((c) => `${c.id}:${c.responses}/${c.excluded}`).join(' ');
    if (counts(e) !== counts(f)) out.push(`experiment ${id}: condition counts ${counts(e)} embedded, ${counts(f)} PostgreSQL`);
  }
  for (const id of right.keys()) if (!left.has(id)) out.push(`experiment ${id} exists only in PostgreSQL`);
  return out;
}
