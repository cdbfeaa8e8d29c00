/**
 * The OpenAPI document: the committed openapi/openapi.json equals what the code generates (only whitespace is
 * normalised), it is a valid OpenAPI 3.1 document (@apidevtools/swagger-parser), GET /openapi.json serves the
 * same, and the routes of the results-page/import/export/events work carry a description, problem responses and
 * (where there is a body to show) an example.
 */
import { readFileSync } from 'node:fs';
import SwaggerParser from '@apidevtools/swagger-parser';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { generateOpenApi, openApiPath } from '../../server/cli/openapi.js';
import { startTestApp, type TestApp } from '../helpers/app.js';

let generated: Record<string, unknown>;
let t: TestApp;
beforeAll(async () => {
  generated = await generateOpenApi();
  t = await startTestApp();
});
afterAll(async () => {
  await t.close();
});

type Operation = { description?: string; responses?: Record<string, { content?: Record<string, { schema?: unknown; example?: unknown }> }>; requestBody?: unknown };

function operations(doc: Record<string, unknown>): [string, string, Operation][] {
  const out: [string, string, Operation][] = [];
  for (const [path, item] of Object.entries(doc.paths as Record<string, Record<string, Operation>>)) {
    for (const [method, op] of Object.entries(item)) out.push([method.toUpperCase(), path, op]);
  }
  return out;
}

describe('openapi/openapi.json', () => {
  it('is what the code generates (run `npm run openapi` after changing a route or schema)', () => {
    const committed = readFileSync(openApiPath(), 'utf8');
    expect(committed.endsWith('}\n'), 'the file ends with a newline').toBe(true);
    // Normalise whitespace only: parse and print both the same way; key order counts.
    expect(JSON.stringify(JSON.parse(committed)), 'openapi/openapi.json is stale: run `npm run openapi`').toBe(JSON.stringify(generated));
  });

  it('is a valid OpenAPI 3.1 document', async () => {
    expect(generated.openapi).toBe('3.1.0');
    await expect(SwaggerParser.validate(structuredClone(generated) as never)).resolves.toBeTruthy();
  });

  it('is served at GET /openapi.json without a key', async () => {
    const res = await t.request({ method: 'GET', url: '/openapi.json', key: null });
    expect(res.statusCode).toBe(200);
    expect(res.headers['content-type']).toBe('application/json; charset=utf-8');
    expect(res.json()).toEqual(generated);
  });

  it('documents the import, export, events and page routes completely', () => {
    const mine = [
      ['POST', '/v1/experiments/{id}/responses/import'],
      ['GET', '/v1/experiments/{id}/responses.csv'],
      ['GET', '/v1/experiments/{id}/responses.ndjson'],
      ['GET', '/v1/experiments/{id}/comparisons.csv'],
      ['GET', '/v1/experiments/{id}/events'],
      ['GET', '/experiments/{id}'],
      ['GET', '/pages/{name}'],
      ['GET', '/openapi.json'],
    ];
    const ops = operations(generated);
    for (const [method, path] of mine) {
      const op = ops.find(([m, p]) => m === method && p === path)?.[2];
      expect(op, `${method} ${path}`).toBeDefined();
      expect(op!.description?.length ?? 0, `${method} ${path} description`).toBeGreaterThan(40);
      expect(op!.responses?.['500']?.content?.['application/problem+json'], `${method} ${path} problem response`).toBeDefined();
    }
    const text = JSON.stringify(generated.paths);
    expect(text).toContain('r-0002,service-first,panel-118'); // the import body example
  });
});
