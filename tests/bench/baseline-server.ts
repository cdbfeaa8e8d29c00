/**
 * The ceiling of this stack for benchmark 1 (tests/bench/ingest-single.ts): a bare fastify route that does one
 * prepared better-sqlite3 INSERT per request, on a file database opened with the service's own pragmas
 * (server/store/sqlite/open.ts: WAL, synchronous = FULL, foreign keys, busy timeout). No validation, no idempotency, no
 * counters, no auth: what is left is HTTP + JSON + one fsync'ed commit. Started by the benchmark as a child:
 *   PORT=… BASELINE_DB=… node --import tsx tests/bench/baseline-server.ts
 */
import Fastify from 'fastify';
import { openDatabase } from '../../server/store/sqlite/open.js';

const db = openDatabase(process.env.BASELINE_DB ?? '/tmp/splitballot-baseline.db');
db.exec(`CREATE TABLE IF NOT EXISTS items (id INTEGER PRIMARY KEY, response_id TEXT NOT NULL, condition TEXT NOT NULL, body TEXT NOT NULL) STRICT`);
const insert = db.prepare<[string, string, string]>(`INSERT INTO items (response_id, condition, body) VALUES (?, ?, ?)`);

const app = Fastify({ logger: false });
app.get('/healthz', async () => ({ ok: true }));
app.post('/items', async (request, reply) => {
  const b = request.body as { responseId?: string; condition?: string; values?: unknown };
  const info = insert.run(String(b.responseId ?? ''), String(b.condition ?? ''), JSON.stringify(b.values ?? null));
  return reply.code(201).send({ id: Number(info.lastInsertRowid) });
});
const shutdown = (): void => {
  void app.close().then(() => {
    db.close();
    process.exit(0);
  });
};
process.on('SIGTERM', shutdown);
process.on('SIGINT', shutdown);
await app.listen({ port: Number(process.env.PORT ?? 3999), host: '127.0.0.1' });
