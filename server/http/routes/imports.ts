/**
 * POST /v1/experiments/{id}/responses/import (text/csv; ingest or admin key): the CSV import of server/services/ingest/csv-import.ts
 * over HTTP. All or nothing by default (422 listing every bad row by line and column, nothing stored);
 * `?skipInvalid=true` stores the good rows and lists the rejected ones in the answer.
 *
 * The body is read into memory (at most IMPORT_BODY_LIMIT = 2 MiB, about 65,000 rows of three measures),
 * checked in a first pass (which yields to other requests) and inserted in a second pass inside one transaction
 * (which does not: the service pauses while the rows are stored). Larger files: the CLI (`splitballot import`),
 * which streams from disk.
 */
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import { importCsvBuffer } from '../../services/ingest/csv-import.js';
import { describeProblem, IMPORT_BODY_LIMIT, MAX_KEPT_PROBLEMS, type ImportProblem } from '../../services/ingest/csv-rows.js';
import type { Store } from '../../store/types.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';
import { ExperimentParams } from '../../schemas/responses.js';
import { bodyPassThroughCompiler } from '../validator.js';
import { experimentNotFound, loadExperiment } from '../../services/targets.js';

export const ImportRejectSchema = z
  .object({
    line: z.number().int().describe('Physical line of the file where the row starts (1 = the header)'),
    column: z.string().describe('Column name, or "" for the whole row'),
    message: z.string(),
    value: z.string().optional().describe('The cell as read (shortened)'),
  })
  .meta({ id: 'ImportReject' });

export const ImportResultSchema = z
  .object({
    rows: z.number().int().describe('Data rows read (the header not counted)'),
    created: z.number().int().describe('Responses stored by this import'),
    repeated: z.number().int().describe('Rows that repeated an already stored response (same responseId and content); nothing changed for them'),
    rejectedRows: z.number().int().describe('Rows not stored because of a problem (only with skipInvalid=true)'),
    dataVersion: z.number().int().nullable().describe("The experiment's data version after the import (null when nothing was written)"),
    ignoredColumns: z.array(z.string()).describe('Columns of the CSV export that an import ignores (receivedAt, excluded, excludedReason)'),
    rejects: z.array(ImportRejectSchema).describe(`Every problem, by line and column (the first ${MAX_KEPT_PROBLEMS.toLocaleString('en')})`),
    rejectsTruncated: z.boolean().describe('True when there were more problems than listed'),
  })
  .meta({ id: 'ImportResult' });

const ImportQuery = z.object({
  skipInvalid: z
    .enum(['true', 'false'])
    .optional()
    .describe('true: store the good rows and list the rejected ones; default false: all or nothing'),
});

const EXAMPLE_CSV =
  'responseId,condition,respondent,satisfaction,trust,fair_price\n' +
  'r-0001,bill-first,,7,5,42.5\n' +
  'r-0002,service-first,panel-118,9,6,35\n' +
  'r-0003,bill-first,,3,2,"60"\n';

function problemPath(p: ImportProblem): string {
  return p.line > 0 ? `line ${p.line}${p.column ? `, column ${p.column}` : ''}` : p.column;
}

