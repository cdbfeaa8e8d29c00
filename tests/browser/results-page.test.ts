/**
 * The results page in a real browser: playwright-core driving Debian's Chromium (no browser download) against
 * the app listening on 127.0.0.1 with a seeded, invented water-utility experiment.
 *
 * Checks: a wrong key shows a clear message; with the read key every measure has its chart (SVG) and its table;
 * every number the page shows equals the JSON API's value formatted by server/pages/format.js (the page marks
 * each number with data-field / data-format); a response posted during the test arrives through the event
 * stream and the page updates itself; no script or CSP errors. Screenshots: test-output/results-page*.png
 * (git-ignored) and server/pages/screenshot.png (the README's picture).
 *
 * When Chromium is missing the tests are skipped and a banner says so (.ci/run installs it, so CI always runs them).
 */
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatByKind, readPath } from '../../server/pages/format.js';
import { startTestApp, WATER_ID, type TestApp } from '../helpers/app.js';
import { CHROMIUM, openChromium, TEST_OUTPUT, warnWithoutChromium, type ChromiumSession } from '../helpers/browser.js';

const ROOT = fileURLToPath(new URL('../..', import.meta.url));
const OUTPUT = TEST_OUTPUT;
const README_SCREENSHOT = join(ROOT, 'server', 'pages', 'screenshot.png');
const MEASURES = ['satisfaction', 'trust', 'fair_price'];


warnWithoutChromium('tests/browser/results-page.test.ts');

/** Deterministic invented answers (bill-first a little lower), with a few extreme fair prices. */
function seedResponses(n: number) {
  return Array.from({ length: n }, (_, i) => {
    const bill = i % 2 === 0;
    const wobble = ((i * 7919) % 13) - 6; // −6 … 6
    return {
      responseId: `seed-${i}`,
      condition: bill ? 'bill-first' : 'service-first',
      values: {
        satisfaction: Math.max(0, Math.min(10, (bill ? 6 : 7) + Math.round(wobble / 3))),
        trust: Math.max(1, Math.min(7, 4 + Math.round(((i * 31) % 7) - 3) / 2 + (bill ? 0 : 1))),
        fair_price: i % 37 === 0 ? 190 : Math.round((35 + ((i * 17) % 29) - (bill ? 2 : 0)) * 10) / 10,
      },
    };
  }).map((r) => ({ ...r, values: { ...r.values, trust: Math.round(r.values.trust) } }));
}

