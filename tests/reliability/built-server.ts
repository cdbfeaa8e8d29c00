/**
 * Start the real built server (`node dist/server/main.js serve`) as a child process on 127.0.0.1, for the
 * reliability tests. `npm test` compiles first, so dist/ exists there; when it does not (vitest run alone on a
 * clean checkout), the tests that need it are skipped with a loud message instead of testing stale code silently.
 */
import { waterBillDefinition } from '../helpers/water.js';
import { spawn, type ChildProcessByStdio } from 'node:child_process';
import { existsSync } from 'node:fs';
import { createServer } from 'node:net';
import { join } from 'node:path';
import type { Readable } from 'node:stream';
import { fileURLToPath } from 'node:url';

export const ROOT = fileURLToPath(new URL('../..', import.meta.url));
export const MAIN_JS = join(ROOT, 'dist', 'server', 'main.js');
export const HAVE_DIST = existsSync(MAIN_JS);

export function warnIfNoDist(what: string): void {
  if (!HAVE_DIST) {
    // eslint-disable-next-line no-console
    console.warn(
      `\n!!!!!!!!!!\n!!! SKIPPED ${what}: ${MAIN_JS} does not exist. Run \`npm run build\` (npm test does it) to run these tests.\n!!!!!!!!!!\n`,
    );
  }
}

/** A 64-character admin secret for SPLITBALLOT_ADMIN_KEY. */
export const ADMIN_SECRET = 'sb_reliability_admin_0123456789abcdefghijklmnopqrstuvwxyzABCDEFGH';

export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.once('error', reject);
    s.listen(0, '127.0.0.1', () => {
      const a = s.address();
      const port = typeof a === 'object' && a ? a.port : 0;
      s.close(() => resolve(port));
    });
  });
}

export interface BuiltServer {
  child: ChildProcessByStdio<null, Readable, Readable>;
  port: number;
  base: string;
  exited: Promise<{ code: number | null; signal: NodeJS.Signals | null }>;
  output(): string;
  errors(): string;
}

/** Start `node dist/server/main.js serve` and wait until /healthz answers (at most 20 s). */
export async function startBuiltServer(dbPath: string, env: Record<string, string> = {}): Promise<BuiltServer> {
  const port = await freePort();
  const child = spawn(process.execPath, [MAIN_JS, 'serve'], {
    cwd: ROOT,
    env: {
      PATH: process.env.PATH ?? '',
      PORT: String(port),
      HOST: '127.0.0.1',
      LOG_LEVEL: 'warn',
      SPLITBALLOT_DB: dbPath,
      SPLITBALLOT_ADMIN_KEY: ADMIN_SECRET,
      SPLITBALLOT_RATE_LIMIT_INGEST: '0',
      SPLITBALLOT_RATE_LIMIT_READ: '0',
      ...env,
    },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let stdout = '';
  let stderr = '';
  child.stdout.on('data', (d) => (stdout += d));
  child.stderr.on('data', (d) => (stderr += d));
  const exited = new Promise<{ code: number | null; signal: NodeJS.Signals | null }>((resolve) =>
    child.on('exit', (code, signal) => resolve({ code, signal })),
  );
  const base = `http://127.0.0.1:${port}`;
  const deadline = Date.now() + 20_000;
  let done = false;
  void exited.then(() => (done = true));
  for (;;) {
    if (done) throw new Error(`server exited before it listened: ${stderr}${stdout}`);
    try {
      const r = await fetch(`${base}/healthz`);
      if (r.ok) break;
    } catch {
      // not listening yet
    }
    if (Date.now() > deadline) {
      child.kill('SIGKILL');
      throw new Error(`server did not answer /healthz within 20 s: ${stderr}${stdout}`);
    }
    await new Promise((r) => setTimeout(r, 50));
  }
  return { child, port, base, exited, output: () => stdout, errors: () => stderr };
}

/** Run `node dist/server/main.js ARGS` to completion. */
export async function runBuiltCli(args: string[], env: Record<string, string>): Promise<{ code: number | null; stdout: string; stderr: string }> {
  const child = spawn(process.execPath, [MAIN_JS, ...args], {
    cwd: ROOT,
    env: { PATH: process.env.PATH ?? '', LOG_LEVEL: 'warn', ...env },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let stdout = '';
  let stderr = '';
  child.stdout.on('data', (d) => (stdout += d));
  child.stderr.on('data', (d) => (stderr += d));
  const code = await new Promise<number | null>((resolve) => child.on('exit', (c) => resolve(c)));
  return { code, stdout, stderr };
}

export const AUTH = { authorization: `Bearer ${ADMIN_SECRET}` };

/** The demo study (tests/helpers/water.ts) with only satisfaction required (cheap to post many of). */
export function waterDefinition(): Record<string, unknown> {
  const base = waterBillDefinition();
  const measures = (base.measures as { id: string }[]).map((m) => ({ ...m, required: m.id === 'satisfaction' }));
  return { ...base, measures };
}

/** Deterministic invented answers for response number n. */
export function answerFor(n: number): { condition: string; values: Record<string, number> } {
  return {
    condition: n % 2 === 0 ? 'bill-first' : 'service-first',
    values: { satisfaction: (n * 7) % 11, trust: 1 + ((n * 3) % 7), fair_price: ((n * 37) % 2000) / 10 },
  };
}

export async function postJson(url: string, body: unknown, headers: Record<string, string> = AUTH): Promise<{ status: number; body: unknown }> {
  const r = await fetch(url, { method: 'POST', headers: { ...headers, 'content-type': 'application/json' }, body: JSON.stringify(body) });
  const text = await r.text();
  let parsed: unknown = text;
  try {
    parsed = JSON.parse(text);
  } catch {
    // keep the text
  }
  return { status: r.status, body: parsed };
}
