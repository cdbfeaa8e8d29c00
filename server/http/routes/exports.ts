/**
 * Exports (read or admin key), streamed page by page from the store (db/exports.ts), so a study of any size is
 * exported in bounded memory and other requests keep being served meanwhile:
 *
 *   GET /v1/experiments/{id}/responses.csv     RFC 4180 CSV (csv-stringify): one row per response
 *   GET /v1/experiments/{id}/responses.ndjson  one JSON object per line
 *   GET /v1/experiments/{id}/comparisons.csv   one row per measure and pair: headline numbers and flag codes
 *
 * Columns of responses.csv: responseId, condition, respondent, one column per measure id (empty = not
 * answered), submittedAt, receivedAt, excluded (true/false), excludedReason. The file can be imported again
 * (`splitballot import` ignores receivedAt, excluded and excludedReason). Numbers are written in JavaScript's
 * shortest round-trip form, so a value survives export → import unchanged.
 *
 * Spreadsheet safety (CSV injection, after OWASP's "CSV Injection" guidance): by default every TEXT cell that begins
 * with `=`, `+`, `-`, `@`, a tab or a carriage return is written with a leading apostrophe and quoted, so that a
 * spreadsheet shows it as text instead of running it as a formula. Numbers are never changed (a negative value stays
 * -3). `?spreadsheetSafe=false` writes text cells unchanged (for a file to import again); `?bom=true` starts the file
 * with a UTF-8 byte-order mark, which some spreadsheets need to read UTF-8.
 */
import { Readable } from 'node:stream';
import { stringify } from 'csv-stringify';
import type { FastifyInstance, FastifyReply } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { ExperimentRecord, ExportRow, Store } from '../../store/types.js';
import type { ComparisonService, FamilyOptions } from '../../services/comparisons/service.js';
import { FamilyQuery } from '../../schemas/comparisons.js';
import { problems } from '../../schemas/common.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { loadExperiment } from '../../services/targets.js';

export const EXPORT_PAGE_ROWS = 1000;

export function responseCsvColumns(e: ExperimentRecord): string[] {
  return ['responseId', 'condition', 'respondent', ...e.measures.map((m) => m.id), 'submittedAt', 'receivedAt', 'excluded', 'excludedReason'];
}

function csvRecord(row: ExportRow): (string | number)[] {
  return [
    row.responseId,
    row.condition,
    row.respondent ?? '',
    ...row.values.map((v) => (v === null ? '' : v)),
    row.submittedAt,
    row.receivedAt,
    row.excluded ? 'true' : 'false',
    row.excludedReason ?? '',
  ];
}

function ndjsonRecord(e: ExperimentRecord, row: ExportRow): string {
  const values: Record<string, number> = {};
  e.measures.forEach((m, i) => {
    const v = row.values[i];
    if (v !== null) values[m.id] = v;
  });
  return `${JSON.stringify({
    responseId: row.responseId,
    condition: row.condition,
    respondent: row.respondent,
    values,
    submittedAt: row.submittedAt,
    receivedAt: row.receivedAt,
    excluded: row.excluded,
    excludedReason: row.excludedReason,
  })}\n`;
}

async function* csvRows(store: Store, e: ExperimentRecord): AsyncGenerator<(string | number)[]> {
  for await (const page of store.bulk.exportResponsePages(e.key, e.measures.map((m) => m.key), EXPORT_PAGE_ROWS)) {
    for (const row of page) yield csvRecord(row);
  }
}

async function* ndjsonChunks(store: Store, e: ExperimentRecord): AsyncGenerator<string> {
  for await (const page of store.bulk.exportResponsePages(e.key, e.measures.map((m) => m.key), EXPORT_PAGE_ROWS)) {
    let chunk = '';
    for (const row of page) chunk += ndjsonRecord(e, row);
    yield chunk;
  }
}

/** First characters that make a spreadsheet read a cell as a formula (OWASP, CSV Injection). */
const FORMULA_START = /^[=+\-@\t\r]/;

/** A text cell made safe to open in a spreadsheet: a leading apostrophe before a formula-starting character. */
export function neutraliseCell(text: string): string {
  return FORMULA_START.test(text) ? `'${text}` : text;
}

export interface CsvOptions {
  /** Neutralise text cells that a spreadsheet would run as formulas (default true). Numbers are never changed. */
  spreadsheetSafe?: boolean;
  /** Start with a UTF-8 byte-order mark (default false). */
  bom?: boolean;
}

function neutraliseRecord(record: (string | number | null)[]): (string | number | null)[] {
  return record.map((c) => (typeof c === 'string' ? neutraliseCell(c) : c));
}

async function* neutralised(records: AsyncIterable<(string | number | null)[]> | Iterable<(string | number | null)[]>) {
  for await (const r of records) yield neutraliseRecord(r);
}

/**
 * An RFC 4180 CSV stream (CRLF line ends, fields with commas, quotes or line breaks quoted, quotes doubled); text cells
 * neutralised for spreadsheets unless `spreadsheetSafe: false` (neutralised cells are quoted too).
 */
