/**
 * The splitballot command line: help for every command, keys create/list/revoke, migrate, configuration and
 * migration errors, and `serve` as a real child process (first start prints an admin key once; SIGTERM exits 0).
 */
import { loadMigrations } from '../../server/store/sqlite/migrate.js';
import { spawn } from 'node:child_process';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { openDatabase } from '../../server/store/sqlite/open.js';
import { cli, tempDir } from '../helpers/app.js';

const ROOT = fileURLToPath(new URL('../..', import.meta.url));

describe('help', () => {
  it('--help on the program and on each command', async () => {
    const main = await cli(['--help']);
    expect(main.code).toBe(0);
    expect(main.stdout).toContain('Usage: splitballot <command> [options]');
    for (const name of ['PORT', 'HOST', 'SPLITBALLOT_DB', 'SPLITBALLOT_ADMIN_KEY', 'SPLITBALLOT_CORS_ORIGINS', 'LOG_LEVEL']) expect(main.stdout).toContain(name);
    const pages: [string[], string][] = [
      [['serve', '--help'], 'Usage: splitballot serve'],
      [['migrate', '--help'], 'Usage: splitballot migrate'],
      [['keys', '--help'], 'Usage: splitballot keys <create|list|revoke>'],
      [['keys', 'create', '--help'], 'Usage: splitballot keys create --scope form|ingest|read|admin [--experiment ID] [--label TEXT]'],
      [['keys', 'list', '--help'], 'Usage: splitballot keys list'],
      [['keys', 'revoke', '--help'], 'Usage: splitballot keys revoke ID'],
    ];
    for (const [args, first] of pages) {
      const r = await cli(args);
      expect(r.code, args.join(' ')).toBe(0);
      expect(r.stdout.startsWith(first), args.join(' ')).toBe(true);
    }
  });

  it('usage errors exit 2 with a one-line reason', async () => {
    expect(await cli([])).toMatchObject({ code: 2 });
    expect(await cli(['launch'])).toMatchObject({ code: 2, stderr: 'splitballot: unknown command "launch"\nRun "splitballot --help" for usage.\n' });
    expect(await cli(['keys', 'create', '--scope', 'owner'])).toMatchObject({ code: 2, stderr: expect.stringContaining('--scope must be one of admin, ingest, read, form') });
    expect(await cli(['keys', 'revoke', 'abc'])).toMatchObject({ code: 2 });
    expect(await cli(['migrate', '--force'])).toMatchObject({ code: 2, stderr: expect.stringContaining("Unknown option '--force'") });
  });
});

describe('migrate and keys', () => {
  it('migrate applies once and then reports the database up to date', async () => {
    const db = join(tempDir(), 'sub', 'cli.db');
    const first = await cli(['migrate'], { SPLITBALLOT_DB: db });
    const names = loadMigrations().map((m) => m.name);
    expect(first).toEqual({ code: 0, stdout: `Applied ${names.length} migrations to ${db}: ${names.join(', ')}\n`, stderr: `splitballot: database ${db} (SPLITBALLOT_DB)\n` });
    const again = await cli(['migrate'], { SPLITBALLOT_DB: db });
    expect(again.stdout).toBe(`${db} is up to date (${names.length} migrations applied earlier).\n`);
  });

  it('keys create prints only the secret on stdout; list never shows secrets; revoke works once', async () => {
    const db = join(tempDir(), 'keys.db');
    const created = await cli(['keys', 'create', '--scope', 'read', '--label', 'dashboard'], { SPLITBALLOT_DB: db });
    expect(created.code).toBe(0);
    expect(created.stdout).toMatch(/^sb_[A-Za-z0-9_-]{43}\n$/);
    expect(created.stderr).toBe(`splitballot: database ${db} (SPLITBALLOT_DB)\nCreated key 1 (read). The secret above is shown only this once; store it now.\n`);
    const secret = created.stdout.trim();
    const list = await cli(['keys', 'list'], { SPLITBALLOT_DB: db });
    expect(list.stdout).toMatch(/^ID\s+SCOPE\s+EXPERIMENT\s+ORIGIN\s+CREATED\s+LAST USED\s+REVOKED\s+LABEL\n1\s+read\s+\*\s+cli\s+\S+\s+-\s+-\s+dashboard\n$/);
    const json = JSON.parse((await cli(['keys', 'list', '--json'], { SPLITBALLOT_DB: db })).stdout);
    expect(json).toEqual([{ id: 1, scope: 'read', experiment: null, experimentKey: null, label: 'dashboard', origin: 'cli', createdAt: expect.any(String), revokedAt: null, lastUsedAt: null }]);
    expect(JSON.stringify(json)).not.toContain(secret.slice(3));
    expect(await cli(['keys', 'revoke', '1'], { SPLITBALLOT_DB: db })).toMatchObject({ code: 0, stdout: 'Revoked key 1.\n' });
    expect(await cli(['keys', 'revoke', '1'], { SPLITBALLOT_DB: db })).toMatchObject({ code: 0, stdout: 'Key 1 was already revoked.\n' });
    expect(await cli(['keys', 'revoke', '7'], { SPLITBALLOT_DB: db })).toMatchObject({ code: 1, stderr: `splitballot: database ${db} (SPLITBALLOT_DB)\nsplitballot: there is no key 7\n` });
    // A key for an experiment that this file lacks: the message names the file looked in (often the wrong SPLITBALLOT_DB).
    expect(await cli(['keys', 'create', '--scope', 'ingest', '--experiment', 'nope'], { SPLITBALLOT_DB: db })).toMatchObject({
      code: 1,
      stderr:
        `splitballot: database ${db} (SPLITBALLOT_DB)\n` +
        `splitballot: there is no experiment nope in ${db} (SPLITBALLOT_DB); the CLI must use the same SPLITBALLOT_DB as the server\n`,
    });
    const form = await cli(['keys', 'create', '--scope', 'form', '--label', 'survey page'], { SPLITBALLOT_DB: db });
    expect(form.code).toBe(0);
    expect(form.stderr).toContain('Created key 2 (form).');
  });

  it('a bad variable or an edited migration stops with one line and exit code 1', async () => {
    expect(await cli(['serve'], { PORT: 'x' })).toEqual({
      code: 1,
      stdout: '',
      stderr: 'splitballot: Configuration error: PORT must be a whole number from 0 to 65535 (got "x")\n',
    });
    const db = join(tempDir(), 'edited.db');
    await cli(['migrate'], { SPLITBALLOT_DB: db });
    const raw = openDatabase(db);
    raw.prepare(`UPDATE schema_migrations SET checksum = 'abcdefabcdef00' WHERE name = '0001_init.sql'`).run();
    raw.close();
    const refused = await cli(['serve'], { SPLITBALLOT_DB: db, PORT: '0' });
    expect(refused.code).toBe(1);
    expect(refused.stderr).toMatch(/^splitballot: migration 0001_init\.sql was edited after it was applied to this database \(checksum abcdefabcdef… recorded, [0-9a-f]{12}… now\); revert the file and put the change in a new migration instead\n$/);
  });
});

