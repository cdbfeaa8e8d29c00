/**
 * One CSV row of an import checked the way ingest checks a form post: the columns (required, optional, ignored
 * export columns, one per measure), the position of a record in the file for messages, and the problems found,
 * with their one-line description. Used by csv-import.ts.
 */
import { type Options as CsvParseOptions } from 'csv-parse';
import type { ExperimentRecord, RejectedIncrement, RejectedWeightIncrement, ValidResponse } from '../../store/types.js';
import { checkItem, formToItem, type CheckResult } from './validate.js';
import { WEIGHT_FIELD, weightsOf } from '../../schemas/weights.js';

export const IMPORT_CHUNK_ROWS = 10_000;
/** Problems kept in memory for an answer (the CLI's rejects file gets all of them). */
export const MAX_KEPT_PROBLEMS = 10_000;
/** Largest CSV body POST …/responses/import accepts (bigger files: the CLI). */
/**
 * Largest CSV body POST …/responses/import accepts: 2 MiB, about 65,000 rows of three measures. The rows are
 * stored in one transaction during which the service answers nothing else: 100,000 rows held it for 10–12 s
 * on the shared 2-core development machine under load (load average ≈ 4), so this keeps the pause to a few
 * seconds. Bigger files: the CLI, which streams from disk and leaves the service's event loop alone.
 */
export const IMPORT_BODY_LIMIT = 2 * 1024 * 1024;

export const REQUIRED_COLUMNS = ['responseId', 'condition'] as const;
export const OPTIONAL_COLUMNS = ['respondent', 'submittedAt'] as const;
/** Columns of the CSV export that an import accepts and ignores. */
export const IGNORED_EXPORT_COLUMNS = ['receivedAt', 'excluded', 'excludedReason'] as const;

/** csv-parse options shared by the streaming (CLI) and in-memory (HTTP) readers. */
export const CSV_PARSE_OPTIONS: CsvParseOptions = Object.freeze({
  bom: true,
  relax_column_count: true,
  skip_empty_lines: true,
  record_delimiter: ['\r\n', '\n', '\r'],
  max_record_size: 1024 * 1024,
}) as CsvParseOptions;

export interface ImportProblem {
  /** Physical line where the record starts (1 = the header). */
  line: number;
  /** Column name, or "" for the whole row. */
  column: string;
  message: string;
  /** The cell as read (shortened), when there is one. */
  value?: string;
}

export interface ImportCounts {
  /** Data rows read (the header not counted). */
  rows: number;
  /** Rows with at least one problem (validation or conflict). */
  rejectedRows: number;
  problems: number;
}

export interface ImportSummary extends ImportCounts {
  created: number;
  repeated: number;
  /** True when the rows were stored (committed). */
  committed: boolean;
  dataVersion: number | null;
  ignoredColumns: string[];
  /** The first MAX_KEPT_PROBLEMS problems. */
  kept: ImportProblem[];
  /** A problem that stopped the import (header, unreadable CSV, closed experiment). */
  fatal: ImportProblem | null;
  /** Set when the experiment was closed or removed while the import ran. */
  stoppedBy: 'closed' | 'not-found' | null;
}

/** What csv-parse tells about the position after a record (its `info`/context object). */
export interface RecordPosition {
  lines: number;
  empty_lines: number;
}

export function shorten(v: unknown): string | undefined {
  if (v === undefined || v === null) return undefined;
  const s = typeof v === 'string' ? v : JSON.stringify(v);
  return s.length > 100 ? `${s.slice(0, 100)}…` : s;
}

/** Turns a csv-parse position (after the record) into the line where the record started. */
export class LineTracker {
  private previousEnd = 0;
  private previousEmpty = 0;
  start(pos: RecordPosition): number {
    const start = this.previousEnd + 1 + (pos.empty_lines - this.previousEmpty);
    this.previousEnd = pos.lines;
    this.previousEmpty = pos.empty_lines;
    return start;
  }
}

export type RowResult =
  | { ok: true; item: ValidResponse }
  | { ok: false; problems: ImportProblem[]; rejected: RejectedIncrement[]; rejectedWeights?: RejectedWeightIncrement[] };

/**
 * Reads the header and checks rows of one experiment. Stateless between rows (no per-file memory), so pass 1
 * and pass 2 give the same answer for the same row.
 */
export class CsvRowChecker {
  private columns: { name: string; role: 'responseId' | 'condition' | 'respondent' | 'submittedAt' | 'measure' | 'weight' | 'ignored' }[] = [];
  readonly ignoredColumns: string[] = [];

  /** The header's column names, in file order (empty before the header is read). */
  get columnNames(): readonly string[] {
    return this.columns.map((c) => c.name);
  }

  constructor(
    readonly experiment: ExperimentRecord,
    readonly receivedAt: string,
  ) {}

  /** Does the experiment take survey weights (then the column `weight` is read)? */
  private get takesWeights(): boolean {
    return weightsOf(this.experiment.options).weights !== 'none';
  }

