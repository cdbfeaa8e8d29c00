/**
 * Bulk clean-up after a form key leaked: a dry run counts and changes nothing; applying excludes (or erases) exactly
 * the answers of the key or the time window in one transaction — counts, dataVersion once, audit rows — and
 * `splitballot check` finds every invariant intact afterwards. All data are invented.
 */
import { describe, expect, it } from 'vitest';
import { checkFile } from '../../../server/store/sqlite/check.js';
import type { PostgresStore } from '../../../server/store/postgres/store.js';
import { eachTestApp, TEST_ENGINE, waterResponse, WATER_ID, type TestApp } from '../../helpers/app.js';

/** `splitballot check` on the test app's database, whichever engine (SQLite: the file, after the app closed). */
async function checkStore(): Promise<{ ok: boolean; problems: string[] }> {
  if (TEST_ENGINE === 'postgres') return (t.store as unknown as PostgresStore).check();
  return checkFile(t.dbPath);
}

const BASE = `/v1/experiments/${WATER_ID}`;
let t: TestApp;
eachTestApp((app) => (t = app));

async function definition() {
  return (await t.request({ method: 'GET', url: BASE })).json() as { dataVersion: number; counts: { responses: number; excluded: number } };
}
async function auditEntries() {
  return (await t.request({ method: 'GET', url: `${BASE}/audit` })).json().entries as { action: string; responseId: string | null; reason: string | null; count: number; dataVersion: number }[];
}
const cleanUp = (body: Record<string, unknown>) => t.request({ method: 'POST', url: `${BASE}/clean-up`, payload: body });

