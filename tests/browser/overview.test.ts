/**
 * The team overview at / in Chromium (playwright-core with Debian's Chromium): several invented studies, every number
 * equal to GET /v1/overview formatted by server/pages/format.js, sorting by a column, the link to a study's page, and
 * a response posted during the test arriving through the conditional poll. Screenshot: test-output/overview.png.
 */
import { join } from 'node:path';
import { type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatByKind, readPath } from '../../server/pages/format.js';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { CHROMIUM, openChromium, TEST_OUTPUT, warnWithoutChromium, type ChromiumSession } from '../helpers/browser.js';

const OUTPUT = TEST_OUTPUT;

warnWithoutChromium('tests/browser/overview.test.ts');

// Three invented water-utility studies: one with a primary outcome, one without, one closed.
const studies = [
  {
    id: 'water-tariff-2027',
    title: 'Tariff wording',
    conditions: [{ id: 'plain', label: 'Plain wording' }, { id: 'detailed', label: 'Detailed wording' }],
    plannedPerCondition: 60,
    measures: [{ id: 'acceptance', label: 'Acceptance of the new tariff (0–100)', min: 0, max: 100, integer: true, primary: true }],
  },
  {
    id: 'water-leaflet-2027',
    title: 'Leaflet order',
    conditions: [{ id: 'tips-first' }, { id: 'costs-first' }],
    measures: [{ id: 'intent', label: 'Intent to save water (1–7)', min: 1, max: 7, integer: true }],
  },
  {
    id: 'water-meter-2026',
    title: 'Meter letter (closed)',
    conditions: [{ id: 'short' }, { id: 'long' }],
    plannedPerCondition: 20,
    measures: [{ id: 'clarity', label: 'Clarity (0–10)', min: 0, max: 10, integer: true, primary: true }],
  },
];

describe.skipIf(!CHROMIUM)('the team overview in Chromium', () => {
  let t: TestApp;
  let base: string;
  let readKey: string;
  let page: Page;
  let session: ChromiumSession | undefined;
  const problems: string[] = [];

  beforeAll(async () => {
    t = await startTestApp({ config: { logLevel: 'warn' } });
    for (const s of studies) expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: s })).statusCode).toBe(201);
    const post = async (id: string, responses: unknown[]) => expect((await t.request({ method: 'POST', url: `/v1/experiments/${id}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
    await post('water-tariff-2027', Array.from({ length: 50 }, (_, i) => ({ responseId: `t-${i}`, condition: i % 2 ? 'detailed' : 'plain', values: { acceptance: 35 + ((i * 11) % 23) + (i % 2) * 6 } })));
    await post('water-leaflet-2027', Array.from({ length: 12 }, (_, i) => ({ responseId: `l-${i}`, condition: i % 2 ? 'costs-first' : 'tips-first', values: { intent: 1 + ((i * 3) % 7) } })));
    await post('water-meter-2026', Array.from({ length: 40 }, (_, i) => ({ responseId: `m-${i}`, condition: i % 2 ? 'long' : 'short', values: { clarity: (i * 7) % 11 } })));
    expect((await t.request({ method: 'PATCH', url: '/v1/experiments/water-meter-2026', payload: { status: 'closed' } })).statusCode).toBe(200);
    readKey = await t.key('read', null, 'overview browser test');
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    const addr = t.app.server.address();
    base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
    session = await openChromium(problems, { viewport: { width: 1280, height: 900 } });
    page = session.page;
  }, 90_000);

  afterAll(async () => {
    await session?.close();
    await t?.close();
  });

  async function overview() {
    const res = await t.request({ method: 'GET', url: '/v1/overview', key: readKey });
    expect(res.statusCode).toBe(200);
    return res.json() as { studies: { id: string; title: string; warnings: number }[] };
  }

  it('every study is listed with numbers equal to the API, sortable, linking to its page', async () => {
    await page.goto(`${base}/`);
    await page.locator('#key-input').fill(readKey);
    await page.locator('#key-submit').click();
    await page.locator('#studies-body tr').nth(2).waitFor({ timeout: 20_000 });
    const body = await overview();
    let checked = 0;
    for (const s of body.studies) {
      const shown = await page.$$eval(`[data-study="${s.id}"][data-field]`, (els) => els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, text: el.textContent })));
      expect(shown.length, s.id).toBeGreaterThan(4);
      for (const x of shown) {
        expect(x.text, `${s.id} ${x.field}`).toBe(formatByKind(x.format, readPath(s, x.field)));
        checked++;
      }
    }
    expect(checked).toBeGreaterThan(30);
    // Default order: by title; then by warnings, descending on the second click.
    const titles = () => page.$$eval('#studies-body tr th a', (as) => as.map((a) => a.textContent));
    expect(await titles()).toEqual(['Leaflet order', 'Meter letter (closed)', 'Tariff wording']);
    await page.locator('button[data-sort="warnings"]').click();
    await page.locator('button[data-sort="warnings"]').click();
    const byWarnings = [...body.studies].sort((x, y) => y.warnings - x.warnings || (x.id < y.id ? 1 : -1)).map((s) => s.title);
    expect(await titles()).toEqual(byWarnings);
    expect(await page.locator('th[aria-sort="descending"] button[data-sort="warnings"]').count()).toBe(1);
    // The closed study shows no anytime-valid reading; the open one with a primary outcome does.
    expect(await page.locator('[data-study="water-tariff-2027"][data-field="primary.anytimeValid.p"]').count()).toBe(1);
    expect(await page.locator('[data-study="water-meter-2026"][data-field="primary.anytimeValid.p"]').count()).toBe(0);
    expect(await page.locator('tr[data-study="water-leaflet-2027"]').textContent()).toContain('No primary outcome declared');
    expect(await page.locator('tr[data-study="water-tariff-2027"]').textContent()).toContain('Anytime-valid p');
    expect(await page.locator('body').textContent()).not.toMatch(/always-valid/i);
    await page.screenshot({ path: join(OUTPUT, 'overview.png'), fullPage: true });
    expect(await page.locator('tr[data-study="water-tariff-2027"] th a').getAttribute('href')).toBe('/experiments/water-tariff-2027');
    expect(problems).toEqual([]);
  }, 60_000);

  it('a response posted now reaches the page through the conditional poll', async () => {
    const before = await page.locator('[data-study="water-leaflet-2027"][data-field="answersToday"]').textContent();
    expect(before).toBe('12');
    const posted = await t.request({ method: 'POST', url: '/v1/experiments/water-leaflet-2027/responses', payload: { condition: 'tips-first', values: { intent: 6 } } });
    expect(posted.statusCode).toBe(201);
    await page.locator('[data-study="water-leaflet-2027"][data-field="answersToday"]').filter({ hasText: /^13$/ }).waitFor({ timeout: 20_000 });
    expect(problems).toEqual([]);
  }, 30_000);
});
