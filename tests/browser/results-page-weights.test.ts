/**
 * The results page with survey weights and a covariate, in a real browser (playwright-core driving Debian's
 * Chromium, as tests/browser/results-page.test.ts): the weighted block and the adjusted block are shown for each
 * compared item, every number marked for the test equals the JSON API's value (formatted by server/pages/format.js),
 * and the covariate is listed apart, not compared. Invented water-utility data with invented design weights.
 * Skipped (with the same banner as the other browser test) when Chromium is missing.
 */
import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatByKind, readPath } from '../../server/pages/format.js';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { CHROMIUM, openChromium, TEST_OUTPUT, warnWithoutChromium, type ChromiumSession } from '../helpers/browser.js';

warnWithoutChromium('tests/browser/results-page-weights.test.ts');

const ID = 'water-weighted-2027';
const OUTPUT = TEST_OUTPUT;

function seed(n: number) {
  return Array.from({ length: n }, (_, i) => {
    const bill = i % 2 === 0;
    const prior = 1 + ((i * 5) % 7);
    return {
      condition: bill ? 'bill-first' : 'service-first',
      weight: 0.6 + ((i * 13) % 9) * 0.2,
      values: { prior_trust: prior, satisfaction: Math.max(0, Math.min(10, prior + (bill ? 0 : 1) + ((i * 7) % 3) - 1)) },
    };
  });
}

describe.skipIf(!CHROMIUM)('results page with weights and covariates', () => {
  let t: TestApp;
  let base: string;
  let readKey: string;
  let page: Page;
  let session: ChromiumSession | undefined;
  const problems: string[] = [];

  beforeAll(async () => {
    t = await startTestApp({ config: { logLevel: 'warn' } });
    const created = await t.request({
      method: 'POST',
      url: '/v1/experiments',
      payload: {
        id: ID,
        title: 'Invented water-utility survey 2027 with design weights',
        conditions: [{ id: 'bill-first', label: 'The bill questions come first' }, { id: 'service-first', label: 'The service questions come first' }],
        measures: [
          { id: 'prior_trust', label: 'Trust before the questions (1–7)', min: 1, max: 7, integer: true, role: 'covariate' },
          { id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true },
        ],
        weights: 'required',
      },
    });
    expect(created.statusCode, created.body).toBe(201);
    const batch = await t.request({ method: 'POST', url: `/v1/experiments/${ID}/responses/batch`, payload: { responses: seed(120) } });
    expect(batch.statusCode, batch.body).toBe(201);
    readKey = await t.key('read', ID, 'browser test');
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    const addr = t.app.server.address();
    base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
    mkdirSync(OUTPUT, { recursive: true });
    session = await openChromium(problems, { viewport: { width: 1280, height: 900 } });
    page = session.page;
  }, 60_000);

  afterAll(async () => {
    await session?.close();
    await t?.close();
  });

  it('shows the weighted and the adjusted numbers, each equal to the API; the covariate is listed apart', async () => {
    await page.goto(`${base}/experiments/${ID}`);
    await page.locator('#key-input').fill(readKey);
    await page.locator('#key-submit').click();
    await page.locator('section.measure[data-measure="satisfaction"] .adjusted-block').waitFor({ timeout: 15_000 });
    expect(await page.locator('section.measure[data-measure="prior_trust"]').count()).toBe(0);
    expect(await page.locator('#covariates [data-covariate="prior_trust"]').count()).toBe(1);

    const res = await t.request({ method: 'GET', url: `/v1/experiments/${ID}/comparisons/satisfaction?covariates=prior_trust`, key: readKey });
    expect(res.statusCode).toBe(200);
    const json = res.json();
    const shown = await page.$$eval('[data-measure="satisfaction"][data-field][data-format]', (els) =>
      els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, source: el.getAttribute('data-source'), text: el.textContent ?? '' })),
    );
    const weighted = shown.filter((s) => s.field.startsWith('weighted.'));
    const adjusted = shown.filter((s) => s.field.startsWith('adjusted.') && s.source === null); // not the family's adjusted p-values
    expect(weighted.length).toBeGreaterThanOrEqual(20);
    expect(adjusted.length).toBeGreaterThanOrEqual(10);
    for (const s of [...weighted, ...adjusted]) expect(s.text, `${s.field} (${s.format})`).toBe(formatByKind(s.format, readPath(json, s.field)));
    for (const field of ['weighted.tTest.meanDifference', 'weighted.tTest.p', 'weighted.rankTest.p', 'adjusted.adjusted.estimate', 'adjusted.unadjusted.estimate', 'adjusted.narrowingPercent']) {
      const s = shown.find((x) => x.field === field);
      expect(s, `${field} is shown`).toBeDefined();
      expect(s!.text, field).not.toBe('—');
    }
    expect(await page.locator('.weighted-block').textContent()).toContain('uses the unweighted answers');
    expect(await page.locator('.adjusted-block').textContent()).toContain('it does not remove bias');
    await page.locator('section.measure[data-measure="satisfaction"]').screenshot({ path: join(OUTPUT, 'results-page-weights.png') });
    expect(problems).toEqual([]);
  });
});
