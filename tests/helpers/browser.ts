/**
 * Debian's Chromium for the browser tests: where it is (null when not installed, so a test file can skip loudly),
 * the flags this machine needs (no sandbox, no background networking), and a session on a fresh profile whose page
 * errors and console errors are collected for the test to assert on.
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { chromium, type BrowserContext, type Page } from 'playwright-core';

function findChromium(): string | null {
  for (const p of ['/usr/bin/chromium', '/usr/bin/chromium-browser']) if (existsSync(p)) return p;
  try {
    return execFileSync('sh', ['-c', 'command -v chromium || command -v chromium-browser'], { encoding: 'utf8' }).trim() || null;
  } catch {
    return null;
  }
}

/** The Chromium executable, or null when it is not installed. */
export const CHROMIUM: string | null = findChromium();

/** Where the browser tests write their screenshots (git-ignored). */
export const TEST_OUTPUT = join(fileURLToPath(new URL('../..', import.meta.url)), 'test-output');

export const CHROMIUM_ARGS = [
  '--headless',
  '--no-sandbox',
  '--disable-gpu',
  '--disable-quic',
  '--no-first-run',
  '--disable-background-networking',
  '--disable-component-update',
  '--disable-sync',
];

/** Say loudly that a browser test file is skipped (CI installs Chromium, so a skip there is a setup fault). */
export function warnWithoutChromium(file: string): void {
  if (!CHROMIUM) console.warn(`\n!! SKIPPED ${file}: Chromium was not found (apt-get install -y chromium)\n`);
}

export interface ChromiumSession {
  context: BrowserContext;
  page: Page;
  close(): Promise<void>;
}

/** Chromium on a fresh profile; page errors and console errors go into `problems`. */
export async function openChromium(
  problems: string[],
  options: { viewport?: { width: number; height: number }; acceptDownloads?: boolean } = {},
): Promise<ChromiumSession> {
  if (!CHROMIUM) throw new Error('Chromium is not installed');
  const profile = mkdtempSync(join(tmpdir(), 'splitballot-chromium-'));
  const context = await chromium.launchPersistentContext(profile, { executablePath: CHROMIUM, headless: true, args: CHROMIUM_ARGS, ...options });
  const page = context.pages()[0] ?? (await context.newPage());
  page.on('pageerror', (err) => problems.push(`page error: ${err.message}`));
  page.on('console', (msg) => {
    if (msg.type() === 'error') problems.push(`console error: ${msg.text()}`);
  });
  mkdirSync(TEST_OUTPUT, { recursive: true });
  return {
    context,
    page,
    async close() {
      await context.close();
      rmSync(profile, { recursive: true, force: true });
    },
  };
}
