/**
 * HTML form posts (application/x-www-form-urlencoded): strict number parsing, the ingest key in a form field,
 * 303 to the thank-you page for browsers, a readable HTML error page, JSON answers for scripts.
 */
import { beforeEach, describe, expect, it } from 'vitest';
import { eachTestApp, WATER_ID, type TestApp } from '../../helpers/app.js';

const URL = `/v1/experiments/${WATER_ID}/responses`;
const FORM = { 'content-type': 'application/x-www-form-urlencoded' };
/** What a desktop browser sends for a top-level form navigation. */
const BROWSER_ACCEPT = 'text/html,application/xhtml+xml,application/xml;q=0.9,image/avif,image/webp,*/*;q=0.8';

let t: TestApp;
let ingest: string;
eachTestApp((app) => (t = app));
beforeEach(async () => {
  ingest = await t.key('ingest', WATER_ID, 'web form');
});

function form(fields: Record<string, string>): string {
  return new URLSearchParams(fields).toString();
}

async function postForm(fields: Record<string, string> | string, headers: Record<string, string> = {}, key: string | null = null) {
  return t.request({ method: 'POST', url: URL, payload: typeof fields === 'string' ? fields : form(fields), headers: { ...FORM, ...headers }, key });
}

const GOOD = { condition: 'service-first', satisfaction: '8', trust: '6', fair_price: '37.5' };

