/**
 * CSV import: POST /v1/experiments/{id}/responses/import and `splitballot import`. All or nothing with every
 * problem by line and column, --skip-invalid with a rejects file, repeats, conflicts across chunks, quoting,
 * unreadable CSV, header problems, access, and the import → export round trip. All data are invented.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { parse } from 'csv-parse/sync';
import { describe, expect, it } from 'vitest';
import { importCsvBuffer } from '../../../server/services/ingest/csv-import.js';
import { IMPORT_BODY_LIMIT } from '../../../server/services/ingest/csv-rows.js';
import { cli as runCliCaptured, dumpAppTables, eachTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

const URL = `/v1/experiments/${WATER_ID}/responses/import`;
const HEADER = 'responseId,condition,respondent,satisfaction,trust,fair_price';

let t: TestApp;
eachTestApp((app) => (t = app));

async function dataTables() {
  const d = await dumpAppTables(t);
  delete d.api_keys;
  delete d.rejected_value_counts;
  return d;
}

/** Deterministic invented rows. */
function rows(n: number, prefix = 'imp'): string[] {
  return Array.from({ length: n }, (_, i) => `${prefix}-${i},${i % 2 === 0 ? 'bill-first' : 'service-first'},,${(i * 7) % 11},${1 + ((i * 3) % 7)},${((i * 37) % 2000) / 10}`);
}

function post(body: string, query = '', key?: string) {
  return t.request({ method: 'POST', url: `${URL}${query}`, headers: { 'content-type': 'text/csv' }, payload: body, key });
}

function cli(args: string[]) {
  return runCliCaptured(args, t.cliEnv());
}

