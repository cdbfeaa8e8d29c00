/**
 * The results page's static files and how to serve them (for the route that wires the page in).
 *
 *   GET /experiments/{id}   → results.html (the page reads the id from its own path)
 *   GET /pages/{name}       → one of PAGE_ASSETS, with its content type
 *
 * Every response of the page should carry RESULTS_PAGE_CSP: the page needs nothing beyond its own origin.
 * The files are plain text committed under server/pages/; `tsc` does not copy them to dist/, so
 * `pagesDirectory()` finds them in server/pages/ beside this module's folder when run from source (tsx, vitest) and
 * in the project's server/pages/ when run from dist/server/http/.
 */
import { existsSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

export const RESULTS_HTML = 'results.html';

/** Served file name → content type. Nothing outside this list is served from the folder. */
export const PAGE_ASSETS: Readonly<Record<string, string>> = Object.freeze({
  'results.js': 'text/javascript; charset=utf-8',
  'format.js': 'text/javascript; charset=utf-8',
  'sse.js': 'text/javascript; charset=utf-8',
  'groups.js': 'text/javascript; charset=utf-8',
  'workbench.js': 'text/javascript; charset=utf-8',
  'answers.js': 'text/javascript; charset=utf-8',
  'overview.js': 'text/javascript; charset=utf-8',
  'results.css': 'text/css; charset=utf-8',
  'icon.svg': 'image/svg+xml',
});

/** Content-Security-Policy for the page and its assets: own origin only, no inline script or style. */
export const RESULTS_PAGE_CSP =
  "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; " +
  "object-src 'none'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'";

/** Content type of a chart served by the comparison routes (chart.svg, trajectory.svg). */
export const SVG_CONTENT_TYPE = 'image/svg+xml; charset=utf-8';

/** The folder holding results.html and PAGE_ASSETS (source tree or, from dist/, the project's server/pages). */
export function pagesDirectory(): string {
  const here = dirname(fileURLToPath(import.meta.url));
  // server/http → server/pages from source; dist/server/http → the project's server/pages when built.
  const candidates = [resolve(here, '../pages'), resolve(here, '../../../server/pages')];
  for (const dir of candidates) if (existsSync(join(dir, RESULTS_HTML))) return dir;
  throw new Error(`results page files not found (looked in ${candidates.join(' and ')})`);
}
