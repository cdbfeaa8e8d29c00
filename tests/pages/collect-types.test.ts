/**
 * collect.js is plain JavaScript with JSDoc types (`// @ts-check`) and its declarations in collect.d.ts. This runs
 * the TypeScript compiler over the module in strict mode with the browser's library, so that the JSDoc, the
 * declarations and the code agree. (The tests' own use of the declarations is checked by tsconfig.test.json.)
 */
import { execFile } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));

describe('collect.js types', () => {
  it('type-checks strictly against collect.d.ts and the DOM library', async () => {
    const args = [
      '--ignoreConfig', '--noEmit', '--allowJs', '--checkJs', '--strict', '--lib', 'es2022,dom,dom.iterable',
      '--target', 'es2022', '--module', 'nodenext', '--moduleResolution', 'nodenext', '--types', 'node',
      'server/pages/collect/v1/collect.js',
    ];
    const result = await new Promise<{ code: number; output: string }>((resolve) => {
      execFile(`${ROOT}node_modules/.bin/tsc`, args, { cwd: ROOT }, (err, stdout, stderr) =>
        resolve({ code: err ? ((err as { code?: number }).code ?? 1) : 0, output: stdout + stderr }),
      );
    });
    expect(result.output).toBe('');
    expect(result.code).toBe(0);
  });
});