describe('POST …/responses/import', () => {
  it('stores every row, then counts a second identical import as repeated', async () => {
    const csv = [HEADER, ...rows(250)].join('\n') + '\n';
    const first = await post(csv);
    expect(first.statusCode).toBe(201);
    expect(first.json()).toEqual({ rows: 250, created: 250, repeated: 0, rejectedRows: 0, dataVersion: 1, ignoredColumns: [], rejects: [], rejectsTruncated: false });
    const again = await post(csv);
    expect(again.statusCode).toBe(200);
    expect(again.json()).toMatchObject({ rows: 250, created: 0, repeated: 250, dataVersion: 1 });
    const def = (await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}` })).json();
    expect(def.counts.responses).toBe(250);
    // The per-value counts agree with the raw values (the repository's bookkeeping was used).
    const [{ n: check }] = await t.sql(
      `SELECT count(*) AS n FROM (SELECT measure_id, condition_id, excluded, value, count(*) AS n FROM response_values GROUP BY 1,2,3,4) g
       LEFT JOIN value_counts c USING (measure_id, condition_id, excluded, value)
       WHERE (c.count IS NULL OR c.count <> g.n) AND g.measure_id IN (SELECT id FROM measures WHERE is_integer = ?)`,
      t.databaseUrl ? true : 1,
    );
    expect(check).toBe(0);
  });

  it('all or nothing: every bad row is reported by line and column, nothing is stored', async () => {
    const before = await dataTables();
    const csv = [
      HEADER,
      'a-1,bill-first,,7,5,42.5', // line 2: fine
      'a-2,bill-first,,11,5,42.5', // line 3: satisfaction out of range
      'a-3,lunch-first,,7,8,abc', // line 4: condition, trust, fair_price
      'a-4,service-first,,7.5,5,10', // line 5: not integer
      ',service-first,,7,5,10', // line 6: responseId missing
      'a-6,service-first,,7,5', // line 7: a field missing
      'a-7,service-first,,,5,10', // line 8: required satisfaction missing
    ].join('\r\n');
    const res = await post(csv);
    expect(res.statusCode).toBe(422);
    expect(res.headers['content-type']).toContain('application/problem+json');
    const body = res.json();
    expect(body.detail).toBe('6 of 7 rows have problems (8 in all); nothing was stored.');
    expect(body.errors).toEqual([
      { path: 'line 3, column satisfaction', message: '11 is outside the scale from 0 to 10', value: '11' },
      { path: 'line 4, column condition', message: 'is not a condition of this experiment (conditions: bill-first, service-first)', value: 'lunch-first' },
      { path: 'line 4, column trust', message: '8 is outside the scale from 1 to 7', value: '8' },
      { path: 'line 4, column fair_price', message: '"abc" is not a number', value: 'abc' },
      { path: 'line 5, column satisfaction', message: 'must be a whole number (got 7.5)', value: '7.5' },
      { path: 'line 6, column responseId', message: 'is required in an import (so that importing the same file again stores nothing twice)' },
      { path: 'line 7', message: 'has 5 fields; the header has 6' },
      { path: 'line 8, column satisfaction', message: 'is required' },
    ]);
    expect(await dataTables()).toEqual(before);
    // Refused values are counted like refused ingest values.
    const rejected = await t.store.responses.getRejectedCounts((await t.store.experiments.getBySlug(WATER_ID))!.key);
    expect(rejected).toEqual([
      { measure: 'satisfaction', reason: 'not_integer', count: 1 },
      { measure: 'satisfaction', reason: 'out_of_range', count: 1 },
      { measure: 'trust', reason: 'out_of_range', count: 1 },
      { measure: 'fair_price', reason: 'not_a_number', count: 1 },
    ]);
  });

  it('skipInvalid=true stores the good rows and lists the rejected ones', async () => {
    const csv = [HEADER, 'a-1,bill-first,,7,5,42.5', 'a-2,bill-first,,11,5,42.5', 'a-3,service-first,,3,2,250', 'a-4,service-first,,3,2,0'].join('\n');
    const res = await post(csv, '?skipInvalid=true');
    expect(res.statusCode).toBe(201);
    expect(res.json()).toEqual({
      rows: 4,
      created: 2,
      repeated: 0,
      rejectedRows: 2,
      dataVersion: 1,
      ignoredColumns: [],
      rejects: [
        { line: 3, column: 'satisfaction', message: '11 is outside the scale from 0 to 10', value: '11' },
        { line: 4, column: 'fair_price', message: '250 is outside the scale from 0 to 200', value: '250' },
      ],
      rejectsTruncated: false,
    });
    expect((await t.store.responses.getStored((await t.store.experiments.getBySlug(WATER_ID))!.key, 'a-4'))?.values).toEqual({ satisfaction: 3, trust: 2, fair_price: 0 });
  });

  it('reads RFC 4180 quoting: commas, doubled quotes and line breaks in a field; line numbers count physical lines', async () => {
    const csv =
      `${HEADER}\n` +
      'q-1,bill-first,"Smith, Jane",7,5,42.5\n' +
      'q-2,bill-first,"says ""hi""",7,5,42.5\n' +
      'q-3,bill-first,"two\nlines",7,5,42.5\n' +
      'q-4,bill-first,,99,5,42.5\n';
    const res = await post(csv);
    expect(res.statusCode).toBe(422);
    expect(res.json().errors).toEqual([
      { path: 'line 4, column respondent', message: 'must not contain control characters' },
      { path: 'line 6, column satisfaction', message: '99 is outside the scale from 0 to 10', value: '99' },
    ]);
    const ok = await post(csv.replace('"two\nlines"', '"two lines"').replace(',99,', ',9,'));
    expect(ok.statusCode).toBe(201);
    const key = (await t.store.experiments.getBySlug(WATER_ID))!.key;
    expect((await t.store.responses.getStored(key, 'q-1'))?.respondent).toBe('Smith, Jane');
    expect((await t.store.responses.getStored(key, 'q-2'))?.respondent).toBe('says "hi"');
  });

  it('header problems and unreadable CSV stop the import with one clear problem', async () => {
    const badHeader = await post('responseId,condition,satisfaction,trust,colour\nx,bill-first,1,2,red\n');
    expect(badHeader.statusCode).toBe(422);
    expect(badHeader.json().errors).toEqual([
      { path: 'line 1, column colour', message: 'is not a column of this import (expected responseId, condition, respondent, submittedAt and the measure ids satisfaction, trust, fair_price)' },
      { path: 'line 1, column fair_price', message: 'is a required measure and has no column' },
    ]);
    const unclosed = await post(`${HEADER}\nx-1,bill-first,"open,7,5,1\n`);
    expect(unclosed.statusCode).toBe(422);
    expect(unclosed.json().detail).toMatch(/^The file cannot be imported: line 2: the file is not valid CSV: Quote Not Closed/);
    // A quote inside an unquoted field: the parser's "field 1" (counted from 0) becomes the column counted from 1, as
    // spreadsheets count (the parser stops before the header reaches the checker, so the name is not known here).
    const quoteInside = await post(`${HEADER}\nx-2,bill"first,7,5,1\n`);
    expect(quoteInside.statusCode).toBe(422);
    expect(quoteInside.json().detail).toBe(
      'The file cannot be imported: line 2: the file is not valid CSV: Invalid Opening Quote: a quote is found on column 2 (counted from 1) at line 2, value is "bill". Nothing was stored.',
    );
    const empty = await post('');
    expect(empty.statusCode).toBe(422);
    expect(empty.json().detail).toBe('The file cannot be imported: line 1: the file is empty (a header row is required). Nothing was stored.');
  });

  it('accepts an exported file: the export-only columns are ignored, submittedAt is kept', async () => {
    const csv =
      'responseId,condition,respondent,satisfaction,trust,fair_price,submittedAt,receivedAt,excluded,excludedReason\r\n' +
      'e-1,bill-first,,7,5,42.5,2027-03-01T12:00:00.000Z,2027-03-01T12:00:01.204Z,false,\r\n';
    const res = await post(csv);
    expect(res.statusCode).toBe(201);
    expect(res.json().ignoredColumns).toEqual(['receivedAt', 'excluded', 'excludedReason']);
    const stored = await t.store.responses.getStored((await t.store.experiments.getBySlug(WATER_ID))!.key, 'e-1');
    expect(stored?.submittedAt).toBe('2027-03-01T12:00:00.000Z');
  });

  it('a responseId stored earlier with other content is a conflict; all or nothing rolls back every chunk', async () => {
    expect((await post(`${HEADER}\nc-5,bill-first,,1,1,1\n`)).statusCode).toBe(201);
    const before = await dataTables();
    const experiment = (await t.store.experiments.getBySlug(WATER_ID))!;
    // 25 rows in chunks of 10: the conflict is in the first chunk, the duplicate inside the file in the third.
    const body = [HEADER, ...rows(25, 'c'), 'c-21,bill-first,,0,1,0'].join('\n');
    const summary = await importCsvBuffer({ store: t.store, experiment, receivedAt: new Date().toISOString(), skipInvalid: false, apiKeyId: null, chunkRows: 10 }, body);
    expect(summary).toMatchObject({ committed: false, created: 0, rows: 26, rejectedRows: 2, problems: 2 });
    expect(summary.kept).toEqual([
      { line: 7, column: 'responseId', message: 'was already stored (or appears earlier in the file) with different content', value: 'c-5' },
      { line: 27, column: 'responseId', message: 'was already stored (or appears earlier in the file) with different content', value: 'c-21' },
    ]);
    expect(await dataTables()).toEqual(before);
    if (!t.databaseUrl) expect(t.store.db.inTransaction).toBe(false);
    // With skipInvalid the other 24 rows are stored.
    const kept = await importCsvBuffer({ store: t.store, experiment, receivedAt: new Date().toISOString(), skipInvalid: true, apiKeyId: null, chunkRows: 10 }, body);
    expect(kept).toMatchObject({ committed: true, created: 24, rejectedRows: 2 });
  });

  it('refuses a body over 2 MiB with 413 (bigger files: the CLI)', async () => {
    const big = [HEADER, ...rows(70_000, 'big')].join('\n');
    expect(big.length).toBeGreaterThan(IMPORT_BODY_LIMIT);
    const res = await post(big);
    expect(res.statusCode).toBe(413);
    expect(res.headers['content-type']).toContain('application/problem+json');
  });

  it('needs text/csv and an ingest or admin key for this experiment', async () => {
    const csv = [HEADER, ...rows(2)].join('\n');
    const json = await t.request({ method: 'POST', url: URL, payload: { csv } });
    expect(json.statusCode).toBe(415);
    expect((await post(csv, '', await t.key('read'))).statusCode).toBe(403);
    expect((await post(csv, '', null as unknown as string)).statusCode).toBe(401);
    expect((await post(csv, '', await t.key('ingest', WATER_ID))).statusCode).toBe(201);
    expect((await t.request({ method: 'POST', url: '/v1/experiments/nope/responses/import', headers: { 'content-type': 'text/csv' }, payload: csv })).statusCode).toBe(404);
  });
});