describe.skipIf(!CHROMIUM)('results page in Chromium', () => {
  let t: TestApp;
  let base: string;
  let readKey: string;
  let page: Page;
  let session: ChromiumSession | undefined;
  const problems: string[] = [];

  beforeAll(async () => {
    t = await startTestApp({ config: { logLevel: 'warn' } });
    expect((await t.createWater({ monitoring: { spending: 'obrien-fleming' } })).statusCode).toBe(201);
    const batch = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses: seedResponses(160) } });
    expect(batch.statusCode, batch.body).toBe(201);
    // One recorded interim look of satisfaction, so the trajectory chart has a look to mark.
    const look = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/looks`, payload: { measure: 'satisfaction' } });
    expect(look.statusCode, look.body).toBe(201);
    readKey = await t.key('read', WATER_ID, 'browser test');
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

  it('a wrong key shows a clear message and the key form again', async () => {
    await page.goto(`${base}/experiments/${WATER_ID}`);
    await page.locator('#key-input').fill('sb_this-is-not-a-real-key');
    await page.locator('#key-submit').click();
    const error = page.locator('#key-error');
    await error.waitFor({ state: 'visible', timeout: 10_000 });
    expect(await error.textContent()).toContain('That key was not accepted (HTTP 401)');
    expect(await page.locator('#key-panel').isVisible()).toBe(true);
    // The key never appears in the address.
    expect(page.url()).toBe(`${base}/experiments/${WATER_ID}`);
    await page.screenshot({ path: join(OUTPUT, 'results-page-wrong-key.png') });
    // The browser logs the refused request itself; that one is expected here.
    expect(problems.filter((p) => !p.includes('status of 401'))).toEqual([]);
    problems.length = 0;
  });

  it('with the read key: a chart and a table for every measure, and every number equals the API', async () => {
    await page.locator('#key-input').fill(readKey);
    await page.locator('#key-submit').click();
    for (const m of MEASURES) {
      await page.locator(`section.measure[data-measure="${m}"] .chart-distribution svg`).waitFor({ timeout: 15_000 });
      expect(await page.locator(`section.measure[data-measure="${m}"] table`).count(), `${m} table`).toBeGreaterThan(0);
    }
    expect(page.url()).toBe(`${base}/experiments/${WATER_ID}`);

    const definition = await api(`/v1/experiments/${WATER_ID}`);
    const family = await api(`/v1/experiments/${WATER_ID}/comparisons?pairs=first&adjust=holm`);
    let checked = 0;
    for (const m of MEASURES) {
      const json = await api(`/v1/experiments/${WATER_ID}/comparisons/${m}`);
      const shown = await page.$$eval(`[data-measure="${m}"][data-field][data-format]`, (els) =>
        els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, source: el.getAttribute('data-source'), text: el.textContent ?? '' })),
      );
      const fromComparison = shown.filter((s) => s.source === null);
      expect(fromComparison.length, `${m}: numbers marked for the test`).toBeGreaterThan(15);
      for (const s of fromComparison) {
        expect(s.text, `${m} ${s.field} (${s.format})`).toBe(formatByKind(s.format, readPath(json, s.field)));
        checked++;
      }
      // The headline numbers are really there (not "—").
      for (const field of ['groups.a.n', 'groups.b.n', 'groups.a.mean', 'welch.p', 'mannWhitney.p', 'welch.meanDifference', 'hodgesLehmann.estimate']) {
        const s = fromComparison.find((x) => x.field === field);
        expect(s, `${m}: ${field} is shown`).toBeDefined();
        expect(s!.text, `${m}: ${field}`).not.toBe('—');
      }
      const entry = family.comparisons.find((c: { measure: string }) => c.measure === m);
      const fromFamily = shown.filter((x) => x.source === 'family');
      expect(fromFamily.map((s) => s.field), `${m}: adjusted p-values shown`).toEqual(['adjusted.welchP', 'adjusted.mannWhitneyP']);
      for (const s of fromFamily) {
        expect(s.text, `${m} family ${s.field}`).toBe(formatByKind(s.format, readPath(entry, s.field)));
        checked++;
      }
    }
    // Progress toward the planned size, from the definition.
    const progress = await page.$$eval('[data-source="definition"][data-condition][data-field]', (els) =>
      els.map((el) => ({ condition: el.getAttribute('data-condition')!, field: el.getAttribute('data-field')!, format: el.getAttribute('data-format'), text: el.textContent ?? '' })),
    );
    for (const p of progress.filter((x) => x.field === 'count')) {
      const n = definition.counts.byCondition.find((c: { condition: string }) => c.condition === p.condition).responses;
      expect(p.text, `progress ${p.condition}`).toBe(formatByKind(p.format ?? 'count', n));
      checked++;
    }
    expect(progress.filter((x) => x.field === 'count')).toHaveLength(2);
    expect(checked).toBeGreaterThan(60);

    await page.screenshot({ path: join(OUTPUT, 'results-page.png'), fullPage: true });
    await page.screenshot({ path: README_SCREENSHOT, clip: { x: 0, y: 0, width: 1280, height: 1500 }, fullPage: true });
    expect(problems).toEqual([]);
  }, 60_000);

  it('the trajectory figure: estimate and running interval, the too-early zone, the look, the evidence strip; our own words', async () => {
    // The trajectory is fetched only when its fold is opened (the service computes it in O(answers)).
    const fold = page.locator('section.measure[data-measure="satisfaction"] details.trajectory-details');
    expect(await fold.locator('figure').count()).toBe(0);
    await fold.locator('summary').click();
    const figure = page.locator('section.measure[data-measure="satisfaction"] figure.figure-trajectory');
    await figure.locator('svg').waitFor({ timeout: 15_000 });
    const svg = (await figure.locator('svg').evaluate((el) => el.outerHTML)) as string;
    expect(svg).toContain('How the difference (a − b) developed');
    expect(svg).toContain('How the evidence accumulated');
    expect(svg).toContain('class="early-zone"'); // 160 answers: the first points have fewer than 30 per condition
    expect(svg).toContain('class="band"');
    expect(svg).toContain('class="estimate"');
    expect(svg).toContain('class="look-mark"');
    expect(svg).toContain('planned 800 →');
    // The chart is drawn at a readable size.
    const box = await figure.locator('svg').boundingBox();
    expect(box!.width).toBeGreaterThan(400);
    expect(await figure.locator('figcaption').textContent()).toBe('How the estimate and its anytime-valid interval developed as answers arrived');
    // The page's words: anytime-valid, and nothing about what the software lacks.
    const interim = (await page.locator('section.measure[data-measure="satisfaction"] section.interim').textContent()) ?? '';
    expect(interim).toContain('Anytime-valid p');
    expect(interim).toContain('Anytime-valid interval for a − b');
    expect(interim).not.toMatch(/always-valid|not implemented/i);
    await figure.screenshot({ path: join(OUTPUT, 'results-page-trajectory.png') });
    expect(problems).toEqual([]);
  }, 30_000);

  it('a response posted now appears through the event stream, without reloading', async () => {
    await page.locator('#live-status').filter({ hasText: 'Live: connected' }).waitFor({ timeout: 10_000 });
    const nBefore = await page.locator('section.measure[data-measure="satisfaction"] [data-field="groups.a.n"]').first().textContent();
    const posted = await t.request({
      method: 'POST',
      url: `/v1/experiments/${WATER_ID}/responses`,
      payload: { responseId: 'live-1', condition: 'bill-first', values: { satisfaction: 10, trust: 7, fair_price: 50 } },
    });
    expect(posted.statusCode).toBe(201);
    const after = (await api(`/v1/experiments/${WATER_ID}/comparisons/satisfaction`)).groups.a.n;
    expect(formatByKind('count', after)).not.toBe(nBefore);
    await page
      .locator('section.measure[data-measure="satisfaction"] [data-field="groups.a.n"]')
      .first()
      .filter({ hasText: new RegExp(`^${formatByKind('count', after)}$`) })
      .waitFor({ timeout: 10_000 });
    const version = (await api(`/v1/experiments/${WATER_ID}`)).dataVersion;
    await page.locator(`section.measure[data-measure="satisfaction"] [data-field="dataVersion"]`).filter({ hasText: String(version) }).waitFor({ timeout: 10_000 });
    expect(problems).toEqual([]);
  }, 30_000);

  it('a refresh with no new data asks conditionally: every JSON and SVG request is answered 304 and the page is unchanged', async () => {
    const seen: { url: string; status: number; ifNoneMatch: string | undefined }[] = [];
    const onResponse = (res: import('playwright-core').Response) => {
      const url = res.url();
      // The definition (with its live counts, no ETag) is read once per refresh; everything else is conditional.
      if (!url.includes('/v1/experiments/') || url.includes('/events') || url.endsWith('.csv') || new URL(url).pathname === `/v1/experiments/${WATER_ID}`) return;
      seen.push({ url, status: res.status(), ifNoneMatch: res.request().headers()['if-none-match'] });
    };
    const before = await page.locator('#measures').innerText();
    page.on('response', onResponse);
    await page.locator('#refresh-button').click();
    // The definition, three comparisons, their charts, the family (and the opened trajectory): wait for them all.
    await page.waitForFunction(() => !document.querySelector('#status')?.textContent?.includes('Loading'), undefined, { timeout: 10_000 });
    await new Promise((resolve) => setTimeout(resolve, 1500));
    page.off('response', onResponse);
    expect(seen.length, JSON.stringify(seen)).toBeGreaterThanOrEqual(7);
    for (const r of seen) {
      expect(r.ifNoneMatch ?? `none: ${r.url}`, r.url).toMatch(/^"/);
      expect(r.status, r.url).toBe(304);
    }
    expect(await page.locator('#measures').innerText()).toBe(before);
    expect(problems).toEqual([]);
  }, 30_000);
});
