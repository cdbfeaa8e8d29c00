/**
 * Backup under load (issue 6, test 6): while 6 clients post single responses and batches over HTTP, a backup is
 * taken (a) through POST /v1/admin/backup (the service's own connection; SQLite updates the copy as writes
 * arrive) and (b) with `splitballot backup PATH` from another connection (SQLite restarts the copy when the
 * service writes; after a restart the rest is copied in one step). Each backup must open cleanly, pass `check`,
 * and hold every response acknowledged before the backup started. Ingest keeps being acknowledged while the
 * backups run.
 */
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { checkFile } from '../../server/store/sqlite/check.js';
import { openDatabase } from '../../server/store/sqlite/open.js';
import { cli, startTestApp, tempDir, waterResponse, WATER_ID, type TestApp } from '../helpers/app.js';

let t: TestApp;
let base = '';
let backupDir = '';

beforeAll(async () => {
  backupDir = join(tempDir(), 'backups');
  t = await startTestApp({ config: { backupDir } });
  expect((await t.createWater()).statusCode).toBe(201);
  // Some bulk first, so that a copy takes more than a few steps.
  for (let b = 0; b < 6; b++) {
    const responses = Array.from({ length: 2000 }, (_, i) => waterResponse({ responseId: `bulk-${b}-${i}`, respondent: `someone-${b}-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i % 11, fair_price: (i % 2000) / 10 }));
    expect((await t.request({ method: 'POST', url: `/v1/experiments/${WATER_ID}/responses/batch`, payload: { responses } })).statusCode).toBe(201);
  }
  await t.app.listen({ port: 0, host: '127.0.0.1' });
  const a = t.app.server.address();
  base = `http://127.0.0.1:${typeof a === 'object' && a ? a.port : 0}`;
});
afterAll(async () => t.close());

function idsIn(path: string): Set<string> {
  const db = openDatabase(path, { readonly: true });
  try {
    return new Set(db.prepare(`SELECT response_id FROM responses`).pluck().all() as string[]);
  } finally {
    db.close();
  }
}

describe('backup while ingest runs', () => {
  it('API and CLI backups each hold every response acknowledged before they started, and pass check', async () => {
    const acked: string[] = [];
    let running = true;
    let errors = 0;
    const auth = { authorization: `Bearer ${t.adminKey}`, 'content-type': 'application/json' };
    const client = async (c: number) => {
      for (let i = 0; running; i++) {
        const batch = i % 5 === 4;
        const items = batch
          ? Array.from({ length: 20 }, (_, k) => waterResponse({ responseId: `c${c}-${i}-${k}` }, { satisfaction: (c + k) % 11 }))
          : [waterResponse({ responseId: `c${c}-${i}` }, { satisfaction: (c + i) % 11 })];
        const r = await fetch(`${base}/v1/experiments/${WATER_ID}/responses${batch ? '/batch' : ''}`, {
          method: 'POST',
          headers: auth,
          body: JSON.stringify(batch ? { responses: items } : items[0]),
        });
        await r.arrayBuffer();
        if (r.status === 201) for (const it of items) acked.push(it.responseId as string);
        else errors++;
      }
    };
    const clients = Promise.all(Array.from({ length: 6 }, (_, c) => client(c)));
    await new Promise((r) => setTimeout(r, 300));

    // (a) through the API.
    const beforeApi = acked.slice();
    const api = await fetch(`${base}/v1/admin/backup`, { method: 'POST', headers: auth, body: JSON.stringify({ name: 'under-load.db' }) });
    expect(api.status).toBe(201);
    const ackedDuringApi = acked.length - beforeApi.length;

    // (b) with the CLI, from another connection.
    const beforeCli = acked.slice();
    const cliPath = join(tempDir(), 'cli-under-load.db');
    const { code, stdout: out, stderr: err } = await cli(['backup', cliPath], { SPLITBALLOT_DB: t.dbPath });
    await new Promise((r) => setTimeout(r, 200));
    running = false;
    await clients;
    expect(code, err).toBe(0);
    expect(out).toMatch(/^backup ok: /);
    expect(errors).toBe(0);
    expect(beforeApi.length).toBeGreaterThan(0);

    for (const [path, before] of [
      [join(backupDir, 'under-load.db'), beforeApi],
      [cliPath, beforeCli],
    ] as const) {
      const report = checkFile(path);
      expect(report.problems.concat(report.integrity), path).toEqual([]);
      const ids = idsIn(path);
      const missing = before.filter((id) => !ids.has(id));
      expect(missing, `${path} lacks acknowledged responses`).toEqual([]);
      expect(ids.size).toBeGreaterThanOrEqual(12_000 + before.length);
    }
    // eslint-disable-next-line no-console
    console.info(`backup under load: ${acked.length} responses acknowledged in all; ${ackedDuringApi} while the API backup ran`);
  }, 90_000);
});