/** 6 good answers (admin key), 12 junk ones through a leaked form key; one junk answer already excluded by hand. */
async function leakedKeyScenario(): Promise<{ leakedId: number }> {
  const leaked = await t.key('form', WATER_ID, 'leaked form key');
  const leakedId = (await t.store.apiKeys.list()).find((k) => k.label === 'leaked form key')!.id;
  for (let i = 0; i < 6; i++) {
    expect((await t.request({ method: 'POST', url: `${BASE}/responses`, payload: waterResponse({ responseId: `good-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: i }) })).statusCode).toBe(201);
  }
  for (let i = 0; i < 12; i++) {
    const res = await t.request({ method: 'POST', url: `${BASE}/responses`, key: leaked, payload: waterResponse({ responseId: `junk-${i}`, condition: i % 2 ? 'bill-first' : 'service-first' }, { satisfaction: 10 }) });
    expect(res.statusCode).toBe(201);
  }
  expect((await t.request({ method: 'POST', url: `${BASE}/responses/junk-0/exclusion`, payload: { reason: 'speeder' } })).statusCode).toBe(200);
  return { leakedId };
}

describe('POST …/clean-up', () => {
  it('dry run by key: counts, changes nothing; applied: excludes exactly those answers in one step, audited; check passes', async () => {
    const { leakedId } = await leakedKeyScenario();
    const before = await definition();
    const auditBefore = await auditEntries();
    const dry = await cleanUp({ action: 'exclude', reason: 'form key leaked', apiKey: leakedId });
    expect(dry.statusCode, dry.body).toBe(200);
    expect(dry.json()).toEqual({ action: 'exclude', dryRun: true, matched: 12, changed: 11, dataVersion: before.dataVersion });
    expect(await definition()).toEqual(before);
    expect(await auditEntries()).toEqual(auditBefore);

    const applied = await cleanUp({ action: 'exclude', reason: 'form key leaked', apiKey: leakedId, dryRun: false });
    expect(applied.json()).toEqual({ action: 'exclude', dryRun: false, matched: 12, changed: 11, dataVersion: before.dataVersion + 1 });
    const after = await definition();
    expect(after.counts).toMatchObject({ responses: 18, excluded: 12 });
    expect(after.dataVersion).toBe(before.dataVersion + 1);
    const newRows = (await auditEntries()).slice(0, 11);
    expect(newRows.map((r) => r.responseId).sort()).toEqual(Array.from({ length: 11 }, (_, i) => `junk-${i + 1}`).sort());
    expect(new Set(newRows.map((r) => `${r.action}|${r.reason}|${r.count}|${r.dataVersion}`))).toEqual(new Set([`exclude|form key leaked|1|${before.dataVersion + 1}`]));
    // The comparison sees only the good answers: satisfaction 0..5, none of the junk 10s.
    const cmp = (await t.request({ method: 'GET', url: `${BASE}/comparisons/satisfaction` })).json();
    expect(cmp.groups.a.n + cmp.groups.b.n).toBe(6);
    // Applying again changes nothing and does not move dataVersion.
    expect((await cleanUp({ action: 'exclude', reason: 'again', apiKey: leakedId, dryRun: false })).json()).toMatchObject({ matched: 12, changed: 0, dataVersion: before.dataVersion + 1 });
    await t.app.close();
    const report = await checkStore();
    expect(report.problems).toEqual([]);
    expect(report.ok).toBe(true);
  });

  it('erase by time window (a batch: its receivedAt at both ends): deletes those answers only, one audit row with the count', async () => {
    await t.request({ method: 'POST', url: `${BASE}/responses`, payload: waterResponse({ responseId: 'keep-1' }) });
    await new Promise((r) => setTimeout(r, 5));
    const batch = await t.request({ method: 'POST', url: `${BASE}/responses/batch`, payload: { responses: Array.from({ length: 7 }, (_, i) => waterResponse({ responseId: `batch-${i}` })) } });
    expect(batch.statusCode).toBe(201);
    await new Promise((r) => setTimeout(r, 5));
    await t.request({ method: 'POST', url: `${BASE}/responses`, payload: waterResponse({ responseId: 'keep-2' }) });
    const rows = (await t.request({ method: 'GET', url: `${BASE}/responses.ndjson` })).body.trim().split('\n').map((l) => JSON.parse(l) as { responseId: string; receivedAt: string });
    const at = rows.find((r) => r.responseId === 'batch-0')!.receivedAt;
    expect(rows.filter((r) => r.receivedAt === at).map((r) => r.responseId)).toHaveLength(7);
    const before = await definition();
    const window = { receivedFrom: at, receivedTo: at };
    expect((await cleanUp({ action: 'erase', reason: 'test batch sent to the live study', ...window })).json()).toEqual({ action: 'erase', dryRun: true, matched: 7, changed: 7, dataVersion: before.dataVersion });
    expect((await definition()).counts.responses).toBe(9);
    const applied = await cleanUp({ action: 'erase', reason: 'test batch sent to the live study', ...window, dryRun: false });
    expect(applied.json()).toEqual({ action: 'erase', dryRun: false, matched: 7, changed: 7, dataVersion: before.dataVersion + 1 });
    const left = (await t.request({ method: 'GET', url: `${BASE}/responses.ndjson` })).body.trim().split('\n').map((l) => JSON.parse(l).responseId);
    expect(left).toEqual(['keep-1', 'keep-2']);
    expect((await auditEntries())[0]).toMatchObject({ action: 'erase', responseId: null, reason: 'test batch sent to the live study', count: 7, dataVersion: before.dataVersion + 1 });
    await t.app.close();
    expect((await checkStore()).problems).toEqual([]);
  });

  it('refuses a clean-up without any filter, a window that ends before it starts, and non-admin keys', async () => {
    const none = await cleanUp({ action: 'erase', reason: 'everything?' });
    expect(none.statusCode).toBe(422);
    expect(none.json().errors).toEqual([{ path: 'apiKey', message: 'give at least one of receivedFrom, receivedTo and apiKey (a clean-up never takes every answer)' }]);
    const backwards = await cleanUp({ action: 'exclude', reason: 'x', receivedFrom: '2027-03-02T00:00:00Z', receivedTo: '2027-03-01T00:00:00Z' });
    expect(backwards.statusCode).toBe(422);
    expect(backwards.json().errors).toEqual([{ path: 'receivedTo', message: 'must not be before receivedFrom' }]);
    for (const scope of ['read', 'ingest', 'form'] as const) {
      const res = await t.request({ method: 'POST', url: `${BASE}/clean-up`, key: await t.key(scope), payload: { action: 'exclude', reason: 'x', apiKey: 1 } });
      expect(res.statusCode).toBe(403);
    }
  });
});
