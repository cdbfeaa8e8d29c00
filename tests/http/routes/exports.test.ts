/**
 * Exports: responses.csv (RFC 4180 quoting of commas, quotes and line breaks; paging across many rows; exclusion
 * state), responses.ndjson, comparisons.csv, and access. All data are invented.
 */
import { parse } from 'csv-parse/sync';
import { describe, expect, it } from 'vitest';
import { COMPARISON_CSV_COLUMNS, csvStream } from '../../../server/http/routes/exports.js';
import { eachTestApp, WATER_ID, waterResponse, type TestApp } from '../../helpers/app.js';

const BASE = `/v1/experiments/${WATER_ID}`;

let t: TestApp;
eachTestApp((app) => (t = app));

async function post(body: Record<string, unknown>) {
  const res = await t.request({ method: 'POST', url: `${BASE}/responses`, payload: body });
  expect(res.statusCode, res.body).toBe(201);
}

describe('GET …/responses.csv', () => {
  it('quotes commas, quotes and line breaks (RFC 4180) and ends lines with CRLF', async () => {
    await post(waterResponse({ responseId: 'r-1', respondent: 'Smith, Jane', submittedAt: '2027-03-01T12:00:00Z' }));
    await post(waterResponse({ responseId: 'r-2', respondent: 'says "hi"', condition: 'service-first', submittedAt: '2027-03-01T12:00:00Z' }, { fair_price: 0.1 }));
    await post(waterResponse({ responseId: 'r-3', submittedAt: '2027-03-01T12:00:00Z' }, { satisfaction: 0 }));
    const res = await t.request({ method: 'GET', url: `${BASE}/responses.csv` });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toBe('text/csv; charset=utf-8');
    expect(res.headers['content-disposition']).toBe('attachment; filename="water-bill-2027-responses.csv"');
    const lines = res.body.split('\r\n');
    expect(lines[0]).toBe('responseId,condition,respondent,satisfaction,trust,fair_price,submittedAt,receivedAt,excluded,excludedReason');
    expect(lines[1]).toMatch(/^r-1,bill-first,"Smith, Jane",7,5,42\.5,2027-03-01T12:00:00\.000Z,20\d\d-[^,]+Z,false,$/);
    expect(lines[2]).toMatch(/^r-2,service-first,"says ""hi""",7,5,0\.1,/);
    expect(lines[3]).toMatch(/^r-3,bill-first,,0,5,42\.5,/);
    expect(lines[4]).toBe('');
    expect(lines).toHaveLength(5);
  });

  it('csvStream quotes line breaks, quotes, commas and edge spaces, and parses back to the same fields', async () => {
    const fields = ['plain', 'a,b', 'say "hi"', 'two\nlines', 'cr\r\nlf', ' lead', 'trail ', '', '=1+1'];
    let text = '';
    for await (const chunk of csvStream(['v'], fields.map((f) => [f]), { spreadsheetSafe: false })) text += String(chunk);
    expect(text).toBe('v\r\nplain\r\n"a,b"\r\n"say ""hi"""\r\n"two\nlines"\r\n"cr\r\nlf"\r\n" lead"\r\n"trail "\r\n\r\n=1+1\r\n');
    const back = parse(text, { columns: true, skip_empty_lines: false }) as { v: string }[];
    expect(back.map((r) => r.v)).toEqual(fields);
  });

  it('neutralises formula-like text cells by default (OWASP CSV injection), keeps numbers, and writes text unchanged with spreadsheetSafe=false', async () => {
    const hostile = ['=HYPERLINK("http://example.invalid","x")', '+1', '-2+3', '@SUM(A1)', 'plain', 'mid=dle'];
    for (const [i, respondent] of hostile.entries()) {
      await post(waterResponse({ responseId: `inj-${i}`, respondent, submittedAt: '2027-03-01T12:00:00Z' }, { fair_price: 0.5 }));
    }
    await t.request({ method: 'POST', url: `${BASE}/responses/inj-0/exclusion`, payload: { reason: '=cmd|" /C calc"!A0' } });
    const res = await t.request({ method: 'GET', url: `${BASE}/responses.csv` });
    expect(res.statusCode).toBe(200);
    const rows = parse(res.body, { columns: true }) as Record<string, string>[];
    expect(rows.map((r) => r.respondent)).toEqual([
      `'=HYPERLINK("http://example.invalid","x")`,
      "'+1",
      "'-2+3",
      "'@SUM(A1)",
      'plain',
      'mid=dle',
    ]);
    expect(rows[0].excludedReason).toBe(`'=cmd|" /C calc"!A0`);
    expect(rows.every((r) => r.fair_price === '0.5')).toBe(true);
    expect(res.body.split('\r\n')[2]).toMatch(/^inj-1,bill-first,"'\+1",7,5,0\.5,/);
    // Numbers stay numbers: a negative number is written bare; only text that looks like one is neutralised.
    let text = '';
    // Tab and carriage return (which respondent ids cannot hold, but other text might) are neutralised too.
    for await (const chunk of csvStream(['n', 's'], [[-3.5, '-3.5'], [-0.001, '+7'], [0, '\tx'], [1, '\ry']])) text += String(chunk);
    expect(text).toBe(`n,s\r\n-3.5,"'-3.5"\r\n-0.001,"'+7"\r\n0,"'\tx"\r\n1,"'\ry"\r\n`);
    // Raw, for import elsewhere.
    const raw = await t.request({ method: 'GET', url: `${BASE}/responses.csv?spreadsheetSafe=false` });
    expect((parse(raw.body, { columns: true }) as Record<string, string>[]).map((r) => r.respondent)).toEqual(hostile);
  });

  it('writes a UTF-8 byte-order mark with bom=true, and none by default', async () => {
    await post(waterResponse({ responseId: 'bom-1', respondent: 'Zoë' }));
    const plain = await t.request({ method: 'GET', url: `${BASE}/responses.csv` });
    expect(plain.rawPayload.subarray(0, 3).equals(Buffer.from([0xef, 0xbb, 0xbf]))).toBe(false);
    const withBom = await t.request({ method: 'GET', url: `${BASE}/responses.csv?bom=true` });
    expect([...withBom.rawPayload.subarray(0, 3)]).toEqual([0xef, 0xbb, 0xbf]);
    expect(withBom.rawPayload.subarray(3).toString('utf8')).toBe(plain.body);
    const comparisons = await t.request({ method: 'GET', url: `${BASE}/comparisons.csv?bom=true` });
    expect([...comparisons.rawPayload.subarray(0, 3)]).toEqual([0xef, 0xbb, 0xbf]);
    expect((await t.request({ method: 'GET', url: `${BASE}/responses.csv?bom=maybe` })).statusCode).toBe(400);
  });

  it('pages through 2,500 responses in storage order with every value', async () => {
    const batch = Array.from({ length: 2500 }, (_, i) => ({
      responseId: `p-${i}`,
      condition: i % 2 === 0 ? 'bill-first' : 'service-first',
      values: { satisfaction: i % 11, trust: 1 + (i % 7), fair_price: (i % 2001) / 10 },
    }));
    const res = await t.request({ method: 'POST', url: `${BASE}/responses/batch`, payload: { responses: batch } });
    expect(res.statusCode).toBe(201);
    const csv = await t.request({ method: 'GET', url: `${BASE}/responses.csv` });
    const rows = parse(csv.body, { columns: true }) as Record<string, string>[];
    expect(rows).toHaveLength(2500);
    rows.forEach((r, i) => {
      expect(r.responseId).toBe(`p-${i}`);
      expect([Number(r.satisfaction), Number(r.trust), Number(r.fair_price)]).toEqual([i % 11, 1 + (i % 7), (i % 2001) / 10]);
    });
    // The repository reads pages: 2500 rows in pages of 1000 → 3 pages.
    const e = (await t.store.experiments.getBySlug(WATER_ID))!;
    const sizes: number[] = [];
    for await (const page of t.store.bulk.exportResponsePages(e.key, e.measures.map((m) => m.key), 1000)) sizes.push(page.length);
    expect(sizes).toEqual([1000, 1000, 500]);
  });

  it('an empty experiment exports the header only; read keys may export, ingest keys may not', async () => {
    const read = await t.key('read', WATER_ID);
    const res = await t.request({ method: 'GET', url: `${BASE}/responses.csv`, key: read });
    expect(res.statusCode).toBe(200);
    expect(res.body).toBe('responseId,condition,respondent,satisfaction,trust,fair_price,submittedAt,receivedAt,excluded,excludedReason\r\n');
    expect((await t.request({ method: 'GET', url: `${BASE}/responses.csv`, key: await t.key('ingest') })).statusCode).toBe(403);
    expect((await t.request({ method: 'GET', url: `${BASE}/responses.csv`, key: null })).statusCode).toBe(401);
    expect((await t.request({ method: 'GET', url: '/v1/experiments/nope/responses.csv' })).statusCode).toBe(404);
  });
});

