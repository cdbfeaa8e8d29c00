/**
 * CSV import of responses: parsing (csv-parse, RFC 4180), validation with exactly the checks of JSON/form ingest
 * (server/services/ingest/validate.ts: each measure cell is read like an HTML form field, then checkItem), and the two passes that
 * keep memory bounded for files of any length:
 *
 *   pass 1 (validate): stream every record, check it, keep only counters and the problems (all of them go to the
 *          onProblem callback — the CLI writes them to the rejects file — and the first MAX_KEPT_PROBLEMS are kept
 *          for the HTTP answer). Nothing is written.
 *   pass 2 (insert):   stream the file again, check again, and hand the valid items to the store in chunks of
 *          IMPORT_CHUNK_ROWS inside ONE write transaction (store.bulk.beginImport), so the whole import is
 *          all or nothing. A responseId already stored with other content is a conflict, found here; in
 *          all-or-nothing mode every chunk is still tried so that every conflict is reported, then the transaction
 *          is rolled back.
 *
 * Columns (header row required; names are trimmed): responseId, condition (both required), respondent and
 * submittedAt (optional), one column per measure id (a required measure's column must be present; an empty
 * cell = not answered). receivedAt, excluded and excludedReason (written by the CSV export) are accepted and
 * ignored, so an exported file can be imported elsewhere; exclusions are not imported. Any other column is an
 * error. responseId is required in every row, so that importing the same file twice stores nothing twice
 * (the second run reports every row as repeated).
 *
 * Line numbers are physical lines of the file (1 = header), the line where the record starts. Cost: O(rows)
 * time; memory O(IMPORT_CHUNK_ROWS + kept problems), independent of the file's length.
 */
import { createReadStream } from 'node:fs';
import { Readable } from 'node:stream';
import { CsvError, parse as parseStream, type Options as CsvParseOptions } from 'csv-parse';
import { parse as parseSync } from 'csv-parse/sync';
import {
  isPromise,
  type BulkImport,
  type ExperimentRecord,
  type IngestOutcome,
  type MaybePromise,
  type RejectedIncrement,
  type RejectedWeightIncrement,
  type Store,
  type ValidResponse,
} from '../../store/types.js';
import { CSV_PARSE_OPTIONS, CsvRowChecker, IMPORT_CHUNK_ROWS, ImportCounts, ImportProblem, ImportSummary, LineTracker, MAX_KEPT_PROBLEMS, RecordPosition, parseErrorProblem } from './csv-rows.js';

/** The part of a BulkImport pass 2 writes to. */
type ChunkWriter = Pick<BulkImport, 'add'>;

export interface CsvImportOptions {
  experiment: ExperimentRecord;
  receivedAt: string;
  /** Keep the good rows and report the bad ones, instead of all or nothing. */
  skipInvalid: boolean;
  /** Called for every problem, in file order (pass 1 problems, then conflicts found in pass 2). */
  onProblem?: (problem: ImportProblem) => void;
  chunkRows?: number;
}

/**
 * One import, driven record by record by a reader (streaming from a file, or from a buffer in memory). Usage:
 *   header(record) → validate(record, position)… → endValidation() → [if proceed] header(record) again →
 *   insert(record, position, writer)… → endInsert(writer) → summary()
 */
export class CsvImport {
  readonly checker: CsvRowChecker;
  private readonly chunkRows: number;
  private lines = new LineTracker();
  private pass: 1 | 2 = 1;
  private headerDone = false;
  private chunk: ValidResponse[] = [];
  private chunkLines: number[] = [];
  private readonly rejectedCounters = new Map<string, RejectedIncrement>();
  /** Refused survey weights by reason (pass 1). */
  private readonly rejectedWeightCounters = new Map<RejectedWeightIncrement['reason'], number>();
  private readonly badLines = new Set<number>();
  readonly counts: ImportCounts = { rows: 0, rejectedRows: 0, problems: 0 };
  private created = 0;
  private repeated = 0;
  private dataVersion: number | null = null;
  private conflicts = 0;
  private readonly kept: ImportProblem[] = [];
  private fatalProblem: ImportProblem | null = null;
  private stopped = false;
  private stoppedBy: 'closed' | 'not-found' | null = null;
  /** Rows handed to the store so far (pass 2), for progress. */
  insertedRows = 0;

  constructor(private readonly options: CsvImportOptions) {
    this.checker = new CsvRowChecker(options.experiment, options.receivedAt);
    this.chunkRows = options.chunkRows ?? IMPORT_CHUNK_ROWS;
  }

