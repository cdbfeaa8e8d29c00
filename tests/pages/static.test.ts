import { readFileSync, existsSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

// The results page runs under Content-Security-Policy default-src 'self': no inline script or style, nothing
// from another origin, no key in a URL. These checks read the static files as text.

const dir = join(dirname(fileURLToPath(import.meta.url)), '../../server/pages');
const read = (name: string): string => readFileSync(join(dir, name), 'utf8');

describe('results page files', () => {
  const html = read('results.html');
  const js = read('results.js');
  const css = read('results.css');

  it('has no inline script, inline style or event-handler attribute', () => {
    expect(html).not.toMatch(/<script(?![^>]*\bsrc=)[^>]*>/i);
    expect(html).not.toMatch(/<style/i);
    expect(html).not.toMatch(/\sstyle=/i);
    expect(html).not.toMatch(/\son[a-z]+=/i);
    expect(js).not.toMatch(/\.innerHTML|outerHTML|insertAdjacentHTML|document\.write|\beval\(|new Function/);
    expect(js).not.toMatch(/setAttribute\(\s*['"]style['"]/);
    const groups = read('groups.js');
    expect(groups).not.toMatch(/\.innerHTML|outerHTML|insertAdjacentHTML|document\.write|\beval\(|new Function/);
    expect(groups).not.toMatch(/style/);
  });

  it('loads nothing from another origin', () => {
    for (const [name, text] of [['results.html', html], ['results.js', js], ['results.css', css]] as const) {
      expect(text, name).not.toMatch(/(?:src|href)\s*=\s*["']?(?:https?:)?\/\//i);
      expect(text, name).not.toMatch(/url\(\s*["']?(?:https?:)?\/\//i);
      expect(text, name).not.toMatch(/@import/);
    }
    expect(js).not.toMatch(/fetch\(\s*['"`]https?:/);
  });

  it('references only files that exist, by the /pages/ paths the service serves', () => {
    const refs = [...html.matchAll(/(?:src|href)="(\/pages\/[^"]+)"/g)].map((m) => m[1]);
    expect(refs.sort()).toEqual(['/pages/icon.svg', '/pages/results.css', '/pages/results.js']);
    for (const r of refs) expect(existsSync(join(dir, r.replace('/pages/', ''))), r).toBe(true);
    const imports = [...js.matchAll(/from\s+'([^']+)'/g)].map((m) => m[1]);
    expect(imports.sort()).toEqual(['./answers.js', './format.js', './groups.js', './sse.js', './workbench.js']);
    for (const i of imports) expect(existsSync(join(dir, i))).toBe(true);
  });

  it('keeps the key out of URLs and out of persistent storage', () => {
    expect(js).toMatch(/Authorization: `Bearer \$\{state\.key\}`/);
    expect(js).not.toMatch(/localStorage/);
    expect(js).not.toMatch(/new EventSource/);
    expect(js).not.toMatch(/[?&](?:key|token|apiKey)=/i);
    expect(html).toMatch(/<input[^>]*type="password"/);
  });

  it('states the cautions in the footer', () => {
    const footer = html.slice(html.indexOf('<footer'));
    for (const phrase of [/primary item/i, /adjusted p-values/i, /interim/i, /consent, ethics-review and data-protection/i, /statistician/i]) {
      expect(footer).toMatch(phrase);
    }
  });
});

describe('assets module', () => {
  it('lists files that exist and finds the folder', async () => {
    const { PAGE_ASSETS, RESULTS_HTML, RESULTS_PAGE_CSP, pagesDirectory } = await import('../../server/http/page-assets.js');
    expect(pagesDirectory()).toBe(dir.replace(/\/$/, ''));
    for (const name of [RESULTS_HTML, ...Object.keys(PAGE_ASSETS)]) expect(existsSync(join(dir, name)), name).toBe(true);
    // Every file the page loads is in the served list.
    const html = read('results.html');
    for (const m of html.matchAll(/(?:src|href)="\/pages\/([^"]+)"/g)) expect(PAGE_ASSETS).toHaveProperty(m[1]);
    expect(RESULTS_PAGE_CSP).toMatch(/default-src 'self'/);
    expect(RESULTS_PAGE_CSP).not.toMatch(/unsafe-inline|unsafe-eval/);
  });
});
