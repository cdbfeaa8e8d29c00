/**
 * The researcher's workbench on the results page, in Chromium (playwright-core with Debian's Chromium, as
 * results-page.test.ts): the primary outcome first with its note, the adjusted family named, the sensitivity view
 * whose every number equals the comparison JSON (whose numbers tests/stats/sensitivity.test.ts and the service test
 * check against stats/ on the reduced data and against R), ISO 8601 times, and the download buttons whose saved
 * files are byte for byte the API's exports. Screenshots: test-output/workbench*.png (git-ignored).
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatByKind, readPath } from '../../server/pages/format.js';
import { startTestApp, type TestApp } from '../helpers/app.js';
import { CHROMIUM, openChromium, TEST_OUTPUT, warnWithoutChromium, type ChromiumSession } from '../helpers/browser.js';

const OUTPUT = TEST_OUTPUT;
const STUDY = 'water-tariff-2027';

warnWithoutChromium('tests/browser/workbench.test.ts');

// The invented water-utility survey, tariff wording variant: the main 0–100 item is declared after a second outcome
// (so "primary first" is visible), with a handful of answers near the top in one condition; an optional process measure.
const definition = {
  id: STUDY,
  title: 'Invented water-utility survey: tariff wording',
  conditions: [{ id: 'plain', label: 'Plain tariff wording' }, { id: 'detailed', label: 'Detailed tariff wording' }],
  plannedPerCondition: 100,
  measures: [
    { id: 'trust', label: 'Trust in the utility (1–7)', min: 1, max: 7, integer: true },
    { id: 'acceptance', label: 'How acceptable is the new tariff to your household, all things considered? (0–100)', min: 0, max: 100, integer: true, primary: true },
    { id: 'minutes', label: 'Minutes spent on the page', min: 0, max: 120, integer: false, required: false, role: 'process' },
  ],
};

function seed(n: number) {
  return Array.from({ length: n }, (_, i) => {
    const detailed = i % 2 === 1;
    const wobble = ((i * 7919) % 17) - 8;
    const top = detailed && i % 20 === 1; // a handful of answers near the top in "detailed"
    return {
      responseId: `t-${i}`,
      condition: detailed ? 'detailed' : 'plain',
      values: {
        trust: 1 + ((i * 5) % 7),
        acceptance: top ? 96 + (i % 5) : 40 + wobble + (detailed ? 3 : 0),
        minutes: Math.round((4 + ((i * 13) % 11) + (detailed ? 1.5 : 0)) * 10) / 10,
      },
    };
  });
}

describe.skipIf(!CHROMIUM)('the workbench parts of the results page in Chromium', () => {
  let t: TestApp;
  let base: string;
  let readKey: string;
  let page: Page;
  let session: ChromiumSession | undefined;
  const problems: string[] = [];

  beforeAll(async () => {
    t = await startTestApp({ config: { logLevel: 'warn' } });
    expect((await t.request({ method: 'POST', url: '/v1/experiments', payload: definition })).statusCode).toBe(201);
    const batch = await t.request({ method: 'POST', url: `/v1/experiments/${STUDY}/responses/batch`, payload: { responses: seed(120) } });
    expect(batch.statusCode, batch.body).toBe(201);
    // The primary outcome moves away and back after data exist: recorded, and shown as changed.
    for (const id of ['trust', 'acceptance']) {
      const res = await t.request({ method: 'PATCH', url: `/v1/experiments/${STUDY}`, payload: { measures: [{ id, primary: true }] } });
      expect(res.statusCode, res.body).toBe(200);
    }
    readKey = await t.key('read', STUDY, 'workbench browser test');
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    const addr = t.app.server.address();
    base = `http://127.0.0.1:${typeof addr === 'object' && addr ? addr.port : 0}`;
    session = await openChromium(problems, { acceptDownloads: true, viewport: { width: 1280, height: 900 } });
    page = session.page;
    await page.goto(`${base}/experiments/${STUDY}`);
    await page.locator('#key-input').fill(readKey);
    await page.locator('#key-submit').click();
    for (const m of ['acceptance', 'trust', 'minutes']) await page.locator(`section.measure[data-measure="${m}"] .sensitivity table`).waitFor({ timeout: 20_000 });
  }, 90_000);

  afterAll(async () => {
    await session?.close();
    await t?.close();
  });

  async function api(path: string) {
    const res = await t.request({ method: 'GET', url: path, key: readKey });
    expect(res.statusCode, `${path}: ${res.body}`).toBe(200);
    return res;
  }

  it('the primary outcome comes first, says it was changed after data collection began; the family is named', async () => {
    const order = await page.$$eval('section.measure', (els) => els.map((el) => el.getAttribute('data-measure')));
    expect(order).toEqual(['acceptance', 'trust', 'minutes']);
    const def = (await api(`/v1/experiments/${STUDY}`)).json();
    const last = def.primaryChanges[def.primaryChanges.length - 1];
    const note = await page.locator('section.measure[data-measure="acceptance"] .role-primary').textContent();
    expect(note).toBe(`Primary outcome · changed after data collection began (on ${last.at.replace(/\.\d{3}Z$/, 'Z')}, at data version ${last.dataVersion})`);
    expect(await page.locator('section.measure[data-measure="minutes"] .role-process').textContent()).toBe('Process measure · not part of the adjusted family');
    const adjusted = await page.locator('section.measure[data-measure="acceptance"] .adjusted strong').textContent();
    expect(adjusted).toBe('Adjusted over the 2 outcome comparisons (Holm; process measures are not in the family): ');
    expect(await page.locator('section.measure[data-measure="minutes"] .adjusted-none').textContent()).toBe(
      'A process measure is not part of the adjusted family (outcome measures only).',
    );
  });

  it('every number of the sensitivity view equals the comparison JSON; the changed conclusions are stated', async () => {
    let checked = 0;
    for (const m of ['acceptance', 'trust', 'minutes']) {
      const json = (await api(`/v1/experiments/${STUDY}/comparisons/${m}`)).json();
      const shown = await page.$$eval(`section.measure[data-measure="${m}"] .sensitivity [data-field][data-format]`, (els) =>
        els.map((el) => ({ field: el.getAttribute('data-field')!, format: el.getAttribute('data-format')!, text: el.textContent ?? '' })),
      );
      for (const s of shown) {
        expect(s.text, `${m} ${s.field}`).toBe(formatByKind(s.format, readPath(json, s.field)));
        checked++;
      }
      const sentences = await page.$$eval(`section.measure[data-measure="${m}"] .sensitivity-sentence`, (els) => els.map((el) => el.textContent));
      expect(sentences, m).toEqual(json.sensitivity.scenarios.filter((s: { sentence: string | null }) => s.sentence).map((s: { sentence: string }) => s.sentence));
      expect(await page.locator(`section.measure[data-measure="${m}"] .sensitivity .caveat`).textContent()).toBe(json.sensitivity.note);
    }
    // acceptance: all four rows; trust (1–7): only the full data and the influential-answer row have numbers.
    expect(checked).toBeGreaterThan(40);
    const acceptance = (await api(`/v1/experiments/${STUDY}/comparisons/acceptance`)).json();
    expect(acceptance.sensitivity.scenarios.map((s: { result: unknown }) => s.result !== null)).toEqual([true, true, true]);
    expect(await page.locator('section.measure[data-measure="trust"] tr.not-applicable').count()).toBe(2);
    await page.locator('section.measure[data-measure="acceptance"] .sensitivity').scrollIntoViewIfNeeded();
    await page.screenshot({ path: join(OUTPUT, 'workbench-sensitivity.png'), fullPage: false });
    expect(problems).toEqual([]);
  });

  it('times are ISO 8601', async () => {
    const computed = await page.locator('section.measure[data-measure="acceptance"] .computed').textContent();
    expect(computed).toMatch(/computed \d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$/);
  });

  it('each download saves exactly the bytes the API answers, with the key sent as a header', async () => {
    for (const [what, path] of [
      ['responses.csv', `/v1/experiments/${STUDY}/responses.csv`],
      ['responses.ndjson', `/v1/experiments/${STUDY}/responses.ndjson`],
      ['comparisons.csv', `/v1/experiments/${STUDY}/comparisons.csv`],
    ] as const) {
      const [download] = await Promise.all([page.waitForEvent('download', { timeout: 15_000 }), page.locator(`button[data-download="${what}"]`).click()]);
      expect(download.suggestedFilename()).toBe(`${STUDY}-${what}`);
      const saved = readFileSync((await download.path())!);
      const expected = (await api(path)).rawPayload;
      expect(saved.equals(expected), `${what}: ${saved.length} bytes saved, ${expected.length} from the API`).toBe(true);
      expect(page.url()).toBe(`${base}/experiments/${STUDY}`);
    }
    await page.screenshot({ path: join(OUTPUT, 'workbench-top.png'), clip: { x: 0, y: 0, width: 1280, height: 900 } });
    expect(problems).toEqual([]);
  }, 60_000);

  it('the answers behind the outlier flag: a table of ids, values and times; a read key cannot exclude, an admin key can (with a reason, confirmed)', async () => {
    const url = `/v1/experiments/${STUDY}/comparisons/acceptance`;
    const json = (await api(url)).json();
    const listed = json.flaggedAnswers.answers as { responseId: string; value: number; receivedAt: string; flag: string }[];
    expect(listed.filter((a) => a.flag === 'outliers').length).toBeGreaterThan(0);
    const rows = page.locator('section.measure[data-measure="acceptance"] .answers-table tbody tr');
    const shown = await rows.evaluateAll((trs) => trs.map((tr) => [...tr.querySelectorAll('th, td')].slice(0, 6).map((c) => c.textContent)));
    expect(shown).toEqual(
      listed.map((a) => [
        a.flag === 'outliers' ? 'Far from the rest' : 'Decides the t-test',
        'Detailed tariff wording',
        a.responseId,
        String(a.value),
        a.receivedAt.replace(/\.\d{3}Z$/, 'Z'),
        'included',
      ]),
    );
    const target = listed[0].responseId;
    const row = () => page.locator(`section.measure[data-measure="acceptance"] .answers-table tr[data-response="${target}"]`);
    // The read key: the confirmation step works, the server refuses, the page says why.
    await row().locator('button[data-action="exclude"]').click();
    await row().locator('input[name="reason"]').fill('speeded through the page (under 20 seconds)');
    await row().locator('button[data-confirm="exclude"]').click();
    await page.locator('section.measure[data-measure="acceptance"] .answers-status').filter({ hasText: 'needs an admin key' }).waitFor({ timeout: 10_000 });
    expect((await api(url)).json().groups.b.n).toBe(60);
    problems.length = 0; // the browser logs the refused request (403) itself

    // The admin key.
    await page.locator('#forget-key-button').click();
    await page.locator('#key-input').fill(t.adminKey);
    await page.locator('#key-submit').click();
    await row().locator('button[data-action="exclude"]').waitFor({ timeout: 15_000 });
    await row().locator('button[data-action="exclude"]').click();
    // An empty reason is not sent.
    await row().locator('button[data-confirm="exclude"]').click();
    await page.locator('section.measure[data-measure="acceptance"] .answers-status').filter({ hasText: 'Please say why' }).waitFor({ timeout: 5_000 });
    await row().locator('input[name="reason"]').fill('speeded through the page (under 20 seconds)');
    // A live refresh while the form is open (an answer arrives in the other condition) keeps the form and its reason.
    const version = (await api(`/v1/experiments/${STUDY}`)).json().dataVersion as number;
    expect((await t.request({ method: 'POST', url: `/v1/experiments/${STUDY}/responses`, payload: { responseId: 'live-plain', condition: 'plain', values: { trust: 4, acceptance: 41, minutes: 6 } } })).statusCode).toBe(201);
    await page.locator('section.measure[data-measure="acceptance"] [data-field="dataVersion"]').filter({ hasText: String(version + 1) }).waitFor({ timeout: 15_000 });
    expect(await row().locator('input[name="reason"]').inputValue()).toBe('speeded through the page (under 20 seconds)');
    await row().locator('button[data-confirm="exclude"]').click();
    await page.locator('section.measure[data-measure="acceptance"] [data-field="groups.b.n"]').first().filter({ hasText: /^59$/ }).waitFor({ timeout: 15_000 });
    await row().filter({ hasText: 'excluded' }).waitFor({ timeout: 10_000 });
    const audit = (await t.request({ method: 'GET', url: `/v1/experiments/${STUDY}/audit` })).json();
    expect(JSON.stringify(audit)).toContain('speeded through the page (under 20 seconds)');
    await row().scrollIntoViewIfNeeded();
    await page.screenshot({ path: join(OUTPUT, 'workbench-answers.png') });
    // Restore it from the same row (confirmation step, no reason needed).
    await row().locator('button[data-action="restore"]').click();
    await row().locator('button[data-confirm="restore"]').click();
    await page.locator('section.measure[data-measure="acceptance"] [data-field="groups.b.n"]').first().filter({ hasText: /^60$/ }).waitFor({ timeout: 15_000 });
    expect((await api(url)).json().groups.b.n).toBe(60);
    expect(problems).toEqual([]);
  }, 90_000);

  it('the chart: a data-range view beside the full scale for an item whose answers use little of it; long labels wrap', async () => {
    const minutes = page.locator('section.measure[data-measure="minutes"]');
    await minutes.locator('.chart-distribution-data svg').waitFor({ timeout: 15_000 });
    expect(await minutes.locator('.chart-distribution svg').count()).toBe(1);
    const note = (await minutes.locator('.chart-distribution-data svg .zoom-note').allTextContents()).join(' ');
    // Answers from 4 to 16 minutes: the axis starts above 0, so the note and the break mark say it does not start at the minimum.
    expect(note).toMatch(/^Zoomed to the answers: the axis runs from \d+ to \d+\. It does not start at the scale's minimum \(0\)\.$/);
    expect(await minutes.locator('.chart-distribution-data svg .axis-break').count()).toBe(1);
    // The text alternative says so too.
    expect(await minutes.locator('.figure-distribution-data .chart-words p').textContent()).toContain('Zoomed to the answers');
    // The full-scale view's axis runs 0–120; the zoomed one ends at 20 or below (every answer is under 20).
    const ticks = async (sel: string) => (await minutes.locator(`${sel} svg .tick-label`).evaluateAll((els) => els.map((e) => Number(e.getAttribute('data-value')))));
    expect((await ticks('.chart-distribution')).at(-1)).toBe(120);
    expect((await ticks('.chart-distribution-data')).at(-1)).toBeLessThanOrEqual(20);
    // Answers spread over the whole 0–100 scale get no zoomed view; the long label wraps onto two title lines.
    const acceptance = page.locator('section.measure[data-measure="acceptance"]');
    expect(await acceptance.locator('.chart-distribution-data').count()).toBe(0);
    const titleLines = await acceptance.locator('.chart-distribution svg text.chart-title').allTextContents();
    expect(titleLines.length).toBe(2);
    expect(await acceptance.locator('.chart-distribution svg title').textContent()).toBe(`${definition.measures[1].label}: answers by condition`);
    await minutes.locator('.charts').scrollIntoViewIfNeeded();
    await page.screenshot({ path: join(OUTPUT, 'workbench-chart.png') });
    expect(problems).toEqual([]);
  });

  it('at phone width the sensitivity table scrolls inside its region', async () => {
    await page.setViewportSize({ width: 390, height: 844 });
    await page.locator('section.measure[data-measure="acceptance"] .sensitivity').scrollIntoViewIfNeeded();
    const overflow = await page.evaluate(() => document.documentElement.scrollWidth - document.documentElement.clientWidth);
    expect(overflow).toBeLessThanOrEqual(0);
    await page.screenshot({ path: join(OUTPUT, 'workbench-phone.png') });
    await page.setViewportSize({ width: 1280, height: 900 });
  });
});