  get fatal(): ImportProblem | null {
    return this.fatalProblem;
  }

  private report(p: ImportProblem): void {
    this.counts.problems++;
    if (this.kept.length < MAX_KEPT_PROBLEMS) this.kept.push(p);
    this.options.onProblem?.(p);
  }

  /** A problem that ends the import (unreadable CSV, bad header, closed experiment). */
  setFatal(p: ImportProblem): void {
    if (this.fatalProblem) return;
    this.fatalProblem = p;
    this.report(p);
  }

  /** Feed one parsed record with csv-parse's position after it. Returns false when reading can stop. */
  validate(record: string[], pos: RecordPosition): boolean {
    if (this.fatalProblem) return false;
    const line = this.lines.start(pos);
    if (!this.headerDone) {
      this.headerDone = true;
      const problems = this.checker.readHeader(record);
      if (problems.length > 0) {
        this.setFatal(problems[0]);
        for (let i = 1; i < problems.length; i++) this.report(problems[i]);
        return false;
      }
      return true;
    }
    this.counts.rows++;
    const r = this.checker.checkRow(record, line);
    if (!r.ok) {
      this.counts.rejectedRows++;
      for (const p of r.problems) this.report(p);
      for (const inc of r.rejected) {
        const k = `${inc.measureKey}|${inc.reason}`;
        const e = this.rejectedCounters.get(k);
        if (e) e.count += inc.count;
        else this.rejectedCounters.set(k, { ...inc });
      }
      for (const inc of r.rejectedWeights ?? []) this.rejectedWeightCounters.set(inc.reason, (this.rejectedWeightCounters.get(inc.reason) ?? 0) + inc.count);
    }
    return true;
  }

  /** After pass 1: the rejected-value counters to record, and whether to go on to pass 2. */
  endValidation(): { proceed: boolean; rejected: RejectedIncrement[]; rejectedWeights: RejectedWeightIncrement[] } {
    if (!this.headerDone && !this.fatalProblem) this.setFatal({ line: 1, column: '', message: 'the file is empty (a header row is required)' });
    const rejected = [...this.rejectedCounters.values()];
    const proceed = !this.fatalProblem && (this.options.skipInvalid || this.counts.rejectedRows === 0) && this.counts.rows > this.counts.rejectedRows;
    this.pass = 2;
    this.lines = new LineTracker();
    this.headerDone = false;
    const rejectedWeights = [...this.rejectedWeightCounters].map(([reason, count]) => ({ reason, count }));
    return { proceed, rejected, rejectedWeights };
  }

  /**
   * Pass 2: feed the same records again; valid rows go to the store in chunks. Returns false when reading can
   * stop — as a promise only when the engine's add() answered with one (see BulkImport in store/types.ts: with a
   * synchronous engine nothing here awaits).
   */
  insert(record: string[], pos: RecordPosition, writer: ChunkWriter): MaybePromise<boolean> {
    if (this.pass !== 2) throw new Error('insert() before endValidation()');
    if (this.stopped) return false;
    const line = this.lines.start(pos);
    if (!this.headerDone) {
      this.headerDone = true;
      this.checker.readHeader(record);
      return true;
    }
    const r = this.checker.checkRow(record, line);
    if (!r.ok) return true; // reported in pass 1 (only reached with skipInvalid)
    this.chunk.push(r.item);
    this.chunkLines.push(line);
    if (this.chunk.length >= this.chunkRows) {
      const done = this.flush(writer);
      if (isPromise(done)) return done.then(() => !this.stopped);
    }
    return !this.stopped;
  }

  endInsert(writer: ChunkWriter): MaybePromise<void> {
    if (!this.stopped) return this.flush(writer);
  }

  private flush(writer: ChunkWriter): MaybePromise<void> {
    if (this.chunk.length === 0) return;
    const items = this.chunk;
    const lines = this.chunkLines;
    this.chunk = [];
    this.chunkLines = [];
    return this.store(items, lines, writer);
  }

  /** Hand one chunk to the store; after conflicts, the rest of the chunk again (sync or async as the engine answers). */
  private store(items: ValidResponse[], lines: number[], writer: ChunkWriter): MaybePromise<void> {
    const outcome = writer.add(items);
    if (isPromise(outcome)) return outcome.then((o) => this.afterAdd(o, items, lines, writer));
    return this.afterAdd(outcome, items, lines, writer);
  }