/** Start `splitballot serve` (TypeScript source through tsx) and wait until it listens. */
function startServer(env: Record<string, string>) {
  const child = spawn(process.execPath, ['--import', 'tsx', 'server/main.ts', 'serve'], {
    cwd: ROOT,
    env: { ...process.env, PORT: '0', HOST: '127.0.0.1', LOG_LEVEL: 'info', SPLITBALLOT_ADMIN_KEY: '', ...env },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let stdout = '';
  let stderr = '';
  child.stdout.on('data', (d) => (stdout += d));
  child.stderr.on('data', (d) => (stderr += d));
  const exited = new Promise<number | null>((resolve) => child.on('exit', (code) => resolve(code)));
  const listening = new Promise<number>((resolve, reject) => {
    const timer = setInterval(() => {
      const m = /Server listening at http:\/\/127\.0\.0\.1:(\d+)/.exec(stdout);
      if (m) {
        clearInterval(timer);
        resolve(Number(m[1]));
      }
    }, 50);
    void exited.then((code) => {
      clearInterval(timer);
      reject(new Error(`server exited with ${code}: ${stderr}`));
    });
  });
  return { child, listening, exited, output: () => stdout, errors: () => stderr };
}

describe('serve (child process)', () => {
  it('first start prints an admin key once with a curl example; SIGTERM shuts down with exit code 0', async () => {
    // The database folder does not exist yet, as ./data on a fresh clone (regression: the server lock was
    // opened before the folder was created, and `npm start` failed on a fresh clone).
    const db = join(tempDir(), 'data-not-yet-created', 'serve.db');
    const first = startServer({ SPLITBALLOT_DB: db });
    const port = await first.listening;
    await new Promise((r) => setTimeout(r, 100));
    const m = /\n {2}(sb_[A-Za-z0-9_-]{43})\n/.exec(first.output());
    expect(m, first.output()).not.toBeNull();
    const secret = m![1];
    expect(first.output()).toContain(`Try it: curl -H "Authorization: Bearer ${secret}" http://127.0.0.1:${port}/v1/experiments`);
    const res = await fetch(`http://127.0.0.1:${port}/v1/experiments`, { headers: { authorization: `Bearer ${secret}` } });
    expect(res.status).toBe(200);
    expect(await res.json()).toEqual({ experiments: [] });
    first.child.kill('SIGTERM');
    expect(await first.exited).toBe(0);
    expect(first.output()).toContain('shutting down');
    // The key appears exactly once in the output (the block and the curl line), never in a log line.
    const logLines = first.output().split('\n').filter((l) => l.startsWith('{'));
    expect(logLines.length).toBeGreaterThan(0);
    for (const l of logLines) expect(l).not.toContain(secret);

    const second = startServer({ SPLITBALLOT_DB: db });
    const port2 = await second.listening;
    expect(second.output()).not.toContain('No admin key existed');
    expect((await fetch(`http://127.0.0.1:${port2}/v1/experiments`, { headers: { authorization: `Bearer ${secret}` } })).status).toBe(200);
    second.child.kill('SIGINT');
    expect(await second.exited).toBe(0);
  }, 60_000);
});
