#!/usr/bin/env node
/**
 * The `splitballot` executable (package.json bin; `npm start` = `splitballot serve`). All logic is in cli.ts.
 */
import { runCli } from './cli.js';

runCli(process.argv.slice(2), { stdout: process.stdout, stderr: process.stderr, env: process.env }).then(
  (code) => {
    process.exitCode = code;
  },
  (err: unknown) => {
    process.stderr.write(`splitballot: unexpected error: ${err instanceof Error ? (err.stack ?? err.message) : String(err)}\n`);
    process.exitCode = 1;
  },
);