  /** Read the header record; returns its problems (any problem is fatal: no row can be read). */
  readHeader(record: string[]): ImportProblem[] {
    const problems: ImportProblem[] = [];
    const measureIds = new Set(this.experiment.measures.map((m) => m.id));
    const seen = new Set<string>();
    this.columns = [];
    this.ignoredColumns.length = 0;
    for (const raw of record) {
      const name = raw.trim();
      if (seen.has(name)) problems.push({ line: 1, column: name, message: 'appears more than once in the header' });
      seen.add(name);
      if ((REQUIRED_COLUMNS as readonly string[]).includes(name) || (OPTIONAL_COLUMNS as readonly string[]).includes(name)) {
        this.columns.push({ name, role: name as 'responseId' });
      } else if (measureIds.has(name)) {
        this.columns.push({ name, role: 'measure' });
      } else if (name === WEIGHT_FIELD && this.takesWeights) {
        // The survey weight, read like the form field `weight` (experiments with weights only).
        this.columns.push({ name, role: 'weight' });
      } else if ((IGNORED_EXPORT_COLUMNS as readonly string[]).includes(name)) {
        this.columns.push({ name, role: 'ignored' });
        this.ignoredColumns.push(name);
      } else {
        problems.push({
          line: 1,
          column: name,
          message:
            name === ''
              ? 'a column has no name'
              : `is not a column of this import (expected ${[...REQUIRED_COLUMNS, ...OPTIONAL_COLUMNS, ...(this.takesWeights ? [WEIGHT_FIELD] : [])].join(', ')} and the measure ids ${[...measureIds].join(', ')})`,
        });
        this.columns.push({ name, role: 'ignored' });
      }
    }
    for (const c of REQUIRED_COLUMNS) if (!seen.has(c)) problems.push({ line: 1, column: c, message: 'is a required column and is missing' });
    for (const m of this.experiment.measures) {
      if (m.required && !seen.has(m.id)) problems.push({ line: 1, column: m.id, message: 'is a required measure and has no column' });
    }
    if (weightsOf(this.experiment.options).weights === 'required' && !seen.has(WEIGHT_FIELD)) {
      problems.push({ line: 1, column: WEIGHT_FIELD, message: 'is required (the experiment needs a survey weight on every response) and has no column' });
    }
    return problems;
  }

  checkRow(record: string[], line: number): RowResult {
    if (record.length !== this.columns.length) {
      return {
        ok: false,
        problems: [{ line, column: '', message: `has ${record.length} field${record.length === 1 ? '' : 's'}; the header has ${this.columns.length}` }],
        rejected: [],
      };
    }
    const fields: Record<string, string> = {};
    let responseId = '';
    for (let i = 0; i < record.length; i++) {
      const c = this.columns[i];
      if (c.role === 'ignored') continue;
      if (c.role === 'responseId') responseId = record[i];
      fields[c.name] = record[i];
    }
    const problems: ImportProblem[] = [];
    if (responseId === '') {
      problems.push({ line, column: 'responseId', message: 'is required in an import (so that importing the same file again stores nothing twice)' });
    }
    // Exactly the form-field reading and the checks of JSON/form ingest.
    const form = formToItem(fields, { weightField: this.takesWeights });
    const out: CheckResult = { valid: [], errors: [], rejected: [] };
    checkItem(this.experiment, form.item, [], this.receivedAt, out);
    for (const e of [...form.errors, ...out.errors]) {
      const column = e.path.startsWith('values.') ? e.path.slice('values.'.length) : e.path;
      const problem: ImportProblem = { line, column, message: e.message };
      const value = shorten(e.value);
      if (value !== undefined) problem.value = value;
      problems.push(problem);
    }
    if (problems.length > 0) return { ok: false, problems, rejected: out.rejected, rejectedWeights: out.rejectedWeights };
    return { ok: true, item: out.valid[0] };
  }
}

export function parseErrorProblem(err: unknown, columnNames: readonly string[] = []): ImportProblem {
  const e = err as { lines?: number; message?: string; code?: string };
  let column = '';
  // The CSV parser counts fields from 0 ("field 0"); every other message names columns, so name it too, or count from 1.
  const message = String(e.message ?? err)
    .replace(/\s+/g, ' ')
    .trim()
    .replace(/\bfield (\d+)\b/g, (_m, n: string) => {
      const index = Number(n);
      if (columnNames[index] !== undefined && columnNames[index] !== '') {
        column = columnNames[index];
        return `column ${columnNames[index]}`;
      }
      return `column ${index + 1} (counted from 1)`;
    });
  return { line: typeof e.lines === 'number' ? e.lines : 0, column, message: `the file is not valid CSV: ${message}` };
}

/** Format a problem as one line of text: "line 12, column trust: 11 is outside the scale from 1 to 7". */
export function describeProblem(p: ImportProblem): string {
  const where = p.line > 0 ? `line ${p.line}` : 'import';
  return `${where}${p.column ? `, column ${p.column}` : ''}: ${p.message}`;
}