  private afterAdd(outcome: IngestOutcome, items: ValidResponse[], lines: number[], writer: ChunkWriter): MaybePromise<void> {
    if (outcome.kind === 'stored') {
      this.created += outcome.created;
      this.repeated += outcome.repeated;
      this.dataVersion = outcome.dataVersion;
      this.insertedRows += items.length;
      return;
    }
    if (outcome.kind === 'closed' || outcome.kind === 'not-found') {
      this.setFatal({
        line: 0,
        column: '',
        message: outcome.kind === 'closed' ? `experiment ${this.options.experiment.id} is closed and accepts no new responses` : `experiment ${this.options.experiment.id} no longer exists`,
      });
      this.stopped = true;
      this.stoppedBy = outcome.kind;
      return;
    }
    // Conflicts: report them, then store the rest of the chunk (also in all-or-nothing mode, so that every
    // conflict in the file is found before the transaction is rolled back).
    const bad = new Set(outcome.conflicts.map((c) => c.index));
    for (const c of outcome.conflicts) {
      if (!this.badLines.has(lines[c.index])) {
        this.badLines.add(lines[c.index]);
        this.counts.rejectedRows++;
      }
      this.conflicts++;
      this.report({ line: lines[c.index], column: 'responseId', message: 'was already stored (or appears earlier in the file) with different content', value: c.responseId });
    }
    const rest = items.filter((_, i) => !bad.has(i));
    if (rest.length === 0) return;
    return this.store(rest, lines.filter((_, i) => !bad.has(i)), writer);
  }

  /** Should pass 2's transaction be committed? */
  shouldCommit(): boolean {
    return !this.fatalProblem && (this.options.skipInvalid || this.conflicts === 0);
  }

  summary(committed: boolean): ImportSummary {
    return {
      ...this.counts,
      created: committed ? this.created : 0,
      repeated: committed ? this.repeated : 0,
      committed,
      dataVersion: committed ? this.dataVersion : null,
      ignoredColumns: [...this.checker.ignoredColumns],
      kept: this.kept,
      fatal: this.fatalProblem,
      stoppedBy: this.stoppedBy,
    };
  }
}

/** A csv-parse error (unclosed quote, stray quote, record too large) as an import problem. */
// ---------------------------------------------------------------------------------------------------------
// Drivers: a CSV held in memory (HTTP) and a file streamed from disk (CLI)
// ---------------------------------------------------------------------------------------------------------

export interface ImportRun extends CsvImportOptions {
  store: Store;
  apiKeyId: number | null;
  /** Progress: pass 1 rows read, pass 2 rows stored. */
  onProgress?: (pass: 1 | 2, rows: number) => void;
}

const PROGRESS_EVERY = 50_000;

/**
 * Import a CSV held in memory (the HTTP route). Pass 1 streams the buffer in 64 KiB slices, so the event loop
 * keeps serving other requests while the rows are checked. Pass 2 runs inside ONE transaction. With an engine
 * that answers the import synchronously (SQLite, one connection shared by every request) it runs from BEGIN to
 * COMMIT without awaiting anything, so no other request's statement can run inside it; the price is that the
 * service answers nothing else while the rows are stored — which is why the route's body limit
 * (IMPORT_BODY_LIMIT) is small and larger files belong to the CLI. With an engine whose import owns its
 * connection (PostgreSQL) each chunk is awaited and other requests go on meanwhile.
 */
export async function importCsvBuffer(run: ImportRun, csv: Buffer | string): Promise<ImportSummary> {
  const imp = new CsvImport(run);
  const bytes = typeof csv === 'string' ? Buffer.from(csv) : csv;
  try {
    await streamRecords(() => Readable.from(slices(bytes)), (record, pos) => imp.validate(record, pos));
  } catch (err) {
    if (!(err instanceof CsvError)) throw err;
    imp.setFatal(parseErrorProblem(err, imp.checker.columnNames));
  }
  const { proceed, rejected, rejectedWeights } = imp.endValidation();
  if (rejected.length > 0) await run.store.responses.recordRejected(run.experiment.key, rejected);
  if (rejectedWeights.length > 0) await run.store.responses.recordRejectedWeights(run.experiment.key, rejectedWeights);
  if (!proceed) return imp.summary(false);
  // Records with their positions, parsed before the transaction begins (the body is small: IMPORT_BODY_LIMIT).
  const records = parseSync(bytes, {
    ...CSV_PARSE_OPTIONS,
    on_record: (record: string[], ctx: RecordPosition) => ({ record, lines: ctx.lines, empty_lines: ctx.empty_lines }),
  } as unknown as CsvParseOptions) as unknown as ({ record: string[] } & RecordPosition)[];
  const begun = run.store.bulk.beginImport(run.experiment.key, run.receivedAt, run.apiKeyId);
  const writer = isPromise(begun) ? await begun : begun;
  let committed = false;
  try {
    for (const entry of records) {
      const go = imp.insert(entry.record, entry, writer);
      if (!(isPromise(go) ? await go : go)) break;
    }
    const end = imp.endInsert(writer);
    if (isPromise(end)) await end;
    const commit = commitIfKept(imp, writer);
    committed = isPromise(commit) ? await commit : commit;
  } finally {
    const rb = writer.rollback();
    if (isPromise(rb)) await rb;
  }
  return imp.summary(committed);
}