describe('GET …/responses.ndjson', () => {
  it('one JSON object per line, unanswered measures absent', async () => {
    await t.request({ method: 'PATCH', url: BASE, payload: { measures: [{ id: 'fair_price', required: false }] } });
    await post(waterResponse({ responseId: 'j-1', respondent: 'a\\b', submittedAt: '2027-03-01T12:00:00Z' }, { fair_price: null }));
    await post(waterResponse({ responseId: 'j-2', submittedAt: '2027-03-01T12:00:00Z' }));
    const res = await t.request({ method: 'GET', url: `${BASE}/responses.ndjson` });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toBe('application/x-ndjson; charset=utf-8');
    const lines = res.body.split('\n');
    expect(lines.at(-1)).toBe('');
    const objects = lines.slice(0, -1).map((l) => JSON.parse(l));
    expect(objects).toHaveLength(2);
    expect(objects[0]).toEqual({
      responseId: 'j-1',
      condition: 'bill-first',
      respondent: 'a\\b',
      values: { satisfaction: 7, trust: 5 },
      submittedAt: '2027-03-01T12:00:00.000Z',
      receivedAt: expect.any(String),
      excluded: false,
      excludedReason: null,
    });
    expect(objects[1].values).toEqual({ satisfaction: 7, trust: 5, fair_price: 42.5 });
  });
});

