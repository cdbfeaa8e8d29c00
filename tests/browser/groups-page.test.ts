/**
 * The results page with three conditions and an equivalence margin, in a real browser (playwright-core driving
 * Debian's Chromium) against the app listening on 127.0.0.1. The study is invented: a water-utility letter in
 * three versions (plain, with a chart of the bill, with a neighbour comparison), with a margin of 0.5 points on
 * the 0–10 satisfaction item and none on the price item.
 *
 * Checks: each item shows the omnibus block first (before the pairwise table), the box plot of all three
 * conditions, every pair; every omnibus number equals GET …/omnibus formatted by server/pages/format.js, every
 * equivalence number equals the pairwise comparison's; the verdict sentence is the API's; no script or CSP
 * errors. Screenshots: test-output/results-page-groups*.png (git-ignored).
 */
import { join } from 'node:path';
import { type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatByKind, readPath } from '../../server/pages/format.js';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { CHROMIUM, openChromium, TEST_OUTPUT, warnWithoutChromium, type ChromiumSession } from '../helpers/browser.js';

const OUTPUT = TEST_OUTPUT;
const ID = 'water-letter-2027';

warnWithoutChromium('tests/browser/groups-page.test.ts');

const CONDITIONS = ['plain', 'bill-chart', 'neighbours'];

/** Deterministic invented answers: the neighbour letter a little higher on satisfaction, prices alike. */
function seed(n: number) {
  return Array.from({ length: n }, (_, i) => {
    const c = i % 3;
    const wobble = ((i * 7919) % 11) - 5; // −5 … 5
    return {
      responseId: `letter-${i}`,
      condition: CONDITIONS[c],
      values: {
        satisfaction: Math.max(0, Math.min(10, 6 + (c === 2 ? 1 : 0) + Math.round(wobble / 2))),
        fair_price: Math.round((40 + ((i * 17) % 23) - (c === 1 ? 1 : 0)) * 10) / 10,
      },
    };
  });
}

describe.skipIf(!CHROMIUM)('results page with three conditions and a margin', () => {
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
        title: 'Water utility letter 2027: which version of the letter? (invented)',
        conditions: [
          { id: 'plain', label: 'Plain letter' },
          { id: 'bill-chart', label: 'Letter with a bill chart' },
          { id: 'neighbours', label: 'Letter with a neighbour comparison' },
        ],
        measures: [
          { id: 'satisfaction', label: 'Overall satisfaction (0–10)', min: 0, max: 10, integer: true, equivalenceMargin: 0.5 },
          { id: 'fair_price', label: 'Fair monthly price in euros', min: 0, max: 200 },
        ],
        plannedPerCondition: 100,
      },
    });
    expect(created.statusCode, created.body).toBe(201);
    const batch = await t.request({ method: 'POST', url: `/v1/experiments/${ID}/responses/batch`, payload: { responses: seed(240) } });
    expect(batch.statusCode, batch.body).toBe(201);
    readKey = await t.key('read', ID, 'browser test');
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    const addr = t.app.server.address();
    base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
    session = await openChromium(problems, { viewport: { width: 1280, height: 900 } });
    page = session.page;
  }, 60_000);

  afterAll(async () => {
    await session?.close();
    await t?.close();
  });

  async function api(path: string) {
    const res = await t.request({ method: 'GET', url: path, key: readKey });
    expect(res.statusCode, `${path}: ${res.body}`).toBe(200);
    return res.json();
  }

  it('shows the omnibus block first, all conditions side by side, every pair, and the equivalence verdict', async () => {
    await page.goto(`${base}/experiments/${ID}`);
    await page.locator('#key-input').fill(readKey);
    await page.locator('#key-submit').click();
    for (const m of ['satisfaction', 'fair_price']) {
      await page.locator(`section.measure[data-measure="${m}"] .figure-omnibus svg`).waitFor({ timeout: 15_000 });
      // The omnibus block comes before the pairwise numbers.
      const order = await page.$eval(`section.measure[data-measure="${m}"]`, (s) => {
        const omni = s.querySelector('.omnibus-block');
        const body = s.querySelector('.measure-body');
        return omni && body ? omni.compareDocumentPosition(body) : 0;
      });
      expect(order & 4, `${m}: omnibus block before the pairwise body`).toBe(4); // DOCUMENT_POSITION_FOLLOWING
      const omni = await api(`/v1/experiments/${ID}/comparisons/${m}/omnibus`);
      const shown = await page.$$eval(`[data-measure="${m}"][data-source="omnibus"][data-field][data-format]`, (els) =>
        els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, text: el.textContent ?? '' })),
      );
      expect(shown.length, `${m}: omnibus numbers`).toBe(15 + 3 * 7); // Welch 5, Kruskal–Wallis 4, classic 6; 7 per pair
      for (const s of shown) expect(s.text, `${m} omnibus ${s.field}`).toBe(formatByKind(s.format, readPath(omni, s.field)));
      for (const field of ['welchAnova.f', 'welchAnova.p', 'kruskalWallis.h', 'kruskalWallis.p', 'pairs.2.dunn.pHolm']) {
        expect(shown.find((s) => s.field === field)?.text, `${m} ${field}`).not.toBe('—');
      }
      expect(await page.locator(`section.measure[data-measure="${m}"] table.omnibus-pairs tbody tr`).count()).toBe(3);
      const chartLabels = await page.$$eval(`section.measure[data-measure="${m}"] .figure-omnibus svg text`, (els) => els.map((e) => e.textContent ?? '').join(' '));
      for (const label of ['Plain letter', 'bill chart', 'neighbour']) expect(chartLabels, `${m} chart`).toContain(label);
    }
    // The margin: satisfaction has an equivalence block whose numbers and verdict are the API's; fair_price has none.
    const cmp = await api(`/v1/experiments/${ID}/comparisons/satisfaction?a=plain&b=bill-chart`);
    expect(cmp.equivalence.margin).toBe(0.5);
    const block = page.locator('section.measure[data-measure="satisfaction"] .equivalence-block');
    await block.waitFor({ timeout: 10_000 });
    expect(await block.locator('.verdict').textContent()).toBe(cmp.equivalence.welch.verdict.words);
    expect(await block.getAttribute('data-verdict')).toBe(cmp.equivalence.welch.verdict.code);
    const eqShown = await page.$$eval('[data-measure="satisfaction"][data-field^="equivalence."]', (els) =>
      els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, text: el.textContent ?? '' })),
    );
    expect(eqShown.length).toBe(8);
    for (const s of eqShown) expect(s.text, `equivalence ${s.field}`).toBe(formatByKind(s.format, readPath(cmp, s.field)));
    expect(await block.locator('svg.equivalence-chart rect').count()).toBe(1);
    expect(await page.locator('section.measure[data-measure="fair_price"] .equivalence-block').count()).toBe(0);

    await page.screenshot({ path: join(OUTPUT, 'results-page-groups.png'), fullPage: true });
    await page.screenshot({ path: join(OUTPUT, 'results-page-groups-top.png'), clip: { x: 0, y: 0, width: 1280, height: 1700 }, fullPage: true });
    await page.locator('section.measure[data-measure="satisfaction"] .omnibus-block').screenshot({ path: join(OUTPUT, 'results-page-groups-omnibus.png') });
    await block.screenshot({ path: join(OUTPUT, 'results-page-groups-equivalence.png') });
    expect(problems).toEqual([]);
  }, 60_000);
});