/** Commit the open import when its rows may be kept (all valid, or skipInvalid); returns whether it did. */
function commitIfKept(imp: CsvImport, writer: BulkImport): MaybePromise<boolean> {
  if (!imp.shouldCommit()) return false;
  const done = writer.commit();
  return isPromise(done) ? done.then(() => true) : true;
}

function* slices(bytes: Buffer, size = 64 * 1024): Generator<Buffer> {
  for (let i = 0; i < bytes.length; i += size) yield bytes.subarray(i, Math.min(bytes.length, i + size));
}

async function streamRecords(source: () => Readable, each: (record: string[], pos: RecordPosition) => MaybePromise<boolean | void>): Promise<void> {
  // on_record hands over only the two position counters (cheaper than `info: true`, which copies a whole object).
  const parser = source().pipe(
    parseStream({
      ...CSV_PARSE_OPTIONS,
      on_record: (record: string[], ctx: RecordPosition) => ({ record, lines: ctx.lines, empty_lines: ctx.empty_lines }),
    } as unknown as CsvParseOptions),
  );
  let sinceYield = 0;
  try {
    for await (const entry of parser as AsyncIterable<{ record: string[] } & RecordPosition>) {
      const go = each(entry.record, entry);
      if ((isPromise(go) ? await go : go) === false) break;
      // Streams fed from memory (or a fast disk) run on microtasks and would starve other I/O: let the event
      // loop turn every 1,000 records.
      if (++sinceYield >= 1000) {
        sinceYield = 0;
        await new Promise((resolve) => setImmediate(resolve));
      }
    }
  } finally {
    parser.destroy();
  }
}

/**
 * Import a CSV file of any length, streaming it twice (validate, then insert in chunks inside one write
 * transaction). The connection must not be shared with anything else while this runs (the CLI opens its own).
 */
export async function importCsvFile(run: ImportRun, path: string): Promise<ImportSummary> {
  const imp = new CsvImport(run);
  try {
    await streamRecords(() => createReadStream(path), (record, pos) => {
      const go = imp.validate(record, pos);
      if (imp.counts.rows % PROGRESS_EVERY === 0 && imp.counts.rows > 0) run.onProgress?.(1, imp.counts.rows);
      return go;
    });
  } catch (err) {
    if (!(err instanceof CsvError)) throw err;
    imp.setFatal(parseErrorProblem(err, imp.checker.columnNames));
  }
  run.onProgress?.(1, imp.counts.rows);
  const { proceed, rejected, rejectedWeights } = imp.endValidation();
  if (rejected.length > 0) await run.store.responses.recordRejected(run.experiment.key, rejected);
  if (rejectedWeights.length > 0) await run.store.responses.recordRejectedWeights(run.experiment.key, rejectedWeights);
  if (!proceed) return imp.summary(false);
  const begun = run.store.bulk.beginImport(run.experiment.key, run.receivedAt, run.apiKeyId);
  const writer = isPromise(begun) ? await begun : begun;
  let committed = false;
  let lastProgress = 0;
  const progress = (go: boolean): boolean => {
    if (imp.insertedRows - lastProgress >= PROGRESS_EVERY) {
      lastProgress = imp.insertedRows;
      run.onProgress?.(2, imp.insertedRows);
    }
    return go;
  };
  try {
    await streamRecords(() => createReadStream(path), (record, pos) => {
      const go = imp.insert(record, pos, writer);
      return isPromise(go) ? go.then(progress) : progress(go);
    });
    await imp.endInsert(writer);
    run.onProgress?.(2, imp.insertedRows);
    committed = await commitIfKept(imp, writer);
  } finally {
    await writer.rollback();
  }
  return imp.summary(committed);
}