export async function importRoutes(base: FastifyInstance, opts: { store: Store }): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  const { store } = opts;

  // text/csv is only understood inside this plugin (the parser is encapsulated here).
  app.addContentTypeParser(['text/csv', 'application/csv'], { parseAs: 'buffer', bodyLimit: IMPORT_BODY_LIMIT }, (_request, body, done) => {
    done(null, body);
  });

  app.post(
    '/v1/experiments/:id/responses/import',
    {
      config: { access: { scopes: ['ingest', 'admin'], experimentParam: 'id' } },
      bodyLimit: IMPORT_BODY_LIMIT,
      validatorCompiler: bodyPassThroughCompiler,
      schema: {
        tags: ['responses'],
        summary: 'Import responses from a CSV file (text/csv): all are stored, or none',
        description:
          'Columns (header row required): `responseId` and `condition` (required), `respondent` and `submittedAt` (optional), and one ' +
          'column per measure id; an empty cell means "not answered". The columns `receivedAt`, `excluded` and `excludedReason` ' +
          'written by the CSV export are accepted and ignored (exclusions are not imported). Every row is checked exactly like a ' +
          'posted response (numbers as in an HTML form: `7`, `-0.5`, `1e2`; not `7,5` or ` 7`). By default the import is all or ' +
          'nothing: any problem answers 422 listing every problem by line and column, and nothing is stored. With ' +
          '`?skipInvalid=true` the good rows are stored and the rejected ones listed. A row whose responseId is already stored with ' +
          'the same content is counted as repeated (so sending a file twice is safe). The body may be up to 2 MiB (about 65,000 ' +
          'rows of three measures), because the rows are stored in one write transaction during which the service answers no ' +
          'other request; larger files: `splitballot import --experiment ID FILE.csv`, which streams from disk.',
        consumes: ['text/csv'],
        params: ExperimentParams,
        querystring: ImportQuery,
        body: z.string().meta({ description: 'RFC 4180 CSV, UTF-8 (a byte-order mark is allowed)', example: EXAMPLE_CSV }),
        response: {
          201: ImportResultSchema.describe('At least one response was stored'),
          200: ImportResultSchema.describe('Nothing new was stored (every row repeated a stored response, or none was valid with skipInvalid)'),
          ...problems(400, 401, 403, 404, 409, 413, 415, 422, 500),
        },
      },
    },
    async (request, reply) => {
      const contentType = (request.headers['content-type'] ?? '').toLowerCase();
      if (!contentType.startsWith('text/csv') && !contentType.startsWith('application/csv')) {
        throw new ProblemError('unsupported-media-type', 'Send the file as text/csv.');
      }
      const id = request.params.id;
      const experiment = await loadExperiment(store, id);
      if (experiment.status !== 'open') throw new ProblemError('experiment-closed', `Experiment ${id} is closed and accepts no new responses.`);
      const body = request.body as unknown;
      const csv = Buffer.isBuffer(body) ? body : Buffer.from(typeof body === 'string' ? body : '');
      const skipInvalid = request.query.skipInvalid === 'true';
      const summary = await importCsvBuffer(
        { store, experiment, receivedAt: new Date().toISOString(), skipInvalid, apiKeyId: request.principal?.keyId ?? null },
        csv,
      );
      const truncated = summary.problems > summary.kept.length;
      if (summary.stoppedBy === 'closed') throw new ProblemError('experiment-closed', `Experiment ${id} is closed and accepts no new responses.`);
      if (summary.stoppedBy === 'not-found') throw experimentNotFound(id);
      if (summary.fatal || (!skipInvalid && summary.problems > 0)) {
        const listed = truncated ? ` The first ${summary.kept.length.toLocaleString('en')} are listed.` : '';
        const detail = summary.fatal
          ? `The file cannot be imported: ${describeProblem(summary.fatal)}. Nothing was stored.`
          : `${summary.rejectedRows} of ${summary.rows} rows have problems (${summary.problems} in all); nothing was stored.${listed}`;
        throw new ProblemError('validation-failed', detail, {
          errors: summary.kept.map((p) => ({ path: problemPath(p), message: p.message, ...(p.value !== undefined ? { value: p.value } : {}) })),
        });
      }
      request.log.info({ experiment: id, rows: summary.rows, created: summary.created, rejectedRows: summary.rejectedRows }, 'csv import');
      return reply.code(summary.created > 0 ? 201 : 200).send({
        rows: summary.rows,
        created: summary.created,
        repeated: summary.repeated,
        rejectedRows: summary.rejectedRows,
        dataVersion: summary.dataVersion,
        ignoredColumns: summary.ignoredColumns,
        rejects: summary.kept,
        rejectsTruncated: truncated,
      });
    },
  );
}