describe('form posts from scripts (JSON answers)', () => {
  it('accepts a form with the ingest key in the field ingestKey → 201 JSON', async () => {
    const res = await postForm({ ...GOOD, responseId: 'form-1', ingestKey: ingest });
    expect(res.statusCode).toBe(201);
    expect(res.json()).toMatchObject({ responseId: 'form-1', condition: 'service-first', values: { satisfaction: 8, trust: 6, fair_price: 37.5 } });
  });

  it('accepts a form with an Authorization header (any ingest or admin key)', async () => {
    const res = await postForm({ ...GOOD, responseId: 'form-2' }, {}, t.adminKey);
    expect(res.statusCode).toBe(201);
  });

  it('a form and a JSON post of the same answers are the same content (idempotent across encodings)', async () => {
    expect((await postForm({ ...GOOD, responseId: 'same', ingestKey: ingest })).statusCode).toBe(201);
    const json = await t.request({ method: 'POST', url: URL, key: ingest, payload: { responseId: 'same', condition: 'service-first', values: { satisfaction: 8, trust: 6, fair_price: 37.5 } } });
    expect(json.statusCode).toBe(200);
  });

  it('refuses an admin or read key in the form field (403), a missing or unknown one (401)', async () => {
    const read = await t.key('read');
    const admin = await postForm({ ...GOOD, ingestKey: t.adminKey });
    expect(admin.statusCode).toBe(403);
    expect(admin.json()).toEqual({
      type: 'urn:splitballot:problem:forbidden',
      title: 'Forbidden',
      status: 403,
      detail: 'Only a form (or ingest) key may be sent in the form field ingestKey; admin and read keys are refused there.',
    });
    expect((await postForm({ ...GOOD, ingestKey: read })).statusCode).toBe(403);
    const none = await postForm(GOOD);
    expect(none.statusCode).toBe(401);
    expect(none.json().detail).toBe('Send an ingest key in the form field ingestKey, or an API key in the Authorization header.');
    expect((await postForm({ ...GOOD, ingestKey: 'sb_not-a-real-key' })).statusCode).toBe(401);
    // An ingest key limited to another experiment.
    await t.createWater({ id: 'other-study' });
    const otherKey = await t.key('ingest', 'other-study');
    expect((await postForm({ ...GOOD, ingestKey: otherKey })).statusCode).toBe(403);
    expect(await t.sql('SELECT count(*) AS n FROM responses')).toEqual([{ n: 0 }]);
    // The refusal of an admin key in a form is logged (without the key) so that the operator can revoke it.
    expect(t.logs.text()).toContain('a key with the admin scope was sent in a form field and refused');
  });

  it('parses numbers strictly: each refused text with its reason', async () => {
    const cases: [string, string, { message: string; value?: unknown }, string][] = [
      ['satisfaction', '7abc', { message: '"7abc" is not a number', value: '7abc' }, 'not_a_number'],
      ['satisfaction', ' 7', { message: '" 7" is not a number', value: ' 7' }, 'not_a_number'],
      ['satisfaction', '7 ', { message: '"7 " is not a number', value: '7 ' }, 'not_a_number'],
      ['satisfaction', '+7', { message: '"+7" is not a number', value: '+7' }, 'not_a_number'],
      ['satisfaction', '0x10', { message: '"0x10" is not a number', value: '0x10' }, 'not_a_number'],
      ['satisfaction', '5.', { message: '"5." is not a number', value: '5.' }, 'not_a_number'],
      ['satisfaction', '1,5', { message: '"1,5" is not a number', value: '1,5' }, 'not_a_number'],
      ['satisfaction', 'NaN', { message: '"NaN" is not a number', value: 'NaN' }, 'not_a_number'],
      ['fair_price', '1e999', { message: '"1e999" is too large to be a finite number', value: '1e999' }, 'not_finite'],
      ['fair_price', '1'.repeat(41), { message: 'has more than 40 characters', value: '1'.repeat(41) }, 'too_many_digits'],
      ['satisfaction', '7.5', { message: 'must be a whole number (got 7.5)', value: 7.5 }, 'not_integer'],
      ['satisfaction', '11', { message: '11 is outside the scale from 0 to 10', value: 11 }, 'out_of_range'],
    ];
    for (const [field, text, expected, reason] of cases) {
      const res = await postForm({ ...GOOD, [field]: text, ingestKey: ingest });
      expect(res.statusCode, `${field}=${JSON.stringify(text)}`).toBe(422);
      const errors = res.json().errors;
      expect(errors, `${field}=${JSON.stringify(text)}`).toHaveLength(1);
      expect(errors[0], `${field}=${JSON.stringify(text)}`).toMatchObject({ path: `values.${field}`, ...expected });
      const counted = (await t.sql(`SELECT r.count FROM rejected_value_counts r JOIN measures m ON m.id = r.measure_id WHERE m.slug = ? AND r.reason = ?`, field, reason))[0]?.count;
      expect(counted, `${field}=${JSON.stringify(text)} counted as ${reason}`).toBeGreaterThan(0);
    }
    expect(await t.sql('SELECT count(*) AS n FROM responses')).toEqual([{ n: 0 }]);
  });

  it('accepts "7", "7.5", ".5", "007", "1e1" and "-0" where the scale allows them', async () => {
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'fair_price', min: -10 }] } });
    const ok: [string, string, number][] = [
      ['satisfaction', '7', 7],
      ['fair_price', '7.5', 7.5],
      ['fair_price', '.5', 0.5],
      ['satisfaction', '007', 7],
      ['satisfaction', '1e1', 10],
      ['fair_price', '-0', 0],
      ['fair_price', '-2.25', -2.25],
    ];
    let i = 0;
    for (const [field, text, value] of ok) {
      const res = await postForm({ ...GOOD, [field]: text, responseId: `ok-${i++}`, ingestKey: ingest });
      expect(res.statusCode, `${field}=${text}`).toBe(201);
      expect(Object.is(res.json().values[field], value), `${field}=${text}`).toBe(true);
    }
  });

  it('an empty field is "not answered": an error for a required measure, skipped for an optional one', async () => {
    const required = await postForm({ ...GOOD, trust: '', ingestKey: ingest });
    expect(required.statusCode).toBe(422);
    expect(required.json().errors).toEqual([{ path: 'values.trust', message: 'is required' }]);
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { measures: [{ id: 'fair_price', required: false }] } });
    const optional = await postForm({ ...GOOD, fair_price: '', responseId: '', respondent: '', ingestKey: ingest });
    expect(optional.statusCode).toBe(201);
    expect(optional.json().values).toEqual({ satisfaction: 8, trust: 6 });
    expect(optional.json().respondent).toBeNull();
  });

  it('a field sent twice or an unknown field → 422', async () => {
    const twice = await postForm(`${form({ ...GOOD, ingestKey: ingest })}&satisfaction=9`);
    expect(twice.statusCode).toBe(422);
    expect(twice.json().errors).toEqual([{ path: 'values.satisfaction', message: 'was sent more than once' }]);
    const unknown = await postForm({ ...GOOD, submit: 'Send', ingestKey: ingest });
    expect(unknown.json().errors).toEqual([{ path: 'values.submit', message: 'is not a measure of this experiment (measures: satisfaction, trust, fair_price)' }]);
  });
});

