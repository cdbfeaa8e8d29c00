/**
 * The OpenAPI 3.1 document, generated from the routes' zod schemas by @fastify/swagger (no hand-kept copy).
 *
 *   npm run openapi        → tsc, then `node dist/server/cli/openapi.js`: writes openapi/openapi.json
 *   GET /openapi.json      → the same document, served by the running service (public)
 *
 * The app is built on an in-memory database (nothing is written anywhere but the output file). Key order is
 * stable: paths and component schemas are sorted by name; everything inside keeps the order the schemas
 * declare. The file ends with a newline. tests/cli/openapi.test.ts fails when the committed file differs.
 */
import { existsSync, writeFileSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { buildApp } from '../http/app.js';
import { openApiDocument, type Json } from '../http/openapi-document.js';

/** Build the app on an in-memory database and return its document. */
export async function generateOpenApi(): Promise<Record<string, Json>> {
  const app = buildApp({ port: 0, host: '127.0.0.1', dbPath: ':memory:', adminKeyHash: null, corsOrigins: [], logLevel: 'silent' });
  try {
    await app.ready();
    return openApiDocument(app);
  } finally {
    await app.close();
  }
}

export function openApiText(doc: unknown): string {
  return `${JSON.stringify(doc, null, 2)}\n`;
}

/** openapi/openapi.json of the project (from source or from dist/). */
export function openApiPath(): string {
  let dir = dirname(fileURLToPath(import.meta.url));
  for (let i = 0; i < 4; i++) {
    if (existsSync(join(dir, 'package.json'))) return join(dir, 'openapi', 'openapi.json');
    dir = resolve(dir, '..');
  }
  throw new Error('cannot find the project folder (package.json) above this module');
}

async function main(): Promise<void> {
  const doc = await generateOpenApi();
  const path = openApiPath();
  writeFileSync(path, openApiText(doc));
  const paths = Object.keys((doc.paths ?? {}) as object).length;
  process.stdout.write(`wrote ${path} (OpenAPI ${String(doc.openapi)}, ${paths} paths)\n`);
}

if (process.argv[1] && resolve(process.argv[1]) === fileURLToPath(import.meta.url)) {
  main().catch((err: unknown) => {
    process.stderr.write(`openapi: ${(err as Error).stack ?? String(err)}\n`);
    process.exit(1);
  });
}