describe('GET …/comparisons.csv', () => {
  it('one row per measure and pair with the headline numbers and flag codes', async () => {
    const batch = Array.from({ length: 40 }, (_, i) => ({
      responseId: `c-${i}`,
      condition: i % 2 === 0 ? 'bill-first' : 'service-first',
      values: { satisfaction: (i * 7) % 11, trust: 1 + ((i * 3) % 7), fair_price: ((i * 37) % 2000) / 10 },
    }));
    expect((await t.request({ method: 'POST', url: `${BASE}/responses/batch`, payload: { responses: batch } })).statusCode).toBe(201);
    const res = await t.request({ method: 'GET', url: `${BASE}/comparisons.csv` });
    expect(res.statusCode).toBe(200);
    const rows = parse(res.body, { columns: true }) as Record<string, string>[];
    expect(Object.keys(rows[0] ?? {})).toEqual([...COMPARISON_CSV_COLUMNS]);
    expect(rows.map((r) => [r.measure, r.a, r.b])).toEqual([
      ['satisfaction', 'bill-first', 'service-first'],
      ['trust', 'bill-first', 'service-first'],
      ['fair_price', 'bill-first', 'service-first'],
    ]);
    // The numbers equal the JSON comparison's.
    for (const r of rows) {
      const json = (await t.request({ method: 'GET', url: `${BASE}/comparisons/${r.measure}` })).json();
      expect(Number(r.nA)).toBe(json.groups.a.n);
      expect(Number(r.meanDifference)).toBe(json.welch.meanDifference);
      expect(Number(r.welchP)).toBe(json.welch.p);
      expect(Number(r.mannWhitneyP)).toBe(json.mannWhitney.p);
      expect(r.flags).toBe(json.flags.map((f: { code: string }) => f.code).join(' '));
    }
  });
});