describe('form posts from browsers (HTML answers)', () => {
  it('303 to the built-in thank-you page, which is a small HTML page with a strict CSP', async () => {
    const res = await postForm({ ...GOOD, ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(res.statusCode).toBe(303);
    expect(res.headers.location).toBe('/thank-you');
    expect(res.body).toBe('');
    expect(await t.sql('SELECT count(*) AS n FROM responses')).toEqual([{ n: 1 }]);
    const page = await t.request({ method: 'GET', url: '/thank-you', key: null });
    expect(page.statusCode).toBe(200);
    expect(page.headers['content-type']).toBe('text/html; charset=utf-8');
    expect(page.headers['content-security-policy']).toMatch(/^default-src 'none'; style-src 'sha256-[A-Za-z0-9+/=]+'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'$/);
    expect(page.body).toContain('<html lang="en">');
    expect(page.body).toContain('<h1>Thank you for taking part</h1>');
    expect(page.body).toContain('Your answers reached the study team safely. There is nothing more you need to do.');
    expect(page.body).not.toContain('<script');
  });

  it("303 to the experiment's thankYouUrl when it has one; a repeat is redirected too", async () => {
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { thankYouUrl: 'https://survey.example.org/thanks?wave=2' } });
    const first = await postForm({ ...GOOD, responseId: 'b-1', ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(first.statusCode).toBe(303);
    expect(first.headers.location).toBe('https://survey.example.org/thanks?wave=2');
    const again = await postForm({ ...GOOD, responseId: 'b-1', ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(again.statusCode).toBe(303);
  });

  it('a rejected value gives a readable HTML page, escaped, with no JSON in it', async () => {
    const res = await postForm({ ...GOOD, satisfaction: '<script>alert(1)</script>', trust: '70', ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(res.statusCode).toBe(422);
    expect(res.headers['content-type']).toBe('text/html; charset=utf-8');
    expect(res.headers['content-security-policy']).toContain("default-src 'none'");
    expect(res.body).toContain('<h1>Some answers could not be accepted</h1>');
    // The questions are named by their labels, as the form showed them (not by their ids).
    expect(res.body).toContain('<li><strong>Overall satisfaction (0–10)</strong>: &quot;&lt;script&gt;alert(1)&lt;/script&gt;&quot; is not a number</li>');
    expect(res.body).toContain('<li><strong>Trust in the utility (1–7)</strong>: 70 is outside the scale from 1 to 7</li>');
    expect(res.body).not.toContain('<script>');
    expect(res.body).not.toContain('{"');
    expect(res.body).not.toContain(ingest);
  });

  it('an unknown condition is named by the versions\' labels, not their ids', async () => {
    const res = await postForm({ ...GOOD, condition: 'menu-first', ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(res.statusCode).toBe(422);
    expect(res.body).toContain(
      "<li><strong>Questionnaire version</strong>: is not a condition of this experiment (the survey&#39;s versions: The bill questions come first; The service questions come first)</li>",
    );
    expect(res.body).not.toContain('bill-first');
  });

  it('a closed survey, a bad key and an unknown survey also get pages', async () => {
    const noKey = await postForm(GOOD, { accept: BROWSER_ACCEPT });
    expect(noKey.statusCode).toBe(401);
    expect(noKey.body).toContain('This form cannot send answers');
    await t.request({ method: 'PATCH', url: `/v1/experiments/${WATER_ID}`, payload: { status: 'closed' } });
    const closed = await postForm({ ...GOOD, ingestKey: ingest }, { accept: BROWSER_ACCEPT });
    expect(closed.statusCode).toBe(409);
    expect(closed.body).toContain('<h1>This study has finished</h1>');
    expect(closed.body).toContain('It has finished collecting answers, so nothing you entered was saved.');
    expect(closed.body).not.toContain('<script');
    const missing = await t.request({ method: 'POST', url: '/v1/experiments/nope/responses', payload: form(GOOD), headers: { ...FORM, accept: BROWSER_ACCEPT } });
    expect(missing.statusCode).toBe(404);
    expect(missing.headers['content-type']).toBe('text/html; charset=utf-8');
    expect(missing.body).toContain('<h1>Survey not found</h1>');
  });

  it('curl-style Accept (*/*) gets JSON, not a page', async () => {
    const res = await postForm({ ...GOOD, trust: '70', ingestKey: ingest }, { accept: '*/*' });
    expect(res.statusCode).toBe(422);
    expect(res.headers['content-type']).toBe('application/problem+json; charset=utf-8');
  });
});
