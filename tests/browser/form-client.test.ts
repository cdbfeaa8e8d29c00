/**
 * The survey-page client in a real browser: playwright-core driving Debian's Chromium against the service on
 * 127.0.0.1, with the documentation's example page (docs/examples/survey-page.html, an invented water-utility
 * study) served from ANOTHER origin (a second 127.0.0.1 port) that the service allows, and from a third port that
 * it does not allow.
 *
 * Scenarios (issue "A survey-page client that never loses an answer"):
 *  1. assign, fill, submit → stored once, in the condition the service assigned;
 *  2. network cut during submit (the request reaches the service but its answer is lost, then every request to the
 *     service fails): the page says "Saved, will send when back online"; a reload with the network still cut,
 *     then the network back → stored exactly once; the same with localStorage when IndexedDB is missing;
 *  3. a double submit, and two tabs of the same respondent → one stored answer each;
 *  4. the service answers 503 then 429 with Retry-After → the client waits as told, then succeeds;
 *  5. an out-of-range value is shown next to its field before anything is sent; a value the service refuses
 *     (limits changed meanwhile) → the problem's field error next to the field, nothing queued;
 *  6. an origin the service does not allow cannot use the client (CORS), and the page says why;
 *  plus the plain form without JavaScript (progressive enhancement).
 * At the end: answers stored by the service = answers the simulated respondents sent.
 *
 * When Chromium is missing the tests are skipped and a banner says so.
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { chromium, type BrowserContext, type Page, type Route } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startTestApp, waterBillDefinition, WATER_ID, type TestApp } from '../helpers/app.js';
import { CHROMIUM, CHROMIUM_ARGS, warnWithoutChromium } from '../helpers/browser.js';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const EXAMPLE = readFileSync(join(ROOT, 'docs', 'examples', 'survey-page.html'), 'utf8');
const CLIENT_JS = readFileSync(join(ROOT, 'server', 'pages', 'collect', 'v1', 'collect.js'));
const CHANGING_ID = 'water-limits-change';
const SAVED = 'Saved, will send when back online.';
const THANKS = 'Thank you: your answers were received.';

warnWithoutChromium('tests/browser/form-client.test.ts');

const LAUNCH_ARGS = CHROMIUM_ARGS;

/** Serves the example page (with this service, study and key filled in) and a copy of the client, on two ports. */
class PageServer {
  private servers: Server[] = [];
  service = '';
  keys = new Map<string, string>();

  async start(): Promise<[string, string]> {
    const origins: string[] = [];
    for (let i = 0; i < 2; i++) {
      const server = createServer((req, res) => {
        const url = new URL(req.url ?? '/', 'http://127.0.0.1');
        if (url.pathname === '/collect.js') {
          res.writeHead(200, { 'content-type': 'text/javascript; charset=utf-8' }).end(CLIENT_JS);
          return;
        }
        if (url.pathname === '/survey.html') {
          const study = url.searchParams.get('study') ?? WATER_ID;
          let html = EXAMPLE.replaceAll('http://127.0.0.1:8080', this.service)
            .replaceAll('water-bill-2027', study)
            .replace('value="sb_REPLACE_WITH_AN_INGEST_KEY_FOR_THIS_STUDY"', `value="${this.keys.get(study) ?? 'sb_missing'}"`);
          // The site's own copy of the client (for authors who bundle or self-host it).
          if (url.searchParams.get('client') === 'local') html = html.replace(`data-study="${study}"`, `data-study="${study}" data-client="/collect.js"`);
          res.writeHead(200, { 'content-type': 'text/html; charset=utf-8', 'cache-control': 'no-store' }).end(html);
          return;
        }
        res.writeHead(404).end();
      });
      await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
      this.servers.push(server);
      origins.push(`http://127.0.0.1:${(server.address() as AddressInfo).port}`);
    }
    return [origins[0], origins[1]];
  }

  async close(): Promise<void> {
    await Promise.all(this.servers.map((s) => new Promise<void>((resolve) => s.close(() => resolve()))));
  }
}

interface StoredRow {
  response_id: string;
  respondent: string | null;
  condition: string;
}