describe('splitballot import', () => {
  it('imports a file, shows progress on stderr and a one-line summary', async () => {
    const file = join(t.dir, 'answers.csv');
    writeFileSync(file, [HEADER, ...rows(120)].join('\n') + '\n');
    const r = await cli(['import', '--experiment', WATER_ID, file]);
    expect(r.code).toBe(0);
    expect(r.stderr).toContain('checking: 120 rows read');
    expect(r.stderr).toContain('storing: 120 rows');
    expect(r.stdout).toMatch(/^imported water-bill-2027: 120 rows, 120 stored, 0 repeated, 0 rejected in \d+\.\d s \([\d,]+ rows\/s\)\n$/);
    const again = await cli(['import', '--experiment', WATER_ID, file]);
    expect(again.stdout).toMatch(/^imported water-bill-2027: 120 rows, 0 stored, 120 repeated, 0 rejected/);
  });

  it('all or nothing by default: exit 1, problems on stderr, nothing stored', async () => {
    const file = join(t.dir, 'bad.csv');
    writeFileSync(file, [HEADER, ...rows(5, 'x'), 'x-9,bill-first,,7,0,1'].join('\n'));
    const before = await dataTables();
    const r = await cli(['import', '--experiment', WATER_ID, file]);
    expect(r.code).toBe(1);
    expect(r.stderr).toContain('  line 7, column trust: 0 is outside the scale from 1 to 7 (value: "0")\n');
    expect(r.stdout).toBe('import refused: 1 of 6 rows have problems; nothing was stored (fix them, or use --skip-invalid)\n');
    expect(await dataTables()).toEqual(before);
  });

  it('--skip-invalid keeps the good rows and writes the rejects file (line, column, message, value)', async () => {
    const file = join(t.dir, 'mixed.csv');
    writeFileSync(file, [HEADER, 'm-1,bill-first,,7,5,42.5', 'm-2,bill-first,"a, ""b""",70,5,42.5', 'm-3,service-first,,7,5,1e999'].join('\n'));
    const r = await cli(['import', '--experiment', WATER_ID, file, '--skip-invalid']);
    expect(r.code).toBe(0);
    expect(r.stdout).toContain(`1 stored, 0 repeated, 2 rejected (see ${file}.rejects.csv)`);
    const rejects = parse(readFileSync(`${file}.rejects.csv`, 'utf8'), { columns: true });
    expect(rejects).toEqual([
      { line: '3', column: 'satisfaction', message: '70 is outside the scale from 0 to 10', value: '70' },
      { line: '4', column: 'fair_price', message: '"1e999" is too large to be a finite number', value: '1e999' },
    ]);
  });

  it('usage and missing things', async () => {
    expect((await cli(['import', '--help'])).stdout).toMatch(/^Usage: splitballot import --experiment ID FILE\.csv/);
    expect((await cli(['import', 'x.csv'])).code).toBe(2);
    expect(await cli(['import', '--experiment', WATER_ID, join(t.dir, 'none.csv')])).toMatchObject({ code: 1, stderr: expect.stringContaining('does not exist') });
    const file = join(t.dir, 'one.csv');
    writeFileSync(file, HEADER);
    expect(await cli(['import', '--experiment', 'nope', file])).toMatchObject({
      code: 1,
      stderr: `splitballot import: database ${t.cliWhere()}\nsplitballot import: there is no experiment nope in ${t.cliWhere()}\n`,
    });
  });
});

