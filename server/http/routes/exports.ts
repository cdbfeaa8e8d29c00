/**
 * Exports (read or admin key), streamed page by page from the store (db/exports.ts), so a study of any size is
 * exported in bounded memory and other requests keep being served meanwhile:
 *
 *   GET /v1/experiments/{id}/responses.csv     RFC 4180 CSV (csv-stringify): one row per response
 *   GET /v1/experiments/{id}/responses.ndjson  one JSON object per line
 *   GET /v1/experiments/{id}/comparisons.csv   one row per measure and pair: headline numbers and flag codes
 *   GET /v1/experiments/{id}/omnibus.csv       one row per measure and pair: the omnibus tests, then the pair's
 *
 * Columns of responses.csv: responseId, condition, respondent, one column per measure id (empty = not
 * answered), weight (experiments with survey weights only; empty = none), submittedAt, receivedAt, excluded
 * (true/false), excludedReason. comparisons.csv appends the weighted columns in an experiment with weights and the
 * covariate-adjusted columns (all declared covariates) in one that declares covariates. The file can be imported again
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
import { assertFamilySize, MAX_FAMILY_COMPARISONS, type ComparisonService, type FamilyOptions } from '../../services/comparisons/service.js';
import { FamilyQuery } from '../../schemas/comparisons.js';
import { problems } from '../../schemas/common.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { familyTargets, loadExperiment } from '../../services/targets.js';
import { WEIGHT_FIELD, weightsOf } from '../../schemas/weights.js';
import { covariatesOf } from '../../services/comparisons/adjusted.js';
import { declaredMargin } from '../../services/comparisons/margin.js';
import type { EquivalenceBody } from '../../schemas/equivalence.js';

export const EXPORT_PAGE_ROWS = 1000;

export function responseCsvColumns(e: ExperimentRecord): string[] {
  const weight = takesWeights(e) ? [WEIGHT_FIELD] : [];
  return ['responseId', 'condition', 'respondent', ...e.measures.map((m) => m.id), ...weight, 'submittedAt', 'receivedAt', 'excluded', 'excludedReason'];
}

function takesWeights(e: ExperimentRecord): boolean {
  return weightsOf(e.options).weights !== 'none';
}

function csvRecord(row: ExportRow, withWeight: boolean): (string | number)[] {
  return [
    row.responseId,
    row.condition,
    row.respondent ?? '',
    ...row.values.map((v) => (v === null ? '' : v)),
    ...(withWeight ? [row.weight === null ? '' : row.weight] : []),
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
    ...(takesWeights(e) ? { weight: row.weight } : {}),
    submittedAt: row.submittedAt,
    receivedAt: row.receivedAt,
    excluded: row.excluded,
    excludedReason: row.excludedReason,
  })}\n`;
}

async function* csvRows(store: Store, e: ExperimentRecord): AsyncGenerator<(string | number)[]> {
  for await (const page of store.bulk.exportResponsePages(e.key, e.measures.map((m) => m.key), EXPORT_PAGE_ROWS)) {
    for (const row of page) yield csvRecord(row, takesWeights(e));
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
/** The family downloads may also be refused as too large (422 family-too-large, MAX_FAMILY_COMPARISONS). */
const FAMILY_EXPORT_PROBLEMS = problems(400, 401, 403, 404, 422, 500);