export function csvStream(
  columns: string[],
  records: AsyncIterable<(string | number | null)[]> | Iterable<(string | number | null)[]>,
  options: CsvOptions = {},
): Readable {
  const safe = options.spreadsheetSafe !== false;
  const stringifier = stringify({
    header: true,
    columns: safe ? columns.map(neutraliseCell) : columns,
    record_delimiter: 'windows',
    bom: options.bom === true,
    quoted_match: safe ? [/[\r\n]/, /^\s|\s$/, /^'[=+\-@\t\r]/] : [/[\r\n]/, /^\s|\s$/],
  });
  const source = Readable.from(safe ? neutralised(records) : records, { objectMode: true });
  source.on('error', (err) => stringifier.destroy(err));
  return source.pipe(stringifier);
}

function download(reply: FastifyReply, type: string, filename: string): FastifyReply {
  return reply
    .type(type)
    .header('content-disposition', `attachment; filename="${filename}"`)
    .header('cache-control', 'no-store');
}

const ComparisonsCsvQuery = FamilyQuery.extend({
  spreadsheetSafe: z.enum(['true', 'false']).default('true').describe('As for responses.csv: neutralise formula-like text cells (default true)'),
  bom: z.enum(['true', 'false']).default('false').describe('true: start the file with a UTF-8 byte-order mark'),
  pairs: z.enum(['first', 'all']).default('all').describe('all (default): every pair of conditions; first: the first two conditions'),
});

const READ = { scopes: ['read', 'admin'] as const, experimentParam: 'id' };

const CsvFileQuery = z.object({
  spreadsheetSafe: z
    .enum(['true', 'false'])
    .default('true')
    .describe(
      "true (default): text cells beginning with =, +, -, @, tab or carriage return get a leading apostrophe (OWASP's CSV-injection " +
        'guidance), so a spreadsheet does not run them as formulas; numbers are never changed. false: text exactly as stored (for `splitballot import`).',
    ),
  bom: z.enum(['true', 'false']).default('false').describe('true: start the file with a UTF-8 byte-order mark, for spreadsheets that need one to read UTF-8'),
});

function csvOptions(q: { spreadsheetSafe?: 'true' | 'false'; bom?: 'true' | 'false' }): CsvOptions {
  return { spreadsheetSafe: q.spreadsheetSafe !== 'false', bom: q.bom === 'true' };
}
const EXPORT_PROBLEMS = problems(400, 401, 403, 404, 500);

/** The responses of a download route: 200 with a text file of `contentType` (documented by `example`), or a problem. */
function fileResponse(description: string, contentType: string, example: string) {
  return { 200: { description, content: { [contentType]: { schema: z.string().meta({ example }) } } }, ...EXPORT_PROBLEMS };
}

export async function exportRoutes(base: FastifyInstance, opts: { store: Store; comparisons: ComparisonService }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  app.get(
    '/v1/experiments/:id/responses.csv',
    {
      config: { access: { ...READ, scopes: [...READ.scopes] } },
      schema: {
        tags: ['exports'],
        summary: 'Every response as CSV (RFC 4180), streamed',
        description:
          'One row per stored response, in the order they were stored: responseId, condition, respondent, one column per measure id ' +
          '(empty = not answered), submittedAt, receivedAt, excluded (true/false), excludedReason. Lines end with CRLF; fields ' +
          'containing commas, quotes or line breaks are quoted, quotes doubled. Text cells that a spreadsheet would run as a formula ' +
          '(first character =, +, -, @, tab or carriage return) get a leading apostrophe unless `spreadsheetSafe=false`. Responses stored ' +
          'after the export began are not included. The file can be imported into another service with `splitballot import` (the last ' +
          'three columns are ignored there; export with `spreadsheetSafe=false` for that).',
        params: ExperimentParams,
        querystring: CsvFileQuery,
        response: fileResponse(
          'CSV file',
          'text/csv',
          'responseId,condition,respondent,satisfaction,trust,fair_price,submittedAt,receivedAt,excluded,excludedReason\r\n' +
            'r-0001,bill-first,,7,5,42.5,2027-03-01T12:00:00.000Z,2027-03-01T12:00:01.204Z,false,\r\n',
        ),
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      download(reply, 'text/csv; charset=utf-8', `${e.id}-responses.csv`);
      return reply.send(csvStream(responseCsvColumns(e), csvRows(store, e), csvOptions(request.query)) as unknown as string);
    },
  );

  app.get(
    '/v1/experiments/:id/responses.ndjson',
    {
      config: { access: { ...READ, scopes: [...READ.scopes] } },
      schema: {
        tags: ['exports'],
        summary: 'Every response as newline-delimited JSON, streamed',
        description:
          'One JSON object per line (application/x-ndjson), in the order the responses were stored: ' +
          '{responseId, condition, respondent, values: {measure: number}, submittedAt, receivedAt, excluded, excludedReason}. ' +
          'Unanswered measures are absent from values.',
        params: ExperimentParams,
        response: fileResponse(
          'NDJSON file',
          'application/x-ndjson',
          '{"responseId":"r-0001","condition":"bill-first","respondent":null,"values":{"satisfaction":7,"trust":5,"fair_price":42.5},' +
            '"submittedAt":"2027-03-01T12:00:00.000Z","receivedAt":"2027-03-01T12:00:01.204Z","excluded":false,"excludedReason":null}\n',
        ),
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      download(reply, 'application/x-ndjson; charset=utf-8', `${e.id}-responses.ndjson`);
      return reply.send(Readable.from(ndjsonChunks(store, e)) as unknown as string);
    },
  );

  app.get(
    '/v1/experiments/:id/comparisons.csv',
    {
      config: { access: { ...READ, scopes: [...READ.scopes] } },
      schema: {
        tags: ['exports'],
        summary: 'The comparisons as CSV: one row per measure and pair',
        description:
          `Columns: ${COMPARISON_CSV_COLUMNS.join(', ')}. Differences are a − b. p-values are given unadjusted and adjusted ` +
          '(Holm across the measures and pairs of this file by default; `adjust=bh` or `none`). flags lists the quality-flag codes separated by spaces. An empty cell ' +
          'means the quantity is not defined for these data (see the JSON comparison for the reason).',
        params: ExperimentParams,
        querystring: ComparisonsCsvQuery,
        response: fileResponse(
          'CSV file',
          'text/csv',
          `${COMPARISON_CSV_COLUMNS.join(',')}\r\n` +
            'satisfaction,bill-first,service-first,212,205,6.61,2.02,7.12,1.94,7,3,7,2,-0.51,-0.895,-0.125,-2.6,414.8,0.0097,0.029,' +
            '19188,0.011,0.033,-1,-1,0,-0.257,-0.117,0.95,holm,heavy_ties,431\r\n',
        ),
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const q = request.query;
      const rows = await comparisonRows(opts.comparisons, e, {
        pairs: q.pairs,
        adjust: q.adjust,
        alternative: q.alternative,
        confidenceLevel: q.confidenceLevel,
        includeExcluded: q.includeExcluded === 'true',
      });
      download(reply, 'text/csv; charset=utf-8', `${e.id}-comparisons.csv`);
      return reply.send(csvStream([...COMPARISON_CSV_COLUMNS], rows, csvOptions(q)) as unknown as string);
    },
  );
}

// ---------------------------------------------------------------------------------------------------------
// comparisons.csv
// ---------------------------------------------------------------------------------------------------------

export const COMPARISON_CSV_COLUMNS = [
  'measure', 'a', 'b', 'nA', 'nB', 'meanA', 'sdA', 'meanB', 'sdB', 'medianA', 'iqrA', 'medianB', 'iqrB',
  'meanDifference', 'meanDifferenceLower', 'meanDifferenceUpper', 'welchT', 'welchDf', 'welchP', 'welchPAdjusted',
  'mannWhitneyU', 'mannWhitneyP', 'mannWhitneyPAdjusted', 'hodgesLehmann', 'hodgesLehmannLower', 'hodgesLehmannUpper',
  'hedgesG', 'rankBiserial', 'confidenceLevel', 'adjust', 'flags', 'dataVersion',
] as const;

/** Numbers as CSV cells: null (undefined quantity) → empty. */
function cell(v: number | null | undefined): number | string {
  return v === null || v === undefined ? '' : v;
}

export async function comparisonRows(service: ComparisonService, e: ExperimentRecord, options: Partial<FamilyOptions>): Promise<(string | number)[][]> {
  const family = await service.familyBody(e, options);
  return family.comparisons.map((c) => [
    c.measure,
    c.a,
    c.b,
    c.groups.a.n,
    c.groups.b.n,
    cell(c.groups.a.mean),
    cell(c.groups.a.sd),
    cell(c.groups.b.mean),
    cell(c.groups.b.sd),
    cell(c.groups.a.median),
    cell(c.groups.a.iqr),
    cell(c.groups.b.median),
    cell(c.groups.b.iqr),
    cell(c.welch.meanDifference),
    cell(c.welch.ci.lower),
    cell(c.welch.ci.upper),
    cell(c.welch.t),
    cell(c.welch.df),
    cell(c.welch.p),
    cell(c.adjusted.welchP),
    cell(c.mannWhitney.u),
    cell(c.mannWhitney.p),
    cell(c.adjusted.mannWhitneyP),
    cell(c.hodgesLehmann.estimate),
    cell(c.hodgesLehmann.ci.lower),
    cell(c.hodgesLehmann.ci.upper),
    cell(c.effectSizes.hedgesG),
    cell(c.effectSizes.rankBiserial),
    c.welch.ci.level,
    c.adjusted.method,
    c.flags.map((f) => f.code).join(' '),
    c.dataVersion,
  ]);
}