describe('round trip', () => {
  it('import a CSV, export it, and get the same rows back', async () => {
    const input = [
      HEADER,
      'rt-1,bill-first,"Smith, Jane",7,5,42.5',
      'rt-2,service-first,"quote "" inside",0,1,0',
      'rt-3,bill-first,,10,7,199.99',
      'rt-4,service-first,plain,3,4,0.1',
    ];
    expect((await post(input.join('\n'))).statusCode).toBe(201);
    const exported = await t.request({ method: 'GET', url: `/v1/experiments/${WATER_ID}/responses.csv` });
    expect(exported.statusCode).toBe(200);
    const back = parse(exported.body, { columns: true }) as Record<string, string>[];
    const original = parse(input.join('\n'), { columns: true }) as Record<string, string>[];
    expect(back.map((r) => ({ responseId: r.responseId, condition: r.condition, respondent: r.respondent, satisfaction: r.satisfaction, trust: r.trust, fair_price: r.fair_price }))).toEqual(original);
    // And the export imports again into a fresh experiment as the same responses.
    await t.createWater({ id: 'water-copy' });
    const again = await t.request({ method: 'POST', url: '/v1/experiments/water-copy/responses/import', headers: { 'content-type': 'text/csv' }, payload: exported.body });
    expect(again.statusCode).toBe(201);
    expect(again.json()).toMatchObject({ created: 4, ignoredColumns: ['receivedAt', 'excluded', 'excludedReason'] });
  });
});
