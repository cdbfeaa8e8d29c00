/**
 * Size budget of the browser client: a minified copy (esbuild, as an author's bundler would) must stay under
 * 8 KiB gzipped, and the module must import nothing. The figures are printed; this is a budget check, not a
 * timing. (esbuild comes with tsx, a development dependency.)
 */
import { readFileSync } from 'node:fs';
import { gzipSync } from 'node:zlib';
import { transform } from 'esbuild';
import { describe, expect, it } from 'vitest';
import { clientDirectory } from '../../server/http/routes/client-script.js';

const BUDGET_GZIP_BYTES = 8 * 1024;

describe('collect.js size', () => {
  it('is under 8 KiB minified and gzipped, with no imports', async () => {
    const source = readFileSync(`${clientDirectory()}/collect.js`, 'utf8');
    expect(source).not.toMatch(/^\s*import\s/m);
    expect(source).not.toMatch(/\brequire\(/);
    const minified = (await transform(source, { minify: true, format: 'esm', target: 'es2020' })).code;
    const gzipped = gzipSync(minified, { level: 9 }).length;
    const sourceGzipped = gzipSync(source, { level: 9 }).length;
    console.log(
      `collect.js: source ${source.length} B (gzip ${sourceGzipped} B); minified ${minified.length} B, minified + gzip ${gzipped} B ` +
        `(budget ${BUDGET_GZIP_BYTES} B)`,
    );
    expect(gzipped, `minified + gzip: ${gzipped} B, budget ${BUDGET_GZIP_BYTES} B`).toBeLessThan(BUDGET_GZIP_BYTES);
  });
});
