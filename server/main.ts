#!/usr/bin/env node
/**
 * The `splitballot` executable (package.json bin; `npm start` = `splitballot serve`). All logic is in cli.ts.
 *
 * When the command has finished, the process exits with its code. A handle that someone forgot to close (a
 * timer, a socket) cannot keep a stopped server alive: after the command returns, the process gets one second
 * to drain its output and then exits anyway (the timer is unref'ed, so a clean exit is not delayed).
 */
import { runCli } from './cli/run.js';

function finish(code: number): void {
  process.exitCode = code;
  setTimeout(() => process.exit(code), 1000).unref();
}

runCli(process.argv.slice(2), { stdout: process.stdout, stderr: process.stderr, env: process.env }).then(finish, (err: unknown) => {
  process.stderr.write(`splitballot: unexpected error: ${err instanceof Error ? (err.stack ?? err.message) : String(err)}\n`);
  finish(1);
});