/** The responses of a download route: 200 with a text file of `contentType` (documented by `example`), or a problem. */
function fileResponse(description: string, contentType: string, example: string, problemResponses = EXPORT_PROBLEMS) {
  return { 200: { description, content: { [contentType]: { schema: z.string().meta({ example }) } } }, ...problemResponses };
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
          '(Holm across the measures and pairs of this file by default; `adjust=bh` or `none`). flags lists the quality-flag codes separated by spaces. ' +
          "The equivalence columns (two one-sided tests against the measure's equivalenceMargin, intervals at 1 − 2α, verdict codes " +
          'equivalent, trivial, different or inconclusive) are empty for a measure without a margin. An empty cell ' +
          'means the quantity is not defined for these data (see the JSON comparison for the reason). ' +
          `At most ${MAX_FAMILY_COMPARISONS} rows (measures × pairs) per file: a larger one is refused with 422 family-too-large (ask for pairs=first).`,
        params: ExperimentParams,
        querystring: ComparisonsCsvQuery,
        response: fileResponse(
          'CSV file',
          'text/csv',
          `${COMPARISON_CSV_COLUMNS.join(',')}\r\n` +
            'satisfaction,bill-first,service-first,212,205,6.61,2.02,7.12,1.94,7,3,7,2,-0.51,-0.895,-0.125,-2.6,414.8,0.0097,0.029,' +
            '19188,0.011,0.033,-1,-1,0,-0.257,-0.117,0.95,holm,heavy_ties,431,0.5,0.21,-0.83,-0.19,inconclusive,0.25,-1,0,inconclusive\r\n',
          FAMILY_EXPORT_PROBLEMS,
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
      return reply.send(csvStream(comparisonCsvColumns(e), rows, csvOptions(q)) as unknown as string);
    },
  );

  app.get(
    '/v1/experiments/:id/omnibus.csv',
    {
      config: { access: { ...READ, scopes: [...READ.scopes] } },
      schema: {
        tags: ['exports'],
        summary: 'The omnibus comparisons as CSV: one row per measure and pair of conditions',
        description:
          `Columns: ${OMNIBUS_CSV_COLUMNS.join(', ')}. The omnibus numbers of a measure (Welch's ANOVA, the classic ANOVA, ` +
          'Kruskal–Wallis, flag codes) repeat on each of its pairs; then the pair: Games–Howell (difference a − b, t, df, p) and ' +
          "Dunn (z, two-sided p, two-sided Holm-adjusted p), and the equivalence tests when the measure has a margin. Same numbers " +
          'as GET …/comparisons/{measure}/omnibus, from the same cache. ' +
          `At most ${MAX_FAMILY_COMPARISONS} rows (measures × pairs) per file: a larger one is refused with 422 family-too-large.`,
        params: ExperimentParams,
        querystring: z.strictObject({ includeExcluded: FamilyQuery.shape.includeExcluded }),
        response: fileResponse(
          'CSV file',
          'text/csv',
          `${OMNIBUS_CSV_COLUMNS.join(',')}\r\n` +
            'satisfaction,3,630,4.2,2,410.3,0.016,0.01,4.1,0.017,0.013,8.3,2,0.016,0.013,,bill-first,service-first,-0.51,-2.6,414.8,0.027,' +
            '-2.5,0.012,0.037,0.5,0.21,inconclusive,0.25,inconclusive,431\r\n',
          FAMILY_EXPORT_PROBLEMS,
        ),
      },
    },
    async (request, reply) => {
      const e = await loadExperiment(store, request.params.id);
      const rows = await omnibusRows(opts.comparisons, e, request.query.includeExcluded === 'true');
      download(reply, 'text/csv; charset=utf-8', `${e.id}-omnibus.csv`);
      return reply.send(csvStream([...OMNIBUS_CSV_COLUMNS], rows) as unknown as string);
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
  // Equivalence (empty when the measure has no margin): both TOSTs, their (1 − 2α) intervals and verdict codes.
  'equivalenceMargin', 'welchTostP', 'welchTostLower', 'welchTostUpper', 'welchTostVerdict',
  'rankTostP', 'rankTostLower', 'rankTostUpper', 'rankTostVerdict',
] as const;

export const OMNIBUS_CSV_COLUMNS = [
  'measure', 'conditions', 'n', 'welchF', 'welchDf1', 'welchDf2', 'welchP', 'welchOmegaSquared',
  'classicF', 'classicP', 'etaSquared', 'kruskalH', 'kruskalDf', 'kruskalP', 'epsilonSquared', 'omnibusFlags',
  'a', 'b', 'meanDifference', 'gamesHowellT', 'gamesHowellDf', 'gamesHowellP', 'dunnZ', 'dunnP', 'dunnPHolm',
  'equivalenceMargin', 'welchTostP', 'welchTostVerdict', 'rankTostP', 'rankTostVerdict', 'dataVersion',
] as const;

/** One row per measure and pair: the omnibus numbers of the measure (repeated on each of its pairs), then the pair's. */
export async function omnibusRows(service: ComparisonService, e: ExperimentRecord, includeExcluded: boolean): Promise<(string | number)[][]> {
  assertFamilySize(e, 'all', true, 'This omnibus file');
  const rows: (string | number)[][] = [];
  for (const m of e.measures) {
    // One measure at a time, letting other requests run in between (each omnibus is cached on its own).
    await new Promise((resolve) => setImmediate(resolve));
    const { body: o } = await service.omnibus(e, m, { includeExcluded, margin: declaredMargin(e, m) });
    const head = [
      o.measure,
      o.conditions.length,
      o.groups.reduce((s, g) => s + g.n, 0),
      cell(o.welchAnova.f),
      cell(o.welchAnova.df1),
      cell(o.welchAnova.df2),
      cell(o.welchAnova.p),
      cell(o.welchAnova.omegaSquared),
      cell(o.classicAnova.f),
      cell(o.classicAnova.p),
      cell(o.classicAnova.etaSquared),
      cell(o.kruskalWallis.h),
      cell(o.kruskalWallis.df),
      cell(o.kruskalWallis.p),
      cell(o.kruskalWallis.epsilonSquared),
      o.flags.map((f) => f.code).join(' '),
    ];
    for (const p of o.pairs) {
      rows.push([
        ...head,
        p.a,
        p.b,
        cell(p.gamesHowell.meanDifference),
        cell(p.gamesHowell.t),
        cell(p.gamesHowell.df),
        cell(p.gamesHowell.p),
        cell(p.dunn.z),
        cell(p.dunn.p),
        cell(p.dunn.pHolm),
        ...equivalenceCells(p.equivalence).filter((_, i) => [0, 1, 4, 5, 8].includes(i)),
        o.dataVersion,
      ]);
    }
  }
  return rows;
}

/** The nine equivalence cells of comparisons.csv (all empty without a margin). */
function equivalenceCells(eq: EquivalenceBody | null): (string | number)[] {
  if (!eq) return Array.from({ length: 9 }, () => '');
  return [
    eq.margin,
    cell(eq.welch.p),
    cell(eq.welch.ci.lower),
    cell(eq.welch.ci.upper),
    eq.welch.verdict?.code ?? '',
    cell(eq.rank.p),
    cell(eq.rank.ci.lower),
    cell(eq.rank.ci.upper),
    eq.rank.verdict?.code ?? '',
  ];
}

/** Numbers as CSV cells: null (undefined quantity) → empty. */
function cell(v: number | null | undefined): number | string {
  return v === null || v === undefined ? '' : v;
}

/** Columns appended in an experiment with survey weights (the `weighted` block; differences a − b). */
export const WEIGHTED_CSV_COLUMNS = [
  'weightedMeanA', 'weightedMeanB', 'weightedMeanDifference', 'weightedLower', 'weightedUpper', 'weightedSe', 'weightedT',
  'weightedDf', 'weightedP', 'weightedRankEstimate', 'weightedRankP', 'effectiveNA', 'effectiveNB',
] as const;

/** Columns appended in an experiment that declares covariates (adjusted for all of them; `adjusted` block). */
export const ADJUSTED_CSV_COLUMNS = [
  'covariates', 'adjustedEstimate', 'adjustedLower', 'adjustedUpper', 'adjustedSe', 'adjustedP', 'unadjustedEstimate',
  'unadjustedSe', 'narrowingPercent', 'adjustedN',
] as const;

/** The columns of comparisons.csv for this experiment. */
export function comparisonCsvColumns(e: ExperimentRecord): string[] {
  return [...COMPARISON_CSV_COLUMNS, ...(takesWeights(e) ? WEIGHTED_CSV_COLUMNS : []), ...(covariatesOf(e).length > 0 ? ADJUSTED_CSV_COLUMNS : [])];
}

type FamilyComparison = Awaited<ReturnType<ComparisonService['familyBody']>>['comparisons'][number];

function weightedCells(c: FamilyComparison): (string | number)[] {
  const w = c.weighted;
  if (!w) return WEIGHTED_CSV_COLUMNS.map(() => '');
  return [
    cell(w.groups.a.mean), cell(w.groups.b.mean), cell(w.tTest.meanDifference), cell(w.tTest.ci.lower), cell(w.tTest.ci.upper),
    cell(w.tTest.se), cell(w.tTest.t), cell(w.tTest.df), cell(w.tTest.p), cell(w.rankTest.estimate), cell(w.rankTest.p),
    cell(w.groups.a.effectiveN), cell(w.groups.b.effectiveN),
  ];
}

/** The adjusted cells of every family entry (all declared covariates; the outcome's own row when it is one is empty). */
async function adjustedCells(service: ComparisonService, e: ExperimentRecord, options: Partial<FamilyOptions>, comparisons: FamilyComparison[]): Promise<(string | number)[][]> {
  const covariates = covariatesOf(e);
  const full = { alternative: options.alternative ?? 'two-sided', confidenceLevel: options.confidenceLevel ?? 0.95, includeExcluded: options.includeExcluded ?? false } as const;
  const targets = familyTargets(e, options.pairs ?? 'first', options.includeCovariates ?? false);
  const out: (string | number)[][] = [];
  for (const c of comparisons) {
    const t = targets.find((x) => x.measure.id === c.measure && x.a.id === c.a && x.b.id === c.b);
    const used = covariates.filter((m) => t && m.key !== t.measure.key);
    if (!t || used.length === 0) {
      out.push(ADJUSTED_CSV_COLUMNS.map(() => ''));
      continue;
    }
    const adj = (await service.comparisonWithAdjustment(t, full, used)).body.adjusted!;
    out.push([
      used.map((m) => m.id).join(' '), cell(adj.adjusted.estimate), cell(adj.adjusted.ci.lower), cell(adj.adjusted.ci.upper), cell(adj.adjusted.se),
      cell(adj.adjusted.p), cell(adj.unadjusted.estimate), cell(adj.unadjusted.se), cell(adj.narrowingPercent), adj.n,
    ]);
  }
  return out;
}

export async function comparisonRows(service: ComparisonService, e: ExperimentRecord, options: Partial<FamilyOptions>): Promise<(string | number)[][]> {
  const family = await service.familyBody(e, options);
  const base = baseComparisonRows(family.comparisons);
  const weighted = takesWeights(e);
  const adjusted = covariatesOf(e).length > 0 ? await adjustedCells(service, e, options, family.comparisons) : null;
  return base.map((row, i) => [...row, ...(weighted ? weightedCells(family.comparisons[i]) : []), ...(adjusted ? adjusted[i] : [])]);
}

function baseComparisonRows(comparisons: FamilyComparison[]): (string | number)[][] {
  return comparisons.map((c) => [
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
    ...equivalenceCells(c.equivalence),
  ]);
}
