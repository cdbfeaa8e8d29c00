/** splitballot keys create | list | revoke: API keys from the command line (secrets are printed once, never stored). */
import { parseArgs } from 'node:util';
import { generateSecret, hashSecret, SCOPES } from '../services/keys.js';
import { loadConfig } from '../config.js';
import type { Scope } from '../store/types.js';
import { describeDatabase, HELP, openStore, pad, UsageError, type CliIo } from './io.js';

export async function keysCommand(args: string[], io: CliIo): Promise<number> {
  const sub = args[0];
  const rest = args.slice(1);
  if (sub === undefined || sub === '--help' || sub === '-h') {
    io.stdout.write(HELP.keys);
    return sub === undefined ? 2 : 0;
  }
  if (sub === 'create') {
    const { values } = parseArgs({
      args: rest,
      options: { scope: { type: 'string' }, experiment: { type: 'string' }, label: { type: 'string' }, help: { type: 'boolean', short: 'h' } },
      strict: true,
      allowPositionals: false,
    });
    if (values.help) {
      io.stdout.write(HELP['keys create']);
      return 0;
    }
    if (!values.scope || !(SCOPES as readonly string[]).includes(values.scope)) {
      throw new UsageError(`--scope must be one of ${SCOPES.join(', ')}`);
    }
    const config = loadConfig(io.env);
    const store = await openStore(config, io);
    try {
      let experimentKey: number | null = null;
      if (values.experiment !== undefined) {
        const e = await store.experiments.getBySlug(values.experiment);
        if (!e) {
          io.stderr.write(
            `splitballot: there is no experiment ${values.experiment} in ${describeDatabase(config, io.env)}; ` +
              'the CLI must use the same SPLITBALLOT_DB as the server\n',
          );
          return 1;
        }
        experimentKey = e.key;
      }
      const secret = generateSecret();
      const key = await store.apiKeys.create({
        hash: hashSecret(secret),
        scope: values.scope as Scope,
        experimentKey,
        label: values.label ?? '',
        origin: 'cli',
        createdAt: new Date().toISOString(),
      });
      io.stdout.write(`${secret}\n`);
      io.stderr.write(
        `Created key ${key.id} (${key.scope}${key.experiment ? `, experiment ${key.experiment}` : ''}). ` +
          `The secret above is shown only this once; store it now.\n`,
      );
      return 0;
    } finally {
      await store.close();
    }
  }
  if (sub === 'list') {
    const { values } = parseArgs({ args: rest, options: { json: { type: 'boolean' }, help: { type: 'boolean', short: 'h' } }, strict: true });
    if (values.help) {
      io.stdout.write(HELP['keys list']);
      return 0;
    }
    const store = await openStore(loadConfig(io.env), io);
    try {
      const keys = await store.apiKeys.list();
      if (values.json) {
        io.stdout.write(`${JSON.stringify(keys, null, 2)}\n`);
        return 0;
      }
      const rows = [['ID', 'SCOPE', 'EXPERIMENT', 'ORIGIN', 'CREATED', 'LAST USED', 'REVOKED', 'LABEL']];
      for (const k of keys) {
        rows.push([String(k.id), k.scope, k.experiment ?? '*', k.origin, k.createdAt, k.lastUsedAt ?? '-', k.revokedAt ?? '-', k.label]);
      }
      const widths = rows[0].map((_, i) => Math.max(...rows.map((r) => r[i].length)));
      for (const r of rows) io.stdout.write(`${r.map((c, i) => (i === r.length - 1 ? c : pad(c, widths[i]))).join('  ')}\n`);
      return 0;
    } finally {
      await store.close();
    }
  }
  if (sub === 'revoke') {
    const { values, positionals } = parseArgs({ args: rest, options: { help: { type: 'boolean', short: 'h' } }, strict: true, allowPositionals: true });
    if (values.help) {
      io.stdout.write(HELP['keys revoke']);
      return 0;
    }
    if (positionals.length !== 1 || !/^\d+$/.test(positionals[0])) throw new UsageError('keys revoke needs one key id (a number; see "keys list")');
    const id = Number(positionals[0]);
    const store = await openStore(loadConfig(io.env), io);
    try {
      const r = await store.apiKeys.revoke(id, new Date().toISOString());
      if (r === 'not-found') {
        io.stderr.write(`splitballot: there is no key ${id}\n`);
        return 1;
      }
      io.stdout.write(r === 'revoked' ? `Revoked key ${id}.\n` : `Key ${id} was already revoked.\n`);
      return 0;
    } finally {
      await store.close();
    }
  }
  throw new UsageError(`unknown keys subcommand "${sub}"`);
}