describe.skipIf(!CHROMIUM)('survey-page client in Chromium', () => {
  let t: TestApp;
  let pages: PageServer;
  let service: string;
  let allowed: string;
  let disallowed: string;
  let context: BrowserContext;
  let profile: string;
  const problems: string[] = [];
  /** Respondents whose answers the simulated respondents sent (each one answer). */
  const sent = new Set<string>();

  beforeAll(async () => {
    pages = new PageServer();
    [allowed, disallowed] = await pages.start();
    t = await startTestApp({ config: { logLevel: 'warn', corsOrigins: [allowed] } });
    expect((await t.createWater()).statusCode).toBe(201);
    const changing = await t.request({ method: 'POST', url: '/v1/experiments', payload: waterBillDefinition({ id: CHANGING_ID }) });
    expect(changing.statusCode, changing.body).toBe(201);
    pages.keys.set(WATER_ID, await t.key('ingest', WATER_ID, 'survey page'));
    pages.keys.set(CHANGING_ID, await t.key('ingest', CHANGING_ID, 'survey page'));
    await t.app.listen({ port: 0, host: '127.0.0.1' });
    service = `http://127.0.0.1:${(t.app.server.address() as AddressInfo).port}`;
    pages.service = service;
    profile = mkdtempSync(join(tmpdir(), 'splitballot-chromium-'));
    context = await chromium.launchPersistentContext(profile, { executablePath: CHROMIUM!, headless: true, args: LAUNCH_ARGS });
  }, 60_000);

  afterAll(async () => {
    await context?.close();
    if (profile) rmSync(profile, { recursive: true, force: true });
    await t?.close();
    await pages?.close();
  });

  async function open(path: string, expectReady = true): Promise<Page> {
    const page = await context.newPage();
    page.on('pageerror', (err) => problems.push(`page error: ${err.message}`));
    await page.goto(path);
    if (expectReady) await page.locator('form[data-ready="true"]').waitFor({ timeout: 15_000 });
    return page;
  }

  async function fill(page: Page, values: { satisfaction: string; trust: string; fair_price: string }): Promise<void> {
    for (const [name, value] of Object.entries(values)) await page.locator(`#${name}`).fill(value);
  }

  async function statusOf(page: Page, state: string, timeout = 15_000): Promise<string> {
    await page.locator(`#status[data-state="${state}"]`).waitFor({ timeout });
    return (await page.locator('#status').textContent()) ?? '';
  }

  function stored(study = WATER_ID): StoredRow[] {
    return t.store.db
      .prepare(
        `SELECT r.response_id, r.respondent, c.slug AS condition FROM responses r
         JOIN conditions c ON c.id = r.condition_id JOIN experiments e ON e.id = r.experiment_id
         WHERE e.slug = ? ORDER BY r.id`,
      )
      .all(study) as StoredRow[];
  }
  const storedFor = (respondent: string) => stored().filter((r) => r.respondent === respondent);

  /** Requests the service answered, from its own metrics: ingest POSTs and CORS preflights. */
  async function requestsSeen(): Promise<{ posts: number; preflights: number }> {
    const metric = t.app.metrics.registry.getSingleMetric('splitballot_http_requests_total');
    const values = (await metric!.get()).values;
    const sum = (method: string, route?: string) =>
      values.filter((v) => v.labels.method === method && (route === undefined || v.labels.route === route)).reduce((n, v) => n + v.value, 0);
    return { posts: sum('POST', '/v1/experiments/:id/responses'), preflights: sum('OPTIONS') };
  }

  /** Requests the page sent to the service's ingest route. */
  function countPosts(page: Page): { posts: number } {
    const counter = { posts: 0 };
    page.on('request', (req) => {
      if (req.method() === 'POST' && req.url().startsWith(`${service}/v1/`) && req.url().endsWith('/responses')) counter.posts++;
    });
    return counter;
  }

  it('1. normal flow: assign, fill, submit → stored once, in the assigned condition (client from the service, pinned v1)', async () => {
    const page = await open(`${allowed}/survey.html?respondent=normal-1`);
    const condition = await page.locator('form').getAttribute('data-condition');
    expect(['bill-first', 'service-first']).toContain(condition);
    // The page shows the assigned version: service-first asks about the service before the bill.
    const firstBlock = await page.locator('#blocks > fieldset').first().getAttribute('id');
    expect(firstBlock).toBe(condition === 'service-first' ? 'block-service' : 'block-bill');
    await fill(page, { satisfaction: '8', trust: '6', fair_price: '38.5' });
    const before = await requestsSeen();
    await page.locator('button[type=submit]').click();
    expect(await statusOf(page, 'stored')).toBe(THANKS);
    sent.add('normal-1');
    // One round trip: the submit was one POST and no CORS preflight (OPTIONS).
    const after = await requestsSeen();
    expect({ posts: after.posts - before.posts, preflights: after.preflights - before.preflights }).toEqual({ posts: 1, preflights: 0 });
    expect(before.preflights, 'assignment and definition needed their preflights').toBeGreaterThanOrEqual(2);
    const rows = storedFor('normal-1');
    expect(rows).toHaveLength(1);
    expect(rows[0].condition).toBe(condition);
    expect(rows[0].response_id).toMatch(/^[0-9a-f]{32}$/);
    // The assignment is sticky: the service still gives this respondent the same condition.
    const again = await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/assignments`, payload: { respondent: 'normal-1' } });
    expect(again.json()).toMatchObject({ condition, new: false });
    await page.close();
  });

  it('2. network cut during submit, reload while cut, network back → stored exactly once', async () => {
    // The site's own copy of the client, so that the page itself still loads while the service is cut off.
    const url = `${allowed}/survey.html?respondent=offline-1&client=local`;
    const page = await open(url);
    const posts = countPosts(page);
    let reachedService = 0;
    const cut = async (route: Route) => {
      const req = route.request();
      if (req.method() === 'POST' && req.url().endsWith('/responses') && reachedService === 0) {
        // The first answer reaches the service and is stored, but the reply is lost on the way back.
        reachedService++;
        await route.fetch();
      }
      await route.abort('internetdisconnected');
    };
    await page.route(`${service}/**`, cut);
    await fill(page, { satisfaction: '3', trust: '2', fair_price: '61' });
    await page.locator('button[type=submit]').click();
    expect(await statusOf(page, 'queued')).toBe(SAVED);
    expect(reachedService).toBe(1);
    expect(storedFor('offline-1')).toHaveLength(1); // stored, but the page could not know
    expect(await page.evaluate(() => indexedDB.databases().then((d) => d.map((x) => x.name)))).toContain('splitballot-collect');

    // Reload with the network still cut: the answer is still waiting.
    await page.reload();
    await page.locator('form[data-ready="true"]').waitFor({ timeout: 15_000 });
    expect(await statusOf(page, 'queued')).toBe(SAVED);
    const postsWhileCut = posts.posts;
    expect(postsWhileCut).toBeGreaterThanOrEqual(2); // the first submit and the flush after the reload

    // Network back: the browser's "online" event sends the queue.
    await page.unroute(`${service}/**`, cut);
    await page.evaluate(() => window.dispatchEvent(new Event('online')));
    expect(await statusOf(page, 'stored')).toBe(THANKS);
    sent.add('offline-1');
    expect(storedFor('offline-1')).toHaveLength(1);
    // Nothing is left in the queue: another reload sends nothing.
    await page.reload();
    await page.locator('form[data-ready="true"]').waitFor({ timeout: 15_000 });
    const before = posts.posts;
    await page.waitForTimeout(500);
    expect(posts.posts).toBe(before);
    expect(storedFor('offline-1')).toHaveLength(1);
    await page.close();
  });

  it('2b. without IndexedDB the queue lives in localStorage and survives a reload the same way', async () => {
    const page = await context.newPage();
    page.on('pageerror', (err) => problems.push(`page error: ${err.message}`));
    await page.addInitScript(() => Object.defineProperty(window, 'indexedDB', { value: undefined, configurable: true }));
    await page.goto(`${allowed}/survey.html?respondent=offline-ls-1&client=local`);
    await page.locator('form[data-ready="true"]').waitFor({ timeout: 15_000 });
    const cut = (route: Route) => route.abort('internetdisconnected');
    await page.route(`${service}/**`, cut);
    await fill(page, { satisfaction: '2', trust: '1', fair_price: '80' });
    await page.locator('button[type=submit]').click();
    expect(await statusOf(page, 'queued')).toBe(SAVED);
    const kept = await page.evaluate(() => Object.keys(localStorage).filter((k) => k.startsWith('splitballot|v1|') && k.endsWith('|r|offline-ls-1')));
    expect(kept).toHaveLength(1);
    expect(storedFor('offline-ls-1')).toHaveLength(0);
    await page.reload();
    await page.locator('form[data-ready="true"]').waitFor({ timeout: 15_000 });
    expect(await statusOf(page, 'queued')).toBe(SAVED);
    await page.unroute(`${service}/**`, cut);
    await page.evaluate(() => window.dispatchEvent(new Event('online')));
    expect(await statusOf(page, 'stored')).toBe(THANKS);
    sent.add('offline-ls-1');
    expect(storedFor('offline-ls-1')).toHaveLength(1);
    await page.close();
  });

  it('3. a double submit, and two tabs of the same respondent → one stored answer each', async () => {
    const page = await open(`${allowed}/survey.html?respondent=double-1`);
    const posts = countPosts(page);
    await fill(page, { satisfaction: '9', trust: '7', fair_price: '20' });
    // Two submits in the same moment (a double click that the page does not prevent).
    await page.evaluate(() => {
      const form = document.getElementById('survey') as HTMLFormElement;
      form.requestSubmit();
      form.requestSubmit();
    });
    expect(await statusOf(page, 'stored')).toBe(THANKS);
    await page.waitForTimeout(300);
    // Both submits went out (a third POST is possible if the page-load flush saw the first one waiting).
    expect(posts.posts).toBeGreaterThanOrEqual(2);
    expect(posts.posts).toBeLessThanOrEqual(3);
    sent.add('double-1');
    expect(storedFor('double-1')).toHaveLength(1);
    await page.close();

    const tab1 = await open(`${allowed}/survey.html?respondent=tabs-1`);
    const tab2 = await open(`${allowed}/survey.html?respondent=tabs-1`);
    expect(await tab2.locator('form').getAttribute('data-condition')).toBe(await tab1.locator('form').getAttribute('data-condition'));
    for (const tab of [tab1, tab2]) await fill(tab, { satisfaction: '5', trust: '4', fair_price: '45' });
    await Promise.all([tab1.locator('button[type=submit]').click(), tab2.locator('button[type=submit]').click()]);
    expect(await statusOf(tab1, 'stored')).toBe(THANKS);
    expect(await statusOf(tab2, 'stored')).toBe(THANKS);
    sent.add('tabs-1');
    expect(storedFor('tabs-1')).toHaveLength(1);
    await tab1.close();
    await tab2.close();
  });

  it('4. the service answers 503 then 429 with Retry-After → the client waits as told and succeeds', async () => {
    const page = await open(`${allowed}/survey.html?respondent=busy-1`);
    const attempts: { at: number; status: number }[] = [];
    await page.route(`${service}/v1/experiments/${WATER_ID}/responses`, async (route) => {
      if (route.request().method() !== 'POST') return route.continue();
      const n = attempts.length;
      const status = n === 0 ? 503 : n === 1 ? 429 : 0;
      attempts.push({ at: Date.now(), status });
      if (status === 0) return route.continue();
      return route.fulfill({
        status,
        headers: {
          'content-type': 'application/problem+json',
          'retry-after': n === 0 ? '1' : '2',
          'access-control-allow-origin': allowed,
          'access-control-expose-headers': 'ETag, Location, Retry-After',
        },
        body: JSON.stringify({ type: `urn:splitballot:problem:${status === 503 ? 'unavailable' : 'rate-limited'}`, title: 'Busy', status, detail: 'busy' }),
      });
    });
    await fill(page, { satisfaction: '6', trust: '5', fair_price: '40' });
    await page.locator('button[type=submit]').click();
    expect(await statusOf(page, 'stored', 20_000)).toBe(THANKS);
    sent.add('busy-1');
    expect(attempts.map((a) => a.status)).toEqual([503, 429, 0]);
    // Waited at least as told: 1 s after the 503, 2 s after the 429. The client adds at most 20 %; the upper
    // bounds allow 3 s more for delivery on a busy shared machine (they only catch a far too long wait).
    const afterUnavailable = attempts[1].at - attempts[0].at;
    const afterRateLimited = attempts[2].at - attempts[1].at;
    expect(afterUnavailable, `${afterUnavailable} ms after the 503`).toBeGreaterThanOrEqual(1000);
    expect(afterUnavailable, `${afterUnavailable} ms after the 503`).toBeLessThan(1200 + 3000);
    expect(afterRateLimited, `${afterRateLimited} ms after the 429`).toBeGreaterThanOrEqual(2000);
    expect(afterRateLimited, `${afterRateLimited} ms after the 429`).toBeLessThan(2400 + 3000);
    expect(storedFor('busy-1')).toHaveLength(1);
    await page.close();
  });

  it('5. an out-of-range value is shown before sending; a value the service refuses shows its field error and is not queued', async () => {
    const page = await open(`${allowed}/survey.html?study=${CHANGING_ID}&respondent=limits-1`);
    await page.waitForFunction(() => document.querySelector('form[data-condition]') !== null);
    const posts = countPosts(page);
    await fill(page, { satisfaction: '14', trust: '4', fair_price: '30' });
    await page.locator('button[type=submit]').click();
    expect(await statusOf(page, 'invalid')).toBe('Please check the marked answers.');
    expect(await page.locator('[data-error-for="satisfaction"]').textContent()).toBe('14 is outside the scale from 0 to 10');
    expect(await page.locator('#satisfaction').getAttribute('aria-invalid')).toBe('true');
    expect(await page.locator('#satisfaction').getAttribute('aria-describedby')).toBe(await page.locator('[data-error-for="satisfaction"]').getAttribute('id'));
    expect(posts.posts).toBe(0);

    // Meanwhile the study's limits change (no answers yet, so they may): satisfaction now 0–5.
    const patch = await t.request({ method: 'PATCH', url: `/v1/experiments/${CHANGING_ID}`, payload: { measures: [{ id: 'satisfaction', max: 5 }] } });
    expect(patch.statusCode, patch.body).toBe(200);
    await page.locator('#satisfaction').fill('8'); // fine by the limits the page loaded, not by the service's
    await page.locator('button[type=submit]').click();
    const text = await statusOf(page, 'refused');
    expect(text).toMatch(/^The request body has 1 problem/);
    expect(await page.locator('[data-error-for="satisfaction"]').textContent()).toBe('8 is outside the scale from 0 to 5');
    expect(await page.locator('[data-error-for="trust"]').textContent()).toBe('');
    expect(posts.posts).toBe(1);
    // Nothing waits in the browser's queue (asked through a second client on the same storage; the code is a
    // string so that the test runner does not rewrite its import()).
    const waiting = await page.evaluate(`(async () => {
      const form = document.getElementById('survey');
      const { createClient } = await import(form.dataset.service + '/client/v1/collect.js');
      return createClient({ service: form.dataset.service, study: form.dataset.study, key: 'unused', autoFlush: false }).pending();
    })()`);
    expect(waiting).toBe(0);
    expect(stored(CHANGING_ID)).toEqual([]);
    await page.close();
  });

  it('6. an origin the service does not allow cannot use the client, and the page says why', async () => {
    const before = stored().length;
    // The versioned module itself is refused by CORS: the page falls back to the plain form and says so.
    const page = await open(`${disallowed}/survey.html?respondent=foreign-1`, false);
    const text = await statusOf(page, 'no-client-origin');
    expect(text).toBe(`The survey service does not allow this page's address (${disallowed}) to use its answer helper (CORS). Your answers will be sent the plain way.`);
    // The site's own copy of the client loads, but the service's answers are not shown to this origin.
    const local = await open(`${disallowed}/survey.html?respondent=foreign-2&client=local`, false);
    const why = await statusOf(local, 'origin-not-allowed');
    expect(why).toContain(`does not accept requests from ${disallowed}: this page's origin is not among its allowed origins (CORS).`);
    expect(await local.locator('form').getAttribute('data-ready')).toBeNull();
    expect(stored().length).toBe(before);
    await page.close();
    await local.close();
  });

  it('without JavaScript the plain form post stores the answer and shows the thank-you page', async () => {
    const browser = await chromium.launch({ executablePath: CHROMIUM!, headless: true, args: LAUNCH_ARGS });
    try {
      const plain = await browser.newContext({ javaScriptEnabled: false });
      const page = await plain.newPage();
      await page.goto(`${allowed}/survey.html`);
      await fill(page, { satisfaction: '4', trust: '3', fair_price: '52.25' });
      const before = stored().length;
      await Promise.all([page.waitForURL(`${service}/thank-you`), page.locator('button[type=submit]').click()]);
      const rows = stored();
      expect(rows.length).toBe(before + 1);
      expect(rows.at(-1)).toMatchObject({ condition: 'bill-first', respondent: null });
      sent.add(`plain:${rows.at(-1)!.response_id}`);
    } finally {
      await browser.close();
    }
  }, 60_000);

  it('answers stored = answers sent by the simulated respondents; no page errors', () => {
    const rows = stored();
    expect(rows.length, `stored ${rows.length}, sent ${sent.size}: ${[...sent].join(', ')}`).toBe(sent.size);
    const byRespondent = new Set(rows.map((r) => r.respondent ?? `plain:${r.response_id}`));
    expect(byRespondent).toEqual(sent);
    expect(problems).toEqual([]);
  });
});
